"""The demo: the built-in rehearsal-room scenario, end to end.

Each section is a function taking what it needs and returning what it made, so
that further sections (sweeps, planning) can be added to :func:`run_demo`.
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
from marketsim.market import Market, Treatment
from marketsim.planning import choose_design, default_candidates, plan_horizon, power_table
from marketsim.plotting.sweep import plot_balance_sweep
from marketsim.randomness import SeedLike, spawn
from marketsim.report import Report
from marketsim.scenarios import instant_confirmation, rehearsal_rooms
from marketsim.study import CAVEAT, Arm, Study, StudyResult, default_workers

HORIZON = 500.0
"""Hours measured in every simulated run of the demo."""
BURN_IN = 50.0
"""Hours simulated before the window opens."""
PLANNED_HORIZON = 336.0
"""Hours of the planned experiment (two weeks)."""
MINIMUM_EFFECT = 0.3
"""Smallest change in bookings per hour worth detecting (a business input)."""
REPLICATIONS = 200
SEED = 2026
OUT = "marketsim-report"


def describe_scenario(market: Market, treatment: Treatment) -> None:
    """Print what the scenario is."""
    print("Scenario (invented): a marketplace for renting music rehearsal rooms")
    print(f"  {market}")
    print(f"  feature under test: instant booking confirmation, {treatment}")


def demo_arms(market: Market) -> list[Arm]:
    """Customer-side, listing-side and two two-sided designs, each with its own
    estimators."""
    two_sided = [TwoSidedNaive(), TwoSidedCorrected(k=1), TwoSidedCorrected(k=2)]
    following = TwoSided.for_balance(market.balance)
    return [
        Arm(CustomerSide(0.5), [CustomerSideEstimator()], name="customer-side 0.5"),
        Arm(ListingSide(0.5), [ListingSideEstimator()], name="listing-side 0.5"),
        Arm(TwoSided(0.5, 0.5), two_sided, name="two-sided 0.5/0.5"),
        Arm(following, two_sided,
            name=f"two-sided for balance {following.customers:.2f}/{following.listings:.2f}"),
    ]


def run_study(market: Market, treatment: Treatment, replications: int, seed: SeedLike,
              workers: int) -> StudyResult:
    """Score the demo's designs on the scenario."""
    study = Study(market, treatment, demo_arms(market), horizon=HORIZON, burn_in=BURN_IN)
    print(f"Study: {len(study.arms)} designs, {replications} replications of {HORIZON:g} "
          f"hours after a {BURN_IN:g}-hour burn-in, {workers} worker process(es)")
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


def print_study(result: StudyResult) -> None:
    """Print the truth and the summary table of a study."""
    truth = result.truth.iloc[0]
    print(f"  booking rate, global control:   {truth['global_control']:7.3f} per hour")
    print(f"  booking rate, global treatment: {truth['global_treatment']:7.3f} per hour")
    print(f"  global treatment effect:        {truth['value']:7.3f} per hour "
          f"(Monte Carlo s.e. {truth['mc_se']:.3f})")
    worst = result.summary["bias_mc_se"].max()
    print(f"Bookings per hour, {result.completed} replications (bias Monte Carlo s.e. "
          f"at most {worst:.3f}; coverage of the nominal 95% interval):")
    print(format_summary(result))


def study_section(report: Report, result: StudyResult) -> None:
    """The study's table, figure and power table in the report."""
    truth = result.truth.iloc[0]
    report.heading("1. How biased and how noisy is each design?")
    report.text(
        f"Each of {result.completed} replications simulates {HORIZON:g} hours (after a "
        f"{BURN_IN:g}-hour burn-in) of both global worlds and of every design. True global "
        f"treatment effect: **{truth['value']:.3f} bookings per hour** (Monte Carlo s.e. "
        f"{truth['mc_se']:.3f}), from {truth['global_control']:.3f} to "
        f"{truth['global_treatment']:.3f}."
    )
    columns = ["arm", "estimator", "mean_estimate", "bias", "bias_mc_se", "relative_bias",
               "sd", "mean_naive_se", "rmse", "coverage"]
    report.table(result.summary[columns], {
        "mean_estimate": "{:.3f}", "bias": "{:+.3f}", "bias_mc_se": "{:.3f}",
        "relative_bias": "{:+.0%}", "sd": "{:.3f}", "mean_naive_se": "{:.3f}",
        "rmse": "{:.3f}", "coverage": "{:.0%}"})
    report.figure(result.plot(), "study.png",
                  "Relative bias and RMSE per design and estimator (+-2 Monte Carlo s.e.)")
    report.text(
        f"Power of a two-sided test at the 5% level over {HORIZON:g} hours, with type S "
        "(wrong sign) and type M (exaggeration) errors of significant results (Gelman & "
        "Carlin 2014), and the chance of a significant result if the feature did nothing "
        "but the bias stayed:"
    )
    powers = power_table(result)
    report.table(powers[["arm", "estimator", "power", "type_s", "type_m",
                         "false_positive_rate"]],
                 {"power": "{:.2f}", "type_s": "{:.2g}", "type_m": "{:.2f}",
                  "false_positive_rate": "{:.2f}"})


