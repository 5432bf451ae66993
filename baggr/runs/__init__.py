"""Run directories: the journal, checkpoints, the job (detached or not), its lock and stop requests.

files       the names of a run directory's files; writing them atomically
lock        the job's flock on DIR/lock
rundir      a run directory, its settings (config.json), the data file's fingerprint
checkpoint  checkpoints and the kept trees appended to the trees file, written in the background; the fault hooks
job         the training job: resume, train, stop on a signal or a settled curve, save
detach      the job as its own process, and waiting for it to start
comparison  a comparison directory: its candidates (one run directory each) and comparison.json
compare_job the comparison's job: the data binned once, the candidates' jobs grown in interleaved blocks
journal     the journal's names, gathered for the dashboard (the one module of baggr.runs it imports);
            its parts: journal_lines (the line format), journal_writer, journal_reader (tailing),
            run_state (the folded state; downsample cuts its curve for a plot), job_status (the
            job's process, its status, the stop file). All pure Python.

The names the command and the tests use are gathered here, each loaded on first use, so that
`import baggr.runs.journal` (the dashboard) loads none of the rest.
"""
from importlib import import_module

_HOMES = {
    "files": ("CHECKPOINT", "CHECKPOINT_INFO", "CONFIG", "JOB_LOG", "JOURNAL", "LOCK", "MEMBERS", "MODEL",
              "RUN_FILES", "STOP", "DiskFullError", "write_json_atomic"),
    "lock": ("Lock",),
    "rundir": ("RunDir", "RunSettings", "TABLE_OPTIONS", "check_data", "create", "default_run_dir", "fingerprint",
               "init_config", "model_path", "status_words", "table_options"),
    "checkpoint": ("CHECKPOINT_FORMAT", "CHECKPOINT_VERSION", "CHUNK_FORMAT", "FAULT_CHECKPOINT", "FAULT_KILL",
                   "Checkpointer", "check_checkpoint_header", "read_checkpoint", "remove_checkpoint"),
    "job": ("Job", "Outcome", "fmt_seconds", "stable_now"),
    "detach": ("job_error_line", "spawn", "wait_started"),
    "comparison": ("COMPARISON", "Comparison", "is_comparison"),
    "baggr.errors": ("RunDirError",),
}
_HOME = {name: module for module, names in _HOMES.items() for name in names}

__all__ = ["CHECKPOINT", "CHECKPOINT_FORMAT", "CHECKPOINT_INFO", "CHECKPOINT_VERSION", "CHUNK_FORMAT", "CONFIG",
           "FAULT_CHECKPOINT", "FAULT_KILL", "JOB_LOG", "JOURNAL", "LOCK", "MEMBERS", "MODEL", "RUN_FILES", "STOP",
           "TABLE_OPTIONS", "COMPARISON",
           "Checkpointer", "Comparison", "DiskFullError", "Job", "Lock", "Outcome", "RunDir", "RunDirError",
           "RunSettings", "check_checkpoint_header", "check_data", "create", "default_run_dir", "fingerprint",
           "fmt_seconds", "init_config", "is_comparison", "job_error_line", "model_path", "read_checkpoint",
           "remove_checkpoint", "spawn", "stable_now", "status_words", "table_options",
           "wait_started", "write_json_atomic"]


def __getattr__(name):
    module = _HOME.get(name)
    if module is None:
        raise AttributeError(f"module 'baggr.runs' has no attribute {name!r}")
    value = getattr(import_module(module if "." in module else f"baggr.runs.{module}"), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
