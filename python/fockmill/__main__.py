"""``python -m fockmill``: the command-line tool (see :mod:`fockmill.cli`)."""

from fockmill.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
