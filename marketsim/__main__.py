"""``python -m marketsim``: the command line."""

from marketsim.cli import main

raise SystemExit(main())
