"""Which design, when the market itself is uncertain: the choice over plausible markets.

A calibration leaves every parameter uncertain (:meth:`Calibration.draw` gives
plausible markets). :func:`choose_design_robustly` screens every candidate design on
every plausible market with the large-market model (milliseconds each), counts how
often each wins and how much its RMSE spreads, then confirms the leaders by exact
simulation on a few of the markets, and says whether the recommendation survives
what the logs leave uncertain.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.designs import Design
from marketsim.meanfield import gte, steady_state
from marketsim.model import Market, Treatment
from marketsim.planning.choice import default_candidates
from marketsim.randomness import SeedLike, spawn
from marketsim.study import Arm, Study

SURVIVES_SHARE = 0.7
"""The recommendation survives when it wins the screen on at least this share of the
plausible markets and simulation confirms it on every confirmation market."""


@dataclass(frozen=True, eq=False)
class RobustDesignChoice:
    """Designs compared over plausible markets.

    Attributes
    ----------
    screen : pandas.DataFrame
        One row per market x candidate (arm x estimator): large-market ``bias``, naive
        ``sd`` at the horizon and ``rmse``, and ``wins`` (best on that market).
    summary : pandas.DataFrame
        One row per candidate: ``win_share`` and the RMSE's median, 10% and 90% points
        over the markets, sorted by win share then median RMSE.
    confirmation : pandas.DataFrame
        Simulated RMSE (with Monte Carlo s.e.) of the leading candidates on the first
        confirmation markets.
    recommended : pandas.Series
        The summary's first row.
    survives : bool
        Whether the recommendation survives the uncertainty (see ``SURVIVES_SHARE``).
    notes : tuple of str
    """

    screen: pd.DataFrame
    summary: pd.DataFrame
    confirmation: pd.DataFrame
    recommended: pd.Series
    survives: bool
    notes: tuple[str, ...]

    def to_frame(self) -> pd.DataFrame:
        """The per-candidate summary (a copy)."""
        return self.summary.copy()

    def report(self) -> str:
        """The recommendation and whether it survives, in words."""
        best = self.recommended
        n = self.screen["market"].nunique()
        lines = [
            f"Over {n} plausible markets, {best['arm']} with the {best['estimator']} "
            f"estimator wins the large-market screen in {best['win_share']:.0%} of them "
            f"(RMSE median {best['rmse_median']:.3g}, 10-90% range "
            f"{best['rmse_low']:.3g} to {best['rmse_high']:.3g}).",
            ("The recommendation survives what the logs leave uncertain." if self.survives
             else "The recommendation does NOT survive what the logs leave uncertain: "
                  "the best design depends on parameters the logs pin down poorly."),
        ]
        lines.extend(f"Note: {note}" for note in self.notes)
        return "\n".join(lines)

    def plot(self):
        """RMSE of each candidate over the plausible markets (box plot); a Figure."""
        import matplotlib.pyplot as plt

        labels = [f"{a}\n{e}" for a, e in zip(self.summary.arm, self.summary.estimator)]
        data = [self.screen[(self.screen.arm == a) & (self.screen.estimator == e)].rmse
                for a, e in zip(self.summary.arm, self.summary.estimator)]
        figure, axis = plt.subplots(figsize=(max(6, 0.9 * len(labels)), 4))
        axis.boxplot(data)
        axis.set_xticks(np.arange(1, len(labels) + 1), labels, rotation=60, ha="right",
                        fontsize=7)
        axis.set_ylabel("RMSE over plausible markets (large-market screen)")
        axis.set_title("Design choice over plausible markets")
        figure.tight_layout()
        return figure

    def __str__(self) -> str:
        return self.report()


def choose_design_robustly(
    markets: Sequence[Market],
    treatment: Treatment,
    *,
    horizon: float,
    burn_in: float = 0.0,
    candidates: Sequence[Arm | Design] | None = None,
    metric: str = "bookings",
    confirm: int = 2,
    confirm_markets: int = 2,
    replications: int = 40,
    seed: SeedLike = None,
    workers: int = 1,
) -> RobustDesignChoice:
    """Compare designs over plausible markets, e.g. ``calibration.draw(30)``.

    Parameters
    ----------
    markets : sequence of Market
        Plausible markets (at least 2).
    treatment : Treatment
    horizon, burn_in : float
        The planned experiment.
    candidates : sequence of Arm or Design, optional
        Default :func:`~marketsim.planning.choice.default_candidates`.
    metric : {"bookings", "revenue", "conversion"}
    confirm : int
        Leading candidates confirmed by simulation (>= 1).
    confirm_markets : int
        Markets (the first ones) on which they are simulated (>= 1).
    replications : int
        Replications of each confirmation study.
    seed, workers
        As for :meth:`Study.run`.

    Returns
    -------
    RobustDesignChoice

    Notes
    -----
    The screen's RMSE is ``sqrt(bias**2 + sd**2)`` with the large-market bias and the
    naive standard deviation of the estimate over the horizon (expected counts):
    quick, but it ignores finite-market effects and the extra noise interference
    adds, which is why the leaders are confirmed by exact simulation.
    """
    markets = list(markets)
    if len(markets) < 2 or not all(isinstance(m, Market) for m in markets):
        raise ValueError(f"markets must be a list of at least 2 marketsim.Market, got "
                         f"{len(markets)} items")
    confirm = check.whole_number("confirm", confirm)
    confirm_markets = check.whole_number("confirm_markets", confirm_markets)
    horizon, burn_in = check.window(horizon, burn_in)
    arms = [a if isinstance(a, Arm) else Arm(a) for a in
            (default_candidates() if candidates is None else candidates)]
    screen = pd.DataFrame(_screen_rows(markets, treatment, arms, horizon, metric))
    best = screen.groupby("market")["rmse"].transform("min")
    screen["wins"] = screen["rmse"] <= best
    grouped = screen.groupby(["arm", "estimator"], sort=False)
    summary = pd.DataFrame({
        "win_share": grouped["wins"].mean(),
        "rmse_median": grouped["rmse"].median(),
        "rmse_low": grouped["rmse"].quantile(0.1),
        "rmse_high": grouped["rmse"].quantile(0.9),
        "bias_median": grouped["bias"].median(),
    }).reset_index().sort_values(["win_share", "rmse_median"], ascending=[False, True],
                                 kind="stable").reset_index(drop=True)
    leaders = summary.head(confirm)
    confirmation = _confirm(markets[:confirm_markets], treatment, arms, leaders, horizon,
                            burn_in, metric, replications, seed, workers)
    recommended = summary.iloc[0]
    confirmed = _confirmed_everywhere(confirmation, recommended)
    survives = bool(recommended["win_share"] >= SURVIVES_SHARE and confirmed)
    notes = [
        f"Screen: large-market bias and naive noise at the horizon on {len(markets)} "
        f"markets; confirmation: exact simulation of the {len(leaders)} leading "
        f"candidates on {min(confirm_markets, len(markets))} markets, {replications} "
        "replications each.",
    ]
    if not confirmed:
        notes.append("Simulation does not confirm the screen's winner on every "
                     "confirmation market (finite-market effects or Monte Carlo error).")
    return RobustDesignChoice(screen, summary, confirmation, recommended, survives,
                              tuple(notes))


def _screen_rows(markets, treatment, arms, horizon, metric) -> list[dict]:
    rows = []
    for k, market in enumerate(markets):
        truth = gte(market, treatment, metric)
        for arm in arms:
            ledger = steady_state(market, treatment, arm.design).ledger(horizon)
            for estimator in arm.resolve(market):
                estimate = estimator.estimate(ledger, metric)
                bias = estimate.value - truth
                rows.append({"market": k, "arm": arm.label, "estimator": estimator.name,
                             "truth": truth, "bias": bias, "sd": estimate.standard_error,
                             "rmse": float(np.hypot(bias, estimate.standard_error))})
    return rows


def _confirm(markets, treatment, arms, leaders, horizon, burn_in, metric, replications,
             seed, workers) -> pd.DataFrame:
    by_label = {arm.label: arm for arm in arms}
    frames = []
    for k, (market, child) in enumerate(zip(markets, spawn(seed, len(markets)))):
        chosen = []
        for row in leaders.itertuples():
            arm = by_label[row.arm]
            estimator = next(e for e in arm.resolve(market) if e.name == row.estimator)
            chosen.append(Arm(arm.design, estimator, name=f"{row.arm} | {row.estimator}"))
        study = Study(market, treatment, chosen, horizon=horizon, burn_in=burn_in,
                      metric=metric)
        summary = study.run(replications, seed=child, workers=workers,
                            progress=False).summary
        frames.append(pd.DataFrame({
            "market": k,
            "arm": [label.split(" | ")[0] for label in summary.arm],
            "estimator": summary.estimator.to_numpy(),
            "rmse": summary.rmse.to_numpy(), "rmse_mc_se": summary.rmse_mc_se.to_numpy(),
        }))
    return pd.concat(frames, ignore_index=True)


def _confirmed_everywhere(confirmation: pd.DataFrame, recommended: pd.Series) -> bool:
    """Whether the recommended candidate is best, or within 2 Monte Carlo s.e. of the
    best, on every confirmation market."""
    for _, rows in confirmation.groupby("market"):
        mine = rows[(rows.arm == recommended["arm"])
                    & (rows.estimator == recommended["estimator"])].iloc[0]
        best = rows.rmse.min()
        if mine.rmse - best > 2 * np.hypot(mine.rmse_mc_se, rows.rmse_mc_se.min()):
            return False
    return True


__all__ = ["RobustDesignChoice", "choose_design_robustly"]
