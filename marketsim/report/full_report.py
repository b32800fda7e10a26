"""The whole job on one scenario: study, balance sweep, design choice, horizon; a report.

:func:`write_full_report` is what ``marketsim demo`` (on the built-in scenario)
and ``marketsim report FILE`` (on a scenario file) run. Each section is a
function that prints its main figures and adds its tables and figures to the
Markdown report.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from marketsim import meanfield
from marketsim.designs import (
    CustomerSide,
    ListingSide,
    Switchback,
    TwoSided,
    TwoSidedFollowingBalance,
)
from marketsim.meanfield.figures import plot_balance_sweep
from marketsim.model import Market, Treatment
from marketsim.model.scenario_file import Scenario
from marketsim.planning import default_candidates, plan_horizon, power_table, readable_duration
from marketsim.planning.choice import DesignChoice, choice_from_result
from marketsim.randomness import SeedLike, spawn
from marketsim.report.calibration import calibration_section
from marketsim.report.markdown import Report
from marketsim.report.wording import coverage_sentence, standard_error_sentence
from marketsim.study import CAVEAT, Arm, Study, StudyResult, default_workers

DEFAULT_REPLICATIONS = 200
"""Replications of every study when neither the call nor the scenario file says."""

SWEEP_LISTINGS = 1000
"""The balance sweep uses the large-market limit of the market grown to at least this size."""


STANDARD_DESIGNS = (CustomerSide(0.5), ListingSide(0.5), TwoSided(0.5, 0.5),
                    TwoSidedFollowingBalance())
"""The designs of the report's first section and of its balance sweep (each with its own
estimators); the design choice compares them with the other candidates."""


def candidate_arms(scenario: Scenario) -> list[Arm]:
    """The scenario's candidate designs (its ``designs`` specs, or the standard grid)."""
    if scenario.designs is None:
        return default_candidates(scenario.market, scenario.horizon)
    build = {"customer-side": lambda s: CustomerSide(s["treated"]),
             "switchback": lambda s: Switchback(s["block_length"], burn_in=s["burn_in"],
                                                assignment=s["assignment"]),
             "listing-side": lambda s: ListingSide(s["treated"]),
             "two-sided": lambda s: TwoSided(s["customers"], s["listings"]),
             "two-sided-following-balance":
                 lambda s: TwoSidedFollowingBalance(s["customers"], s["listings"])}
    arms = {}
    for spec in scenario.designs:
        design = build[spec["design"]](spec)
        arms.setdefault(design.label, Arm(design))
    return list(arms.values())


def run_study(scenario: Scenario, replications: int, seed: SeedLike,
              workers: int) -> tuple[StudyResult, list[Arm]]:
    """One study of every candidate design and the standard designs over the planned
    horizon: section 1 shows the standard designs, section 3 ranks the candidates (one
    truth for the whole report). Returns the result and the candidates."""
    candidates = candidate_arms(scenario)
    known = {arm.label for arm in candidates}
    arms = candidates + [Arm(d) for d in STANDARD_DESIGNS if d.label not in known]
    study = Study(scenario.market, scenario.treatment, arms, horizon=scenario.horizon,
                  burn_in=scenario.burn_in)
    unit = scenario.time_unit
    print(f"Study: {len(study.arms)} candidate designs, {replications} replications of "
          f"{scenario.horizon:g} {unit}s measured after a {scenario.burn_in:g}-{unit} "
          f"burn-in, {workers} worker process(es)")
    return study.run(replications, seed=seed, workers=workers, progress=True), candidates


def rows_of(result: StudyResult, labels: set[str]) -> StudyResult:
    """The study restricted to the arms named ``labels``."""
    return replace(result, summary=result.summary[result.summary["arm"].isin(labels)]
                   .reset_index(drop=True),
                   replications=result.replications[result.replications["arm"].isin(labels)]
                   .reset_index(drop=True))


