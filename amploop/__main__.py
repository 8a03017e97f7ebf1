"""``python -m amploop``: the command line."""

from amploop.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