def sweep_section(report: Report, market: Market, treatment: Treatment) -> pd.DataFrame:
    """Large-market bias of the demo's designs over balance, in the report."""
    designs = {"customer-side 0.5": CustomerSide(0.5), "listing-side 0.5": ListingSide(0.5),
               "two-sided 0.5/0.5": TwoSided(0.5, 0.5),
               "two-sided for balance": TwoSided.for_balance}
    large = market.scaled(25)
    table = meanfield.sweep_balance(large, treatment, designs, np.logspace(-2, 2, 41))
    one_sided = table[table["design"].isin(["customer-side 0.5", "listing-side 0.5"])]
    wide = one_sided.pivot_table(index="balance", columns="design", values="relative_bias")
    customer_better = wide["customer-side 0.5"].abs() < wide["listing-side 0.5"].abs()
    switch = wide.index[~customer_better.to_numpy()].min()
    report.heading("2. How does the bias depend on the balance of demand and supply?")
    report.text(
        "The large-market limit of the same market (1,000 listings, no Monte Carlo error), "
        f"with the arrival rate varied. This market's balance is {market.balance:.2f}. "
        f"Customer-side randomization is the less biased one-sided design below a balance "
        f"of about {switch:.2g}, listing-side above it; two-sided randomization with "
        "fractions that follow balance stays close to unbiased at both ends."
    )
    report.figure(plot_balance_sweep(table, ylim=(-1.0, 3.0)), "balance_sweep.png",
                  "Relative bias against balance (large-market limit)")
    print(f"Balance sweep: customer-side less biased below balance ~{switch:.2g}, "
          "listing-side above.")
    return table


def plan_section(report: Report, market: Market, treatment: Treatment, replications: int,
                 seed: np.random.SeedSequence, workers: int) -> None:
    """Design choice at the planned horizon and the horizon for a minimum effect."""
    choice_seed, plan_seed = spawn(seed, 2)
    candidates = default_candidates(market.balance)
    choice = choose_design(market, treatment, horizon=PLANNED_HORIZON, burn_in=BURN_IN,
                           candidates=candidates, replications=replications,
                           seed=choice_seed, workers=workers, progress=True)
    best = choice.recommended
    report.heading("3. Which design, and how long to run it?")
    report.text(f"All candidate designs at the planned horizon of {PLANNED_HORIZON:g} hours "
                "(two weeks), best first:")
    report.table(choice.table[["rank", "arm", "estimator", "bias", "sd", "rmse",
                               "rmse_mc_se", "bias_share"]].head(8),
                 {"bias": "{:+.3f}", "sd": "{:.3f}", "rmse": "{:.3f}",
                  "rmse_mc_se": "{:.3f}", "bias_share": "{:.0%}"})
    report.figure(choice.plot(), "design_choice.png",
                  "RMSE at the planned horizon, split into bias and noise")
    report.text(choice.report().replace("\n", "\n\n"))
    arm = next(a for a in candidates if a.label == best["arm"])
    estimator = next(e for e in arm.resolve(market) if e.name == best["estimator"])
    plan = plan_horizon(market, treatment, Arm(arm.design, [estimator], name=arm.label),
                        pilot_horizon=PLANNED_HORIZON / 4, burn_in=BURN_IN,
                        minimum_effect=MINIMUM_EFFECT, replications=replications,
                        seed=plan_seed, workers=workers, progress=True)
    report.text(f"How long must **{arm.label}** with the {estimator.name} estimator run to "
                f"detect {MINIMUM_EFFECT:g} more bookings per hour (80% power, 5% level)?")
    report.text(plan.report().replace("\n", "\n\n"))
    print(choice.report())
    print(plan.report())


def run_demo(replications: int = REPLICATIONS, seed: int = SEED, out: str | Path = OUT,
             workers: int | None = None) -> Path:
    """Run the demo: the whole job on the built-in scenario, written up as a report.

    Scores the designs (a study), sweeps balance in the large-market limit, chooses
    a design at a planned horizon and sizes the experiment; prints the main
    figures and writes ``report.md`` with its PNG figures into ``out``.

    Parameters
    ----------
    replications : int
        Monte Carlo replications of each study (>= 2).
    seed : int
        Seed of the whole demo.
    out : str or Path
        Folder for the report (created if needed).
    workers : int, optional
        Worker processes (default: the usable cores, at most 4).

    Returns
    -------
    Path
        The report file.
    """
    market, treatment = rehearsal_rooms(), instant_confirmation()
    workers = min(4, default_workers()) if workers is None else workers
    study_seed, plan_seed = spawn(seed, 2)
    report = Report(out, "Experiment report: a rehearsal-room marketplace (invented)")
    report.text(
        f"Feature under test: instant booking confirmation ({treatment}). Market: {market}. "
        "Time is in hours. The scenario and its numbers are invented."
    )
    report.table(market.summary())
    describe_scenario(market, treatment)
    result = run_study(market, treatment, replications, study_seed, workers)
    print_study(result)
    study_section(report, result)
    sweep_section(report, market, treatment)
    plan_section(report, market, treatment, replications, plan_seed, workers)
    report.heading("What these numbers are worth")
    report.text(CAVEAT)
    path = report.write()
    print(f"Caveat: {CAVEAT}")
    print("The scenario and its numbers are invented.")
    print(f"Report: {path.resolve()}")
    return path