def format_summary(result: StudyResult) -> str:
    """The summary as a compact text table (one metric)."""
    rows = [("design", "estimator", "truth", "mean", "bias", "rel. bias", "sd", "rmse",
             "coverage")]
    for row in result.summary.itertuples(index=False):
        rows.append((
            row.arm, row.estimator, f"{row.truth:.3f}", f"{row.mean_estimate:.3f}",
            f"{row.bias:+.3f}", f"{row.relative_bias:+.0%}", f"{row.sd:.3f}",
            f"{row.rmse:.3f}", f"{row.coverage:.0%}",
        ))
    widths = [max(len(r[k]) for r in rows) for k in range(len(rows[0]))]
    lines = []
    for n, r in enumerate(rows):
        cells = [r[0].ljust(widths[0]), r[1].ljust(widths[1])]
        cells += [value.rjust(width) for value, width in zip(r[2:], widths[2:])]
        lines.append("  " + "  ".join(cells))
        if n == 0:
            lines.append("  " + "  ".join("-" * width for width in widths))
    return "\n".join(lines)


def print_study(result: StudyResult, unit: str) -> None:
    """Print the truth and the summary table of a study."""
    truth = result.truth.iloc[0]
    print(f"  booking rate, global control:   {truth['global_control']:7.3f} per {unit}")
    print(f"  booking rate, global treatment: {truth['global_treatment']:7.3f} per {unit}")
    print(f"  global treatment effect:        {truth['value']:7.3f} per {unit} "
          f"(Monte Carlo s.e. {truth['mc_se']:.3f})")
    worst = result.summary["bias_mc_se"].max()
    print(f"Bookings per {unit}, {result.completed} replications (bias Monte Carlo s.e. "
          f"at most {worst:.3f}; coverage of the nominal 95% interval):")
    print(format_summary(result))


def study_section(report: Report, result: StudyResult, scenario: Scenario) -> None:
    """The study's table, figure and power table in the report."""
    truth = result.truth.iloc[0]
    unit = scenario.time_unit
    report.heading("1. How biased and how noisy is each design?")
    report.text(
        f"Each of {result.completed} replications simulates a horizon of "
        f"{readable_duration(scenario.horizon, unit)} of both global worlds and of every "
        f"design; the horizon is the measured window, after a {scenario.burn_in:g}-{unit} "
        "burn-in that is simulated but not measured. True global treatment effect: "
        f"**{truth['value']:.3f} bookings per {unit}** (Monte Carlo s.e. {truth['mc_se']:.3f}), "
        f"from {truth['global_control']:.3f} to {truth['global_treatment']:.3f}; the same "
        "simulations serve the design choice of section 3, so the report has one truth. "
        "Relative bias is the bias in percent of that effect; `mean_naive_se` is the "
        "standard error an analyst would report; `coverage` is how often the nominal 95% "
        "interval contains the truth. `mean_batch_se` and `batch_coverage` are the same for "
        f"the batch-means standard error, computed from one experiment's {result.batches} "
        "consecutive batches of its window, which allows for the market's memory."
    )
    columns = ["arm", "estimator", "mean_estimate", "bias", "bias_mc_se", "relative_bias",
               "sd", "mean_naive_se", "rmse", "coverage", "mean_batch_se", "batch_coverage"]
    report.table(result.summary[columns], {
        "mean_estimate": "{:.3f}", "bias": "{:+.3f}", "bias_mc_se": "{:.3f}",
        "relative_bias": "{:+.0%}", "sd": "{:.3f}", "mean_naive_se": "{:.3f}",
        "rmse": "{:.3f}", "coverage": "{:.0%}", "mean_batch_se": "{:.3f}",
        "batch_coverage": "{:.0%}"})
    report.figure(result.plot(), "study.png",
                  "Relative bias (in % of the true effect) and RMSE per design and estimator "
                  "(+-2 Monte Carlo s.e.)")
    report.text(coverage_sentence(result.summary))
    report.text(standard_error_sentence(result.summary))
    report.text(
        f"What the analyst's test will do over {scenario.horizon:g} {unit}s: a two-sided test "
        "at the 5% level that divides the estimate by the standard error it reports "
        "(`mean_naive_se`), not by its real spread. `power`: the chance of a significant "
        "result; `type_s`: the chance that a significant result has the wrong sign; `type_m`: "
        "how many times the true effect a significant result is on average (Gelman & Carlin "
        "2014); `wrong_sign`: the chance that one experiment gives a significant result of "
        "the wrong sign; `overstated`: the chance that it gives a significant result more "
        "than twice the true effect. `observed_power` counts significant results directly "
        "over the replications (a check on the normal model). `ideal_test_power` is for a "
        "test that divides by the real spread, which no analyst can run: it is shown only to "
        "compare. A feature with no effect creates no interference in this model, so it is "
        "declared significant at most about 5% of the time (less where the reported standard "
        "error is conservative): the risk of a bias is overstating a real effect, not "
        "inventing one."
    )
    powers = power_table(result)
    report.table(powers[["arm", "estimator", "power", "type_s", "type_m", "wrong_sign",
                         "overstated", "observed_power", "ideal_test_power"]],
                 {"power": "{:.2f}", "type_s": "{:.2g}", "type_m": "{:.2f}",
                  "wrong_sign": "{:.2g}", "overstated": "{:.2f}",
                  "observed_power": "{:.2f}", "ideal_test_power": "{:.2f}"})


