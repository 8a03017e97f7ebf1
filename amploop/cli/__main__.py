"""``python -m amploop.cli``: the same command line as ``amploop``."""

from amploop.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
