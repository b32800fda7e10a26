"""The demo: the built-in rehearsal-room scenario, end to end.

Each section is a function taking what it needs and returning what it made, so
that further sections (sweeps, planning) can be added to :func:`run_demo`.
"""

from __future__ import annotations

from pathlib import Path

from marketsim.designs import CustomerSide, ListingSide, TwoSided
from marketsim.estimators import (
    CustomerSideEstimator,
    ListingSideEstimator,
    TwoSidedCorrected,
    TwoSidedNaive,
)
from marketsim.market import Market, Treatment
from marketsim.scenarios import instant_confirmation, rehearsal_rooms
from marketsim.study import CAVEAT, Arm, Study, StudyResult, default_workers

HORIZON = 500.0
"""Hours measured in every simulated run of the demo."""
BURN_IN = 50.0
"""Hours simulated before the window opens."""
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


def run_study(market: Market, treatment: Treatment, replications: int, seed: int,
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


def save_plot(result: StudyResult, out: str | Path) -> Path:
    """Save the study figure as ``study.png`` in ``out`` (created if needed)."""
    folder = Path(out)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "study.png"
    figure = result.plot()
    figure.savefig(path, dpi=120)
    import matplotlib.pyplot as plt

    plt.close(figure)
    return path


def run_demo(replications: int = REPLICATIONS, seed: int = SEED, out: str | Path = OUT,
             workers: int | None = None) -> StudyResult:
    """Run the demo: describe the scenario, score the designs, save the figure.

    Parameters
    ----------
    replications : int
        Monte Carlo replications of the study (>= 2).
    seed : int
        Seed of the whole demo.
    out : str or Path
        Folder for the figure (created if needed).
    workers : int, optional
        Worker processes (default: the usable cores, at most 4).

    Returns
    -------
    StudyResult
    """
    market, treatment = rehearsal_rooms(), instant_confirmation()
    workers = min(4, default_workers()) if workers is None else workers
    describe_scenario(market, treatment)
    result = run_study(market, treatment, replications, seed, workers)
    print_study(result)
    path = save_plot(result, out)
    print(f"Figure: {path}")
    print(f"Caveat: {CAVEAT}")
    print("The scenario and its numbers are invented.")
    return result
