"""The `baggr` command: options and main (main), the commands (commands), starting and following a job
(launch), its progress lines (progress) and report text (report)."""
