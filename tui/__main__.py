"""`python -m tui RUN_DIR`: the dashboard of one run directory."""
import sys

from baggr.errors import BaggrError

from . import watch


def main(argv=None) -> int:
    args = sys.argv[1:] if argv is None else argv
    if len(args) != 1:
        print("usage: python -m tui RUN_DIR", file=sys.stderr)
        return 2
    try:
        return watch(args[0])
    except BaggrError as exc:
        print(f"baggr: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
