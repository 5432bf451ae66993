"""Run directories: the journal, checkpoints, the job (detached or not), its lock and stop requests.

The names the command and the tests use are gathered here; each lives in one module of this package.
"""
from baggr.runs.run import (CHECKPOINT, CHECKPOINT_FORMAT, CHECKPOINT_INFO, CHECKPOINT_VERSION, CHUNK_FORMAT,
                            CONFIG, FAULT_CHECKPOINT, FAULT_KILL, JOB_LOG, JOURNAL, LOCK, MEMBERS, MODEL, RUN_FILES,
                            STOP, Checkpointer, DiskFullError, Job, Lock, Outcome, RunDir, RunDirError, RunSettings,
                            check_checkpoint_header, check_data, create, default_run_dir, fingerprint, fmt_seconds,
                            init_config, job_error_line, read_checkpoint, remove_checkpoint, spawn, stable_now,
                            wait_started, write_json_atomic)

__all__ = ["CHECKPOINT", "CHECKPOINT_FORMAT", "CHECKPOINT_INFO", "CHECKPOINT_VERSION", "CHUNK_FORMAT", "CONFIG",
           "FAULT_CHECKPOINT", "FAULT_KILL", "JOB_LOG", "JOURNAL", "LOCK", "MEMBERS", "MODEL", "RUN_FILES", "STOP",
           "Checkpointer", "DiskFullError", "Job", "Lock", "Outcome", "RunDir", "RunDirError", "RunSettings",
           "check_checkpoint_header", "check_data", "create", "default_run_dir", "fingerprint", "fmt_seconds",
           "init_config", "job_error_line", "read_checkpoint", "remove_checkpoint", "spawn", "stable_now",
           "wait_started", "write_json_atomic"]
