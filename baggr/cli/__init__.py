"""The `baggr` command (main), its progress lines (progress) and report text (report)."""
