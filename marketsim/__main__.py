"""``python -m marketsim``: the command line."""

from marketsim.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
