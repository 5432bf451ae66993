"""`python -m baggr.cli`: the `baggr` command (the detached job starts this way too)."""
import sys

from baggr.cli.main import main

# Guarded: the worker processes of a local Dask cluster are spawned and import this module again.
if __name__ == "__main__":
    sys.exit(main())
