"""Command line.

``marketsim demo``
    The whole job on the built-in (invented) rehearsal-room scenario.
``marketsim report FILE``
    The same on a scenario file (see :mod:`marketsim.model.scenario_file`).
``marketsim scenario-template``
    Print the built-in scenario as a scenario file to start from.
``marketsim describe``
    What every key of a scenario file means.
``marketsim --version``
    The installed version.
``marketsim calibrate FOLDER``
    Calibrate a market from platform logs (listings, stays, sessions and optionally
    impressions as .csv or .parquet files): print the parameters and fit checks and
    write a scenario file that ``marketsim report`` accepts.
``marketsim analyze FOLDER``
    The estimates of an experiment that was run, from its logs (``treated`` columns).
``marketsim study SCENARIO``
    The study of the standard designs over the planned horizon, on this machine
    or a Dask cluster (``--dask ADDRESS``), optionally into a results store
    (``--store DIR``) that a killed or interrupted run resumes (``--resume``).
``marketsim sweep SCENARIO --values ...``
    The same designs simulated at several balances (or arrival rates).

Exit codes (study and sweep): 0 finished; 1 the run failed (e.g. workers kept dying, the cluster
was unreachable); 2 usage error (bad option, scenario file or store; nothing
ran); 3 refused by ``--max-seconds`` or ``--max-events`` (the estimate is
printed); 130 interrupted (Ctrl-C): what finished is printed and, with
``--store``, kept for ``--resume``.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from importlib.metadata import version
from pathlib import Path

from marketsim.calibration import analyze, calibrate, read_log_folder
from marketsim.model import Treatment
from marketsim.model.plan_spec import describe_keys
from marketsim.model.scenario_file import load_scenario
from marketsim.model.scenarios import rehearsal_rooms_scenario
from marketsim.report.calibration import analysis_text, calibrated_scenario, calibration_text
from marketsim.report.commands import (
    BUILTIN,
    EXIT,
    add_run_options,
    run_study_command,
    run_sweep_command,
)
from marketsim.report.full_report import DEFAULT_REPLICATIONS, write_full_report

REPLICATIONS = DEFAULT_REPLICATIONS
SEED = 2026
OUT = "marketsim-report"


def _run_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--replications", type=int, default=None,
                        help="Monte Carlo replications of every study, >= 2 (default: the "
                             f"scenario file's experiment.replications, else {REPLICATIONS})")
    parser.add_argument("--seed", type=int, default=SEED, help=f"random seed (default {SEED})")
    parser.add_argument("--out", default=OUT,
                        help=f"folder for the report and its figures (default ./{OUT})")
    parser.add_argument("--workers", type=int, default=None,
                        help="worker processes (default: usable cores, at most 4)")


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``marketsim`` command."""
    parser = argparse.ArgumentParser(
        prog="marketsim",
        description="Bias and noise of A/B tests on two-sided marketplaces. The horizon "
                    "of an experiment is its measured window, after a burn-in that is "
                    "simulated but not measured; horizons are in the scenario's time unit "
                    "(long ones also in days, weeks or years).",
    )
    parser.add_argument("--version", action="version", version=f"marketsim {version('marketsim')}")
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="the whole job on the built-in invented scenario")
    _run_options(demo)
    report = commands.add_parser("report", help="the whole job on a scenario file (JSON)")
    report.add_argument("scenario", help="path of the scenario file")
    _run_options(report)
    commands.add_parser("scenario-template",
                        help="print the built-in scenario as a file to start from")
    commands.add_parser("describe", help="what every key of a scenario file means")
    _log_commands(commands)
    study = commands.add_parser("study", help="study of the standard designs (store, Dask)")
    add_run_options(study)
    sweep = commands.add_parser("sweep", help="the designs simulated over balance (store, Dask)")
    add_run_options(sweep)
    sweep.add_argument("--values", type=float, nargs="+", required=True,
                       help="values of the swept parameter, e.g. 0.25 0.5 1 2 4")
    sweep.add_argument("--parameter", choices=("balance", "arrival_rate"), default="balance",
                       help="market parameter to sweep (default balance)")
    args = parser.parse_args(argv)
    if args.command == "scenario-template":
        sys.stdout.write(rehearsal_rooms_scenario().to_json())
        return 0
    if args.command == "describe":
        print(describe_keys())
        return 0
    if args.command in ("calibrate", "analyze"):
        return _run_log_command(args, commands.choices[args.command])
    if args.command in ("study", "sweep"):
        command = study if args.command == "study" else sweep
        try:
            scenario = (rehearsal_rooms_scenario() if args.scenario == BUILTIN
                        else load_scenario(args.scenario))
        except ValueError as error:
            command.error(str(error))
        run = run_study_command if args.command == "study" else run_sweep_command
        code, message = run(scenario, args)
        if code == EXIT["usage"]:
            command.error(message)
        if message:
            print(message, file=sys.stderr)
        return code
    command = demo if args.command == "demo" else report
    if args.replications is not None and args.replications < 2:
        command.error(f"--replications must be a whole number >= 2, got {args.replications}")
    if args.workers is not None and args.workers < 1:
        command.error(f"--workers must be a whole number >= 1, got {args.workers}")
    if args.seed < 0:
        command.error(f"--seed must be a whole number >= 0, got {args.seed}")
    if args.command == "demo":
        scenario = rehearsal_rooms_scenario()
    else:
        try:
            scenario = load_scenario(args.scenario)
        except ValueError as error:
            command.error(str(error))
    try:
        Path(args.out).mkdir(parents=True, exist_ok=True)
    except OSError as error:
        command.error(f"--out must be a folder that can be created, got {args.out!r}: "
                      f"{error.strerror or error}")
    if args.command == "demo":
        print("The scenario and its numbers are invented.")
    try:
        write_full_report(scenario, replications=args.replications, seed=args.seed,
                          out=args.out, workers=args.workers,
                          calibration=args.command == "demo")
    except ValueError as error:
        # e.g. a market too small for the report's designs; the library's messages
        # name the cause, so say it as a usage error rather than a traceback
        command.error(f"the report cannot run on this scenario: {error}")
    return 0


