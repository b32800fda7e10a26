"""Which design, when the market itself is uncertain: the choice over plausible markets.

A calibration leaves every parameter uncertain (:meth:`Calibration.draw` gives
plausible markets). :func:`choose_design_robustly` simulates every candidate design
once, exactly, on the central market (the calibrated one), then screens every
candidate on every plausible market with the large-market model (milliseconds each),
corrected by what the simulation showed at the centre. It counts how often each
candidate wins and how much its RMSE spreads, and says whether the recommendation
survives what the logs leave uncertain.

A candidate "wins" on a market by the same rule as :func:`choose_design`
(:data:`~marketsim.planning.choice.TIE_RULE`): among the candidates whose RMSE is within
two paired Monte Carlo standard errors of the smallest (errors measured in the central
simulation), the one with the smallest absolute bias.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.designs import Design, Switchback
from marketsim.meanfield import gte, steady_state
from marketsim.model import Market, Treatment
from marketsim.planning.choice import (
    TIE_RULE,
    default_candidates,
    paired_rmse_errors,
    preference_order,
    rank_candidates,
    rmse_influence_columns,
    tied_with_best,
)
from marketsim.randomness import SeedLike
from marketsim.study import Arm, Study

SURVIVES_SHARE = 0.7
"""The recommendation survives when it wins on at least this share of the plausible
markets and the simulation at the central market confirms it (it is among the
candidates practically tied there, by :data:`~marketsim.planning.choice.TIE_RULE`)."""


@dataclass(frozen=True, eq=False)
class RobustDesignChoice:
    """Designs compared over plausible markets.

    Attributes
    ----------
    screen : pandas.DataFrame
        One row per plausible market x candidate (arm x estimator): ``bias``, ``sd``
        and ``rmse`` at the horizon (see Notes of :func:`choose_design_robustly`), and
        ``wins`` (preferred on that market by the tie rule of :func:`choose_design`).
    summary : pandas.DataFrame
        One row per candidate: ``win_share`` and the RMSE's median, 10% and 90% points
        over the markets, sorted by win share then median RMSE.
    confirmation : pandas.DataFrame
        The simulation at the central market ranked as :func:`choose_design` ranks it:
        ``rank``, ``bias``, ``sd``, ``rmse``, ``rmse_mc_se``, ``tied`` per candidate.
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
            f"estimator wins in {best['win_share']:.0%} of them "
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
    center: Market | None = None,
    candidates: Sequence[Arm | Design] | None = None,
    metric: str = "bookings",
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
    center : Market, optional
        The central market, simulated exactly (default ``markets[0]``); pass
        ``calibration.market``.
    candidates : sequence of Arm or Design, optional
        Default :func:`~marketsim.planning.choice.default_candidates` (without
        switchbacks). Switchbacks are refused: the screen scales the central
        simulation's noise by Poisson counts, which does not describe the
        block-to-block noise of a switchback (compare them with
        :func:`~marketsim.choose_design` on the calibrated market).
    metric : {"bookings", "revenue", "conversion"}
    replications, seed, workers
        As for :meth:`Study.run` (the study at the central market).

    Returns
    -------
    RobustDesignChoice

    Notes
    -----
    On a plausible market ``k`` a candidate's bias is its large-market bias there plus
    the gap between its simulated and large-market biases at the centre (finite-market
    effects), and its standard deviation is the simulated one at the centre scaled by
    the ratio of naive standard errors (expected counts over the horizon, market ``k``
    against the centre); ``rmse = sqrt(bias**2 + sd**2)``. The correction assumes the
    finite-market effects change little between plausible markets, which holds when
    they are close to each other, as draws from a good calibration are.
    """
    markets = list(markets)
    if len(markets) < 2 or not all(isinstance(m, Market) for m in markets):
        raise ValueError(f"markets must be a list of at least 2 marketsim.Market, got "
                         f"{len(markets)} items")
    center = markets[0] if center is None else center
    if not isinstance(center, Market):
        raise ValueError(f"center must be a marketsim.Market or None, got "
                         f"{type(center).__name__}")
    horizon, burn_in = check.window(horizon, burn_in)
    arms = [a if isinstance(a, Arm) else Arm(a) for a in
            (default_candidates() if candidates is None else candidates)]
    for arm in arms:
        if isinstance(arm.design, Switchback):
            raise ValueError(
                f"candidates must not include a switchback here, got {arm.label!r}: the "
                "screen over plausible markets scales the central simulation's noise by "
                "Poisson counts, which does not describe the block-to-block noise of a "
                "switchback; compare switchbacks with ms.choose_design on the calibrated "
                "market"
            )
    result = Study(center, treatment, arms, horizon=horizon, burn_in=burn_in,
                   metric=metric).run(replications, seed=seed, workers=workers,
                                      progress=False)
    ranked, _ = rank_candidates(result)
    confirmation = ranked[["rank", "arm", "estimator", "bias", "sd", "rmse", "rmse_mc_se",
                           "tied"]]
    keys = ["arm", "estimator"]
    at_center = pd.DataFrame(_screen_rows([center], treatment, arms, horizon, metric))
    gap = at_center.merge(confirmation, on=keys, suffixes=("_large", "_sim"))
    gap["bias_gap"] = gap["bias_sim"] - gap["bias_large"]
    gap["sd_ratio"] = gap["sd_sim"] / gap["sd_large"]
    screen = pd.DataFrame(_screen_rows(markets, treatment, arms, horizon, metric))
    screen = screen.merge(gap[[*keys, "bias_gap", "sd_ratio"]], on=keys)
    screen["bias"] = screen["bias"] + screen.pop("bias_gap")
    screen["sd"] = screen["sd"] * screen.pop("sd_ratio")
    screen["rmse"] = np.hypot(screen["bias"], screen["sd"])
    screen["wins"] = _winners(screen, rmse_influence_columns(result, ranked), ranked)
    grouped = screen.groupby(keys, sort=False)
    summary = pd.DataFrame({
        "win_share": grouped["wins"].mean(),
        "rmse_median": grouped["rmse"].median(),
        "rmse_low": grouped["rmse"].quantile(0.1),
        "rmse_high": grouped["rmse"].quantile(0.9),
        "bias_median": grouped["bias"].median(),
    }).reset_index().sort_values(["win_share", "rmse_median"], ascending=[False, True],
                                 kind="stable").reset_index(drop=True)
    recommended = summary.iloc[0]
    confirmed = _confirmed(confirmation, recommended)
    survives = bool(recommended["win_share"] >= SURVIVES_SHARE and confirmed)
    notes = [
        f"Every candidate simulated exactly at the central market ({replications} "
        f"replications), then screened on {len(markets)} plausible markets with the "
        "large-market model corrected by the simulation's finite-market gap.",
        f"A candidate wins on a market by the rule of choose_design: {TIE_RULE}.",
    ]
    if not confirmed:
        notes.append("At the central market the simulation prefers another candidate by "
                     "more than its Monte Carlo error.")
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


def _winners(screen: pd.DataFrame, influence: np.ndarray,
             ranked: pd.DataFrame) -> np.ndarray:
    """Whether each screen row is its market's preferred candidate by the tie rule, with
    the paired Monte Carlo errors of the central simulation (``influence`` has one
    column per row of ``ranked``)."""
    column = {key: k for k, key in enumerate(zip(ranked.arm, ranked.estimator))}
    wins = np.zeros(len(screen), dtype=bool)
    for _, rows in screen.groupby("market", sort=False):
        rmse, bias = rows["rmse"].to_numpy(), rows["bias"].to_numpy()
        columns = [column[key] for key in zip(rows.arm, rows.estimator)]
        errors = paired_rmse_errors(influence[:, columns], int(np.argmin(rmse)))
        best = preference_order(rmse, bias, tied_with_best(rmse, errors))[0]
        wins[screen.index.get_loc(rows.index[best])] = True
    return wins


def _confirmed(confirmation: pd.DataFrame, recommended: pd.Series) -> bool:
    """Whether the recommended candidate is practically tied for best in the central
    simulation (:data:`~marketsim.planning.choice.TIE_RULE`)."""
    mine = confirmation[(confirmation.arm == recommended["arm"])
                        & (confirmation.estimator == recommended["estimator"])].iloc[0]
    return bool(mine.tied)


__all__ = ["RobustDesignChoice", "choose_design_robustly"]
