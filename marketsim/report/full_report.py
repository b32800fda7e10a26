"""The whole job on one scenario: study, balance sweep, design choice, horizon; a report.

:func:`write_full_report` is what ``marketsim demo`` (on the built-in scenario)
and ``marketsim report FILE`` (on a scenario file) run. Each section is a
function that prints its main figures and adds its tables and figures to the
Markdown report.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from marketsim import meanfield
from marketsim.designs import CustomerSide, ListingSide, TwoSided
from marketsim.estimators import (
    CustomerSideEstimator,
    ListingSideEstimator,
    TwoSidedCorrected,
    TwoSidedNaive,
)
from marketsim.meanfield.figures import plot_balance_sweep
from marketsim.model.scenario_file import Scenario
from marketsim.planning import choose_design, default_candidates, plan_horizon, power_table
from marketsim.randomness import SeedLike, spawn
from marketsim.report.calibration import calibration_section
from marketsim.report.markdown import Report
from marketsim.report.wording import coverage_sentence
from marketsim.study import CAVEAT, Arm, Study, StudyResult, default_workers

SWEEP_LISTINGS = 1000
"""The balance sweep uses the large-market limit of the market grown to at least this size."""


def study_arms(scenario: Scenario) -> list[Arm]:
    """Customer-side, listing-side and two two-sided designs, each with its own
    estimators."""
    two_sided = [TwoSidedNaive(), TwoSidedCorrected(k=1), TwoSidedCorrected(k=2)]
    following = TwoSided.for_balance(scenario.market.balance)
    return [
        Arm(CustomerSide(0.5), [CustomerSideEstimator()], name="customer-side 0.5"),
        Arm(ListingSide(0.5), [ListingSideEstimator()], name="listing-side 0.5"),
        Arm(TwoSided(0.5, 0.5), two_sided, name="two-sided 0.5/0.5"),
        Arm(following, two_sided,
            name=f"two-sided for balance {following.customers:.2f}/{following.listings:.2f}"),
    ]


def run_study(scenario: Scenario, replications: int, seed: SeedLike,
              workers: int) -> StudyResult:
    """Score the standard designs on the scenario over the planned horizon."""
    study = Study(scenario.market, scenario.treatment, study_arms(scenario),
                  horizon=scenario.horizon, burn_in=scenario.burn_in)
    unit = scenario.time_unit
    print(f"Study: {len(study.arms)} designs, {replications} replications of "
          f"{scenario.horizon:g} {unit}s after a {scenario.burn_in:g}-{unit} burn-in, "
          f"{workers} worker process(es)")
    return study.run(replications, seed=seed, workers=workers, progress=True)


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
        f"Each of {result.completed} replications simulates {scenario.horizon:g} {unit}s "
        f"(after a {scenario.burn_in:g}-{unit} burn-in) of both global worlds and of every "
        f"design. True global treatment effect: **{truth['value']:.3f} bookings per {unit}** "
        f"(Monte Carlo s.e. {truth['mc_se']:.3f}), from {truth['global_control']:.3f} to "
        f"{truth['global_treatment']:.3f}."
    )
    columns = ["arm", "estimator", "mean_estimate", "bias", "bias_mc_se", "relative_bias",
               "sd", "mean_naive_se", "rmse", "coverage"]
    report.table(result.summary[columns], {
        "mean_estimate": "{:.3f}", "bias": "{:+.3f}", "bias_mc_se": "{:.3f}",
        "relative_bias": "{:+.0%}", "sd": "{:.3f}", "mean_naive_se": "{:.3f}",
        "rmse": "{:.3f}", "coverage": "{:.0%}"})
    report.figure(result.plot(), "study.png",
                  "Relative bias (in % of the true effect) and RMSE per design and estimator "
                  "(+-2 Monte Carlo s.e.)")
    report.text(coverage_sentence(result.summary))
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


def sweep_section(report: Report, scenario: Scenario) -> pd.DataFrame:
    """Large-market bias of the standard designs over balance, in the report."""
    market = scenario.market
    designs = {"customer-side 0.5": CustomerSide(0.5), "listing-side 0.5": ListingSide(0.5),
               "two-sided 0.5/0.5": TwoSided(0.5, 0.5),
               "two-sided for balance": TwoSided.for_balance}
    large = market.scaled(max(1.0, SWEEP_LISTINGS / market.n_listings))
    table = meanfield.sweep_balance(large, scenario.treatment, designs,
                                    np.logspace(-2, 2, 41))
    one_sided = table[table["design"].isin(["customer-side 0.5", "listing-side 0.5"])]
    wide = one_sided.pivot_table(index="balance", columns="design", values="relative_bias")
    customer_better = wide["customer-side 0.5"].abs() < wide["listing-side 0.5"].abs()
    listing_better = wide.index[~customer_better.to_numpy()]
    if len(listing_better):
        switch = float(listing_better.min())
        finding = (f"Customer-side randomization is the less biased one-sided design below a "
                   f"balance of about {switch:.2g}, listing-side above it")
    else:
        finding = "Customer-side randomization is the less biased one-sided design throughout"
    report.heading("2. How does the bias depend on the balance of demand and supply?")
    report.text(
        f"The large-market limit of the same market ({large.n_listings:,} listings, no Monte "
        f"Carlo error), with the arrival rate varied. This market's balance is "
        f"{market.balance:.2f}. {finding}; two-sided randomization with fractions that "
        "follow balance becomes customer-side when demand is scarce and listing-side when "
        "supply is scarce."
    )
    report.figure(plot_balance_sweep(table, ylim=(-1.0, 3.0)), "balance_sweep.png",
                  "Relative bias against balance (large-market limit)")
    print(f"Balance sweep: {finding.lower()}.")
    return table


def plan_section(report: Report, scenario: Scenario, replications: int,
                 seed: np.random.SeedSequence, workers: int) -> None:
    """Design choice at the planned horizon and the horizon for the minimum effect."""
    market, treatment, unit = scenario.market, scenario.treatment, scenario.time_unit
    choice_seed, plan_seed = spawn(seed, 2)
    candidates = default_candidates()
    choice = choose_design(market, treatment, horizon=scenario.horizon,
                           burn_in=scenario.burn_in, candidates=candidates,
                           replications=replications, seed=choice_seed, workers=workers,
                           progress=True)
    best = choice.recommended
    report.heading("3. Which design, and how long to run it?")
    report.text(f"All candidate designs at the planned horizon of {scenario.horizon:g} "
                f"{unit}s, best first:")
    report.table(choice.table[["rank", "arm", "estimator", "bias", "sd", "rmse",
                               "rmse_mc_se", "bias_share"]].head(8),
                 {"bias": "{:+.3f}", "sd": "{:.3f}", "rmse": "{:.3f}",
                  "rmse_mc_se": "{:.3f}", "bias_share": "{:.0%}"})
    report.figure(choice.plot(), "design_choice.png",
                  "RMSE at the planned horizon, split into bias and noise")
    report.text(choice.report().replace("\n", "\n\n"))
    plan = plan_horizon(market, treatment, choice, pilot_horizon=scenario.horizon / 4,
                        burn_in=scenario.burn_in, minimum_effect=scenario.minimum_effect,
                        replications=replications, seed=plan_seed, workers=workers,
                        progress=True, time_unit=unit)
    report.text(f"How long must **{best['arm']}** with the {best['estimator']} estimator run "
                f"to detect {scenario.minimum_effect:g} more bookings per {unit} (80% power, "
                "5% level, with the standard error the analyst reports)? The horizon is the "
                "measured window after the burn-in.")
    report.text(plan.report().replace("\n", "\n\n"))
    print(choice.report())
    print(plan.report())


def write_full_report(scenario: Scenario, replications: int = 200, seed: SeedLike = 2026,
                      out: str | Path = "marketsim-report",
                      workers: int | None = None, calibration: bool = False) -> Path:
    """Run the whole job on a scenario and write it up.

    Scores the standard designs over the planned horizon (a study), sweeps
    balance in the large-market limit, chooses a design at the planned horizon
    and sizes the experiment for the minimum effect; prints the main figures and
    writes ``report.md`` with its PNG figures into ``out``.

    Parameters
    ----------
    scenario : Scenario
        The market, the feature and the planned experiment.
    replications : int
        Monte Carlo replications of each study (>= 2).
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
    workers = min(4, default_workers()) if workers is None else workers
    study_seed, plan_seed, calibration_seed = spawn(seed, 3)
    report = Report(out, f"Experiment report: {scenario.name}")
    report.text(f"Feature under test: {treatment}. Market: {market}. Rates and times are "
                f"per {scenario.time_unit}.")
    report.table(market.summary())
    print(f"Scenario: {scenario.name}")
    print(f"  {market}")
    print(f"  feature under test: {treatment}")
    result = run_study(scenario, replications, study_seed, workers)
    print_study(result, scenario.time_unit)
    study_section(report, result, scenario)
    sweep_section(report, scenario)
    plan_section(report, scenario, replications, plan_seed, workers)
    if calibration:
        calibration_section(report, scenario, replications, calibration_seed, workers)
    report.heading("What these numbers are worth")
    report.text(CAVEAT)
    path = report.write()
    print(f"Caveat: {CAVEAT}")
    print(f"Report: {path.resolve()}")
    return path
