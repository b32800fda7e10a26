"""Command line: ``marketsim demo`` runs the whole job on the built-in scenario."""

from __future__ import annotations

import argparse
from collections.abc import Sequence

from marketsim.demo import OUT, REPLICATIONS, SEED, run_demo


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
    demo.add_argument("--replications", type=int, default=REPLICATIONS,
                      help=f"Monte Carlo replications, >= 2 (default {REPLICATIONS})")
    demo.add_argument("--seed", type=int, default=SEED, help=f"random seed (default {SEED})")
    demo.add_argument("--out", default=OUT,
                      help=f"folder for the report and its figures (default ./{OUT})")
    demo.add_argument("--workers", type=int, default=None,
                      help="worker processes (default: usable cores, at most 4)")
    args = parser.parse_args(argv)
    if args.command == "demo":
        if args.replications < 2:
            parser.error(f"--replications must be a whole number >= 2, got {args.replications}")
        if args.workers is not None and args.workers < 1:
            parser.error(f"--workers must be a whole number >= 1, got {args.workers}")
        run_demo(replications=args.replications, seed=args.seed, out=args.out,
                 workers=args.workers)
    return 0
