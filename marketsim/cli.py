"""Command line: ``marketsim demo`` runs the built-in scenario end to end."""

from __future__ import annotations

import argparse
from collections.abc import Sequence

from marketsim.demo import run_demo


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``marketsim`` command."""
    parser = argparse.ArgumentParser(
        prog="marketsim",
        description="Bias and noise of A/B tests on two-sided marketplaces.",
    )
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser(
        "demo", help="run the built-in rehearsal-room scenario end to end"
    )
    demo.add_argument("--replications", type=int, default=40,
                      help="Monte Carlo replications (default 40)")
    demo.add_argument("--seed", type=int, default=2026, help="random seed (default 2026)")
    args = parser.parse_args(argv)
    if args.command == "demo":
        run_demo(replications=args.replications, seed=args.seed)
    return 0