def crossing_finding(market: Market, treatment: Treatment) -> str:
    """Where customer-side and listing-side randomization are equally biased, and which
    side of that this market's balance is on (root-finding on the large-market curves)."""
    one_sided = (CustomerSide(0.5), ListingSide(0.5))
    crossings = meanfield.crossover_balances(market, treatment, *one_sided)
    balance = market.balance
    if len(crossings) == 0:
        lower = [abs(float(meanfield.expected_estimates(market, treatment, d)
                           ["relative_bias"].iloc[0])) for d in one_sided]
        side = "customer-side" if lower[0] < lower[1] else "listing-side"
        return (f"{side.capitalize()} randomization is the less biased one-sided design at "
                "every balance from 0.01 to 100")
    points = ", ".join(f"{b:.3g}" for b in crossings)
    first = crossings[0]
    where = ("below" if balance < first else "above" if len(crossings) == 1 else "beyond")
    return (f"The one-sided designs are equally biased at a balance of {points} (the root of "
            "the large-market curves, to three significant digits); customer-side "
            f"randomization is the less biased one below {first:.3g}, listing-side above. "
            f"This market's balance, {balance:.3g}, is {where} that crossing")


def sweep_section(report: Report, scenario: Scenario) -> pd.DataFrame:
    """Large-market bias of the standard designs over balance, in the report."""
    market = scenario.market
    large = market.scaled(max(1.0, SWEEP_LISTINGS / market.n_listings))
    table = meanfield.sweep_balance(large, scenario.treatment, list(STANDARD_DESIGNS),
                                    np.logspace(-2, 2, 41))
    finding = crossing_finding(large, scenario.treatment)
    following = TwoSided.for_balance(market.balance)
    report.heading("2. How does the bias depend on the balance of demand and supply?")
    report.text(
        f"The large-market limit of the same market ({large.n_listings:,} listings, no Monte "
        "Carlo error), with the arrival rate varied; the dotted line marks this market's "
        f"balance, {market.balance:.3g}. {finding}. Two-sided randomization with fractions "
        "that follow balance becomes customer-side when demand is scarce and listing-side "
        f"when supply is scarce; at this market's balance it treats {following.customers:.0%} "
        f"of customers and {following.listings:.0%} of listings."
    )
    report.figure(plot_balance_sweep(table, ylim=(-1.0, 3.0), market_balance=market.balance),
                  "balance_sweep.png",
                  "Relative bias in percent of the true effect against balance (large-market "
                  "limit; axis cut at -100% and +300%; dotted line: this market)")
    print(f"Balance sweep: {finding[0].lower() + finding[1:]}.")
    return table