def _log_commands(commands) -> None:
    calibrate_ = commands.add_parser(
        "calibrate", help="calibrate a market from platform logs in a folder")
    calibrate_.add_argument("folder", help="folder with listings, stays, sessions (and "
                            "impressions) as .csv or .parquet")
    calibrate_.add_argument("--consideration", type=float, default=None,
                            help="consideration probability, needed without impressions")
    calibrate_.add_argument("--scenario", default="calibrated-scenario.json",
                            help="scenario file to write (default ./calibrated-scenario.json)")
    calibrate_.add_argument("--utility-shift", type=float, default=0.1,
                            help="feature to plan for, as a utility shift (default 0.1)")
    calibrate_.add_argument("--time-unit", default="hour", help="time unit of the logs")
    analyze_ = commands.add_parser(
        "analyze", help="estimates of an experiment that was run, from its logs")
    analyze_.add_argument("folder", help="folder with the experiment's logs (treated columns)")
    analyze_.add_argument("--baseline", default=None,
                          help="folder of logs without the experiment to calibrate the "
                               "market and add each estimator's expected bias")


def _run_log_command(args, command: argparse.ArgumentParser) -> int:
    try:
        tables = read_log_folder(args.folder)
        if args.command == "analyze":
            fit = None
            if args.baseline is not None:
                fit = calibrate(**read_log_folder(args.baseline))
            print(analysis_text(analyze(tables["sessions"], tables["stays"],
                                        tables["listings"], fit)))
            return 0
        fit = calibrate(**tables, consideration=args.consideration)
        print(calibration_text(fit))
        window = fit.arrivals.counts.sum() / fit.arrivals.rate
        scenario = calibrated_scenario(
            fit, name=f"calibrated from {args.folder}",
            treatment=Treatment(utility_shift=args.utility_shift),
            horizon=float(window), burn_in=float(5 * fit.market.mean_busy_time.max()),
            minimum_effect=float(0.05 * fit.checks.bookings.logged_rate.sum()),
            time_unit=args.time_unit)
        Path(args.scenario).write_text(scenario.to_json(), encoding="utf-8")
    except ValueError as error:
        command.error(str(error))
    print(f"Scenario file: {Path(args.scenario).resolve()} (the feature, horizon, burn-in "
          "and minimum effect in it are placeholders: edit them, then run "
          f"marketsim report {args.scenario})")
    return 0
