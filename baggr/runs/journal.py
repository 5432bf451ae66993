"""The journal of a run: one JSON line per event, its writer, its tailing reader and the folded run state.

Pure Python (no numpy, no numba): the dashboard imports this and nothing else of the engine.
See the run-directory notes in DESIGN.md for the events and their fields. The parts live in
journal_lines (the format), journal_writer, journal_reader, run_state (+ downsample, and
measure_points: the measures and importance the member lines carry) and job_status (the job's process and stop requests); this module gathers their names.
"""
from baggr.errors import RunDirError
from baggr.runs.downsample import bucket_edges, bucket_plan, downsample
from baggr.runs.files import JOURNAL, STOP
from baggr.runs.job_status import job_status, pid_alive, request_stop, same_host, stop_requested
from baggr.runs.journal_lines import END_STATUSES, STATUSES, cluster_of, dumps, grown_on, grown_on_rows
from baggr.runs.journal_reader import JournalReader
from baggr.runs.journal_writer import JournalWriter
from baggr.runs.measure_points import BY_TASK as MEASURES_BY_TASK, LABELS as MEASURE_LABELS, chosen as chosen_measure
from baggr.runs.run_state import RunState, class_interval, read_state

__all__ = ["END_STATUSES", "JOURNAL", "MEASURE_LABELS", "MEASURES_BY_TASK", "STATUSES", "STOP", "JournalReader", "JournalWriter", "RunDirError",
           "RunState", "bucket_edges", "bucket_plan", "chosen_measure", "class_interval", "cluster_of", "downsample", "dumps", "grown_on", "grown_on_rows", "job_status",
           "pid_alive", "read_state", "request_stop", "same_host", "stop_requested"]