def plan_section(report: Report, scenario: Scenario, result: StudyResult, arms: list[Arm],
                 replications: int, seed: SeedLike, workers: int) -> DesignChoice:
    """Design choice at the planned horizon (from the study) and the horizon for the
    minimum effect; returns the choice."""
    market, treatment, unit = scenario.market, scenario.treatment, scenario.time_unit
    choice = choice_from_result(rows_of(result, {arm.label for arm in arms}), arms, market)
    best = choice.recommended
    report.heading("3. Which design, and how long to run it?")
    report.text(
        f"All candidate designs at the planned horizon of "
        f"{readable_duration(scenario.horizon, unit)}, from the simulations of section 1, "
        "best first. `bias_share` is the share of the squared RMSE that is squared bias "
        "(near 100%, a longer test will not help); `tied` marks candidates within two paired "
        "Monte Carlo standard errors of the smallest RMSE."
    )
    report.table(choice.table[["rank", "arm", "estimator", "bias", "sd", "rmse",
                               "rmse_mc_se", "bias_share", "tied"]].head(8),
                 {"bias": "{:+.3f}", "sd": "{:.3f}", "rmse": "{:.3f}",
                  "rmse_mc_se": "{:.3f}", "bias_share": "{:.0%}"})
    report.figure(choice.plot(), "design_choice.png",
                  "RMSE at the planned horizon, split into bias and noise")
    report.text(choice.report().replace("\n", "\n\n"))
    kind, value = scenario.target or ("minimum_effect", scenario.minimum_effect)
    pilot = scenario.horizon / 4
    if isinstance(choice.design, Switchback):  # a pilot must hold two of its blocks
        pilot = max(pilot, 2.0 * choice.design.block_length)
    plan = plan_horizon(market, treatment, choice, pilot_horizon=pilot,
                        burn_in=scenario.burn_in, replications=replications, seed=seed,
                        workers=workers, progress=True, time_unit=unit, **{kind: value})
    report.text(
        f"How long must **{best['arm']}** with the {best['estimator']} estimator run? "
        f"Target: {plan.target}. The horizon is the measured window "
        f"after the burn-in. The plan runs its own pilots at {pilot:g} and "
        f"{4 * pilot:g} {unit}s, so its true effect "
        f"({plan.table['truth'].iloc[0]:.3g}) is another Monte Carlo estimate of the effect "
        "of section 1 and differs from it by Monte Carlo error."
    )
    report.text(plan.report().replace("\n", "\n\n"))
    print(choice.report())
    print(plan.report())
    return choice


def write_full_report(scenario: Scenario, replications: int | None = None,
                      seed: SeedLike = 2026,
                      out: str | Path = "marketsim-report",
                      workers: int | None = None, calibration: bool = False) -> Path:
    """Run the whole job on a scenario and write it up.

    Scores every candidate design over the planned horizon (one study, one
    truth: the standard designs are shown first, then all are ranked), sweeps
    balance in the large-market limit, and sizes the recommended design for the
    minimum effect (the horizon is the measured window after the burn-in); prints
    the main figures and writes ``report.md`` with its PNG figures into ``out``.

    Parameters
    ----------
    scenario : Scenario
        The market, the feature and the planned experiment.
    replications : int, optional
        Monte Carlo replications of each study (>= 2; default: the scenario's
        ``replications``, else :data:`DEFAULT_REPLICATIONS`).
    seed : int, SeedSequence, Generator or None
        Seed of the whole run.
    out : str or Path
        Folder for the report (created if needed).
    workers : int, optional
        Worker processes (default: the usable cores, at most 4).
    calibration : bool
        Add the calibration step: a log simulated from the market is calibrated and
        the design is chosen over plausible markets (the demo does this).

    Returns
    -------
    Path
        The report file.
    """
    market, treatment = scenario.market, scenario.treatment
    if replications is None:
        replications = scenario.replications or DEFAULT_REPLICATIONS
    workers = min(4, default_workers()) if workers is None else workers
    study_seed, plan_seed, calibration_seed = spawn(seed, 3)
    report = Report(out, f"Experiment report: {scenario.name}")
    report.text(f"Feature under test: {treatment}. Market: {market}. Rates and times are "
                f"per {scenario.time_unit}.")
    report.table(market.summary())
    print(f"Scenario: {scenario.name}")
    print(f"  {market}")
    print(f"  feature under test: {treatment}")
    result, arms = run_study(scenario, replications, study_seed, workers)
    standard = rows_of(result, {design.label for design in STANDARD_DESIGNS})
    print_study(standard, scenario.time_unit)
    study_section(report, standard, scenario)
    sweep_section(report, scenario)
    choice = plan_section(report, scenario, result, arms, replications, plan_seed, workers)
    if calibration:
        calibration_section(report, scenario, replications, calibration_seed, workers,
                            choice)
    report.heading("What these numbers are worth")
    report.text(CAVEAT)
    path = report.write()
    print(f"Caveat: {CAVEAT}")
    print(f"Report: {path.resolve()}")
    return path
