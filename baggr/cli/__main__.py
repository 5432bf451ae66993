"""`python -m baggr.cli`: the `baggr` command (the detached job starts this way too)."""
import sys

from baggr.cli.main import main

sys.exit(main())
