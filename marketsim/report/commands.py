"""The ``study`` and ``sweep`` commands: options, results store and resume, exit codes.

Both print their table (and write it as CSV with ``--out``) and return an exit
code with a message: 0 finished; 1 the run failed (workers kept dying, the
cluster went away); 2 usage error, nothing ran (bad option, or a store made for
another question); 3 refused by ``--max-seconds`` or ``--max-events`` (the
message gives the estimate, from the first replications); 130 interrupted by
Ctrl-C, what finished is printed and, with ``--store``, kept there for
``--resume``.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from marketsim.model.scenario_file import Scenario
from marketsim.planning import sweep
from marketsim.report.full_report import STANDARD_DESIGNS
from marketsim.study import Study
from marketsim.study.guards import RunRefused, limits
from marketsim.study.store import MANIFEST, read_manifest

BUILTIN = "builtin"
"""The SCENARIO argument that names the built-in invented scenario."""

REPLICATIONS = 200
SEED = 2026
EXIT = {"ok": 0, "failed": 1, "usage": 2, "refused": 3, "interrupted": 130}
SWEEP_SHOWN = ["value", "balance", "arm", "estimator", "bias", "bias_mc_se", "sd", "rmse",
               "coverage", "replications"]


def add_run_options(parser: argparse.ArgumentParser) -> None:
    """The scenario and the options shared by ``study`` and ``sweep``."""
    parser.add_argument("scenario", help=f"scenario file (JSON), or {BUILTIN!r} for the "
                                         "built-in invented scenario")
    parser.add_argument("--replications", type=int, default=None,
                        help=f"replications (per point), >= 2 (default {REPLICATIONS}, or "
                             "the last run's with --resume)")
    parser.add_argument("--seed", type=int, default=None,
                        help=f"random seed (default {SEED}, or the store's with --resume)")
    parser.add_argument("--workers", type=int, default=1,
                        help="local worker processes (default 1)")
    parser.add_argument("--store", default=None,
                        help="results store folder: finished replications are kept there")
    parser.add_argument("--resume", action="store_true",
                        help="continue the run held in --store (only what is missing runs)")
    parser.add_argument("--dask", metavar="ADDRESS", default=None,
                        help="run on the Dask cluster whose scheduler is at ADDRESS "
                             "(e.g. tcp://10.0.0.5:8786)")
    parser.add_argument("--max-seconds", type=float, default=None,
                        help="refuse (exit 3) a run estimated to take longer (wall seconds)")
    parser.add_argument("--max-events", type=int, default=None,
                        help="refuse (exit 3) a run estimated to simulate more events")
    parser.add_argument("--out", default=None, help="also write the table to this CSV file")


def run_options(args: argparse.Namespace) -> dict:
    """Keyword arguments of the run, checked; ``ValueError`` says what is wrong."""
    store = args.store
    held = store is not None and (Path(store) / MANIFEST).exists()
    replications, seed = args.replications, args.seed
    if args.resume and store is None:
        raise ValueError("--resume needs --store DIR (the store to resume)")
    if args.resume and not held:
        raise ValueError(f"--resume: {store!r} holds no results store to resume")
    if held and not args.resume:
        raise ValueError(f"--store {store!r} already holds results: add --resume to continue "
                         "them, or choose another folder")
    if held:
        runs = read_manifest(store)["runs"]
        if replications is None and runs:
            replications = int(runs[-1]["replications"])
    else:
        seed = SEED if seed is None else seed
    replications = REPLICATIONS if replications is None else replications
    if replications < 2:
        raise ValueError(f"--replications must be a whole number >= 2, got {replications}")
    if args.workers < 1:
        raise ValueError(f"--workers must be a whole number >= 1, got {args.workers}")
    if seed is not None and seed < 0:
        raise ValueError(f"--seed must be a whole number >= 0, got {seed}")
    max_seconds, max_events = limits(args.max_seconds, args.max_events)
    return {"replications": replications, "seed": seed, "workers": args.workers,
            "store": store, "backend": "local" if args.dask is None else "dask",
            "client": args.dask, "max_seconds": max_seconds, "max_events": max_events}


def run_study_command(scenario: Scenario, args: argparse.Namespace) -> tuple[int, str]:
    """``marketsim study``: the standard designs over the scenario's planned horizon."""
    try:
        options = run_options(args)
        study = Study(scenario.market, scenario.treatment, list(STANDARD_DESIGNS),
                      horizon=scenario.horizon, burn_in=scenario.burn_in)
    except ValueError as error:
        return EXIT["usage"], str(error)
    count = options.pop("replications")
    print(f"Study of {scenario.name}: {len(study.arms)} designs, {count} replications")
    try:
        result = study.run(count, progress=True, **options)
    except RunRefused as error:
        return EXIT["refused"], _refused(error, options)
    except KeyboardInterrupt:
        return EXIT["interrupted"], _interrupted("fewer than 2 replications", options)
    except ValueError as error:
        return EXIT["usage"], str(error)
    except (RuntimeError, OSError) as error:
        return EXIT["failed"], f"the study failed: {error}"
    print(result.overview().to_string(index=False))
    print(result.caveats)
    _write(result.summary, args.out)
    if result.interrupted:
        return EXIT["interrupted"], _interrupted(
            f"{result.completed} of {result.requested} replications", options)
    return EXIT["ok"], ""


def run_sweep_command(scenario: Scenario, args: argparse.Namespace) -> tuple[int, str]:
    """``marketsim sweep``: the designs simulated at each value of balance or arrival rate."""
    try:
        options = run_options(args)
    except ValueError as error:
        return EXIT["usage"], str(error)
    count = options.pop("replications")
    arms = list(STANDARD_DESIGNS)
    print(f"Sweep of {scenario.name} over {args.parameter}: {len(args.values)} points x "
          f"{count} replications")
    try:
        table = sweep(scenario.market, scenario.treatment, arms, args.values,
                      parameter=args.parameter, mode="simulation", horizon=scenario.horizon,
                      burn_in=scenario.burn_in, replications=count, progress=True,
                      **options)
    except RunRefused as error:
        return EXIT["refused"], _refused(error, options)
    except KeyboardInterrupt:
        return EXIT["interrupted"], _interrupted("no point", options)
    except ValueError as error:
        return EXIT["usage"], str(error)
    except (RuntimeError, OSError) as error:
        return EXIT["failed"], f"the sweep failed: {error}"
    print(table[SWEEP_SHOWN].to_string(index=False, float_format=lambda x: f"{x:.4g}"))
    _write(table, args.out)
    points = table.groupby("value", sort=False)["replications"].min()
    if len(points) < len(args.values) or (points < count).any():
        return EXIT["interrupted"], _interrupted(
            f"{int((points == count).sum())} of {len(args.values)} points", options)
    return EXIT["ok"], ""


def _interrupted(finished: str, options: dict) -> str:
    kept = (f"; they are kept in {options['store']!r}: run the same command with --resume to "
            "finish" if options["store"] is not None else "")
    return f"interrupted: {finished} finished{kept}"


def _refused(error: RunRefused, options: dict) -> str:
    kept = (f"; the replications it ran are kept in {options['store']!r} (--resume with "
            "higher limits goes on)" if options["store"] is not None else "")
    return f"refused: {error}{kept}"


def _write(table: pd.DataFrame, out: str | None) -> None:
    if out is not None:
        table.to_csv(out, index=False)
