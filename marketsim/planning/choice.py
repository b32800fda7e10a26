"""Which design: RMSE of candidate designs at the planned horizon, split into bias and noise."""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.designs import (
    CustomerSide,
    Design,
    ListingSide,
    Switchback,
    TwoSided,
    TwoSidedFollowingBalance,
)
from marketsim.estimators.batches import mean_busy_time
from marketsim.model import Market, Treatment
from marketsim.planning.sweep import require_market_and_treatment
from marketsim.randomness import SeedLike
from marketsim.study import Arm, Study, StudyResult, rmse_influence

TIE_RULE = ("the candidates whose RMSE is within two paired Monte Carlo standard errors of "
            "the smallest are practically tied; among them the one with the smallest "
            "absolute bias is recommended, since bias does not shrink with a longer test "
            "and noise does")
"""The rule that breaks a practical tie, in words (printed in the report)."""


@dataclass(frozen=True)
class DesignChoice:
    """The designs compared at the planned horizon, and the one recommended.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per arm x estimator, best first: the study's summary columns plus
        ``bias_share`` (``bias**2 / rmse**2``, the share of the mean squared
        error that is bias: near 1, a longer test will not help), ``tied``
        (RMSE within two paired Monte Carlo standard errors of the smallest),
        ``rmse_gap_mc_se`` (the paired Monte Carlo standard error of the row's
        RMSE minus the smallest) and ``rank``. The practically tied rows come
        first, ordered by absolute bias (:data:`TIE_RULE`), then the others by RMSE.
    recommended : pandas.Series
        The first row.
    notes : tuple of str
        Whether the best candidates are practically tied, and the caveats.
    result : StudyResult
        The study behind the table.
    arms : tuple of Arm
        One arm per row of ``table``, in its order: the row's design with that
        row's estimator only, named as the row's ``arm`` (ready for
        :func:`marketsim.plan_horizon` or another study).
    """

    table: pd.DataFrame
    recommended: pd.Series
    notes: tuple[str, ...]
    result: StudyResult
    arms: tuple[Arm, ...] = ()

    @property
    def recommended_arm(self) -> Arm:
        """The recommended design with its estimator, as an :class:`~marketsim.Arm`."""
        return self.arms[0]

    @property
    def design(self) -> Design:
        """The recommended design object."""
        return self.arms[0].design

    def to_frame(self) -> pd.DataFrame:
        """The ranked table (a copy)."""
        return self.table.copy()

    def report(self) -> str:
        """The recommendation in words."""
        best = self.recommended
        lines = [
            f"Recommended: {best['arm']} with the {best['estimator']} estimator: RMSE "
            f"{best['rmse']:.3g} (bias {best['bias']:+.3g}, sd {best['sd']:.3g})."
        ]
        lines.extend(f"Note: {note}" for note in self.notes)
        return "\n".join(lines)

    def plot(self):
        """RMSE of every candidate split into bias and noise; returns a Figure."""
        from marketsim.planning.figures import plot_design_choice

        return plot_design_choice(self.table)

    def __str__(self) -> str:
        return self.report()


SWITCHBACK_BLOCKS = (2.0, 5.0, 10.0)
"""Block lengths of the candidate switchbacks, in mean busy times of the market."""

SWITCHBACK_MIN_BLOCKS = 8
"""A candidate switchback needs at least this many blocks in the horizon (fewer leave
too few blocks for a standard error from their variation, and a pilot at a quarter
of the horizon, as the report runs, still holds two blocks)."""


def switchback_candidates(market: Market, horizon: float) -> list[Arm]:
    """Random switchbacks with blocks of 2, 5 and 10 mean busy times (the market's
    listing-weighted mean), each dropping one mean busy time at the start of every
    block; only those with at least :data:`SWITCHBACK_MIN_BLOCKS` blocks in ``horizon``."""
    horizon = check.number("horizon", horizon, low=0.0, low_open=True)
    busy = mean_busy_time(market)
    return [Arm(Switchback(k * busy, burn_in=busy)) for k in SWITCHBACK_BLOCKS
            if horizon >= SWITCHBACK_MIN_BLOCKS * k * busy]


def default_candidates(market: Market | None = None,
                       horizon: float | None = None) -> list[Arm]:
    """A grid of designs and treated fractions to compare (the default of :func:`choose_design`).

    Customer-side and listing-side at 25%, 50% and 75% treated, two-sided 50/50 and
    two-sided following balance; given the market and the horizon, also the
    switchbacks of :func:`switchback_candidates`.
    """
    arms = [Arm(CustomerSide(a)) for a in (0.25, 0.5, 0.75)]
    arms += [Arm(ListingSide(a)) for a in (0.25, 0.5, 0.75)]
    arms.append(Arm(TwoSided(0.5, 0.5)))
    arms.append(Arm(TwoSidedFollowingBalance()))
    if market is not None and horizon is not None:
        arms += switchback_candidates(market, horizon)
    return arms


def choose_design(
    market: Market,
    treatment: Treatment,
    *,
    horizon: float,
    burn_in: float = 0.0,
    candidates: Sequence[Arm | Design] | None = None,
    metric: str = "bookings",
    replications: int = 100,
    seed: SeedLike = None,
    workers: int = 1,
    progress: bool = True,
    backend: str = "local",
    client: object = None,
    store: str | os.PathLike | None = None,
    max_seconds: float | None = None,
    max_events: int | None = None,
) -> DesignChoice:
    """Compare designs and treated fractions by their RMSE at the planned horizon.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    horizon : float
        The planned length of the experiment: its measured window, after the
        burn-in.
    burn_in : float
        Warm-up simulated before the window and not measured.
    candidates : sequence of Arm or Design, optional
        Default :func:`default_candidates` of the market and horizon: customer-side
        and listing-side at 25%, 50% and 75% treated, two-sided 50/50, two-sided
        following balance, and random switchbacks with blocks of 2, 5 and 10 mean
        busy times (burn-in one mean busy time) that fit at least 8 times in the
        horizon.
    metric : {"bookings", "revenue", "conversion"}
    replications, seed, workers, progress, backend, client, store, max_seconds, max_events
        As for :meth:`Study.run` (the store holds the study of the candidates).

    Returns
    -------
    DesignChoice
        Its ``recommended_arm`` (and ``design``) can be passed to
        :func:`marketsim.plan_horizon` directly, as can the choice itself.

    Examples
    --------
    >>> import marketsim as ms
    >>> choice = ms.choose_design(ms.scenarios.rehearsal_rooms(),
    ...                           ms.scenarios.instant_confirmation(), horizon=20.0,
    ...                           candidates=[ms.CustomerSide(0.5), ms.ListingSide(0.5)],
    ...                           replications=8, seed=1, progress=False)
    >>> isinstance(choice.design, ms.Design), len(choice.arms)
    (True, 2)
    """
    require_market_and_treatment(market, treatment)
    arms = [a if isinstance(a, Arm) else Arm(a) for a in
            (default_candidates(market, horizon) if candidates is None
             else list(candidates))]
    study = Study(market, treatment, arms, horizon=horizon, burn_in=burn_in, metric=metric)
    result = study.run(replications, seed=seed, workers=workers, progress=progress,
                       backend=backend, client=client, store=store, max_seconds=max_seconds,
                       max_events=max_events)
    return choice_from_result(result, arms, market)


def choice_from_result(result: StudyResult, arms: Sequence[Arm],
                       market: Market) -> DesignChoice:
    """The design choice among the arms of a study already run (its own truth and rows).

    Parameters
    ----------
    result : StudyResult
        A study of ``arms`` on ``market`` at the planned horizon.
    arms : sequence of Arm
        The study's arms (to hand back the ranked design objects).
    market : Market

    Returns
    -------
    DesignChoice
    """
    table, notes = rank_candidates(result)
    notes.append(result.caveats)
    by_label = {arm.label: arm for arm in arms}
    ranked = []
    for row in table.itertuples(index=False):
        arm = by_label[row.arm]
        estimator = next(e for e in arm.resolve(market) if e.name == row.estimator)
        ranked.append(Arm(arm.design, [estimator], name=arm.label))
    return DesignChoice(table=table, recommended=table.iloc[0], notes=tuple(notes),
                        result=result, arms=tuple(ranked))


def rank_candidates(result: StudyResult) -> tuple[pd.DataFrame, list[str]]:
    """Order a study's rows by preference at its horizon (see :class:`DesignChoice`).

    Returns the ranked table and the notes on ties and bias.
    """
    table = result.summary.sort_values("rmse", kind="stable").reset_index(drop=True)
    mse = table["rmse"] ** 2
    table["bias_share"] = np.where(mse > 0, table["bias"] ** 2 / mse, 0.0)
    best = table.iloc[0]
    influence = rmse_influence_columns(result, table)
    errors = paired_rmse_errors(influence, 0)
    table["tied"] = tied_with_best(table["rmse"].to_numpy(), errors)
    table["rmse_gap_mc_se"] = errors
    order = preference_order(table["rmse"].to_numpy(), table["bias"].to_numpy(),
                             table["tied"].to_numpy())
    tied = table[table["tied"]]
    table = table.iloc[order].reset_index(drop=True)
    table["rank"] = np.arange(1, len(table) + 1)
    chosen = table.iloc[0]
    notes = []
    if len(tied) > 1:
        others = [f"{r.arm}, {r.estimator} (RMSE {r.rmse:.3g})"
                  for r in tied.itertuples(index=False)
                  if (r.arm, r.estimator) != (chosen["arm"], chosen["estimator"])]
        spread = float(tied["rmse"].max() / best["rmse"] - 1.0)
        loose = float(2.0 * tied["rmse_gap_mc_se"].max() / best["rmse"])
        reading = ("more replications could separate them" if loose > 0.1 else
                   "more replications would not change the decision much")
        notes.append(
            f"Practically tied on RMSE with {'; '.join(others)}: the RMSEs differ by up to "
            f"{spread:.0%} of the best, within two paired Monte Carlo standard errors "
            f"(at most {loose:.0%} of it: {reading}). Tie rule: {TIE_RULE}."
        )
    if chosen["bias_share"] > 0.5:
        notes.append(
            f"{chosen['bias_share']:.0%} of the recommended candidate's mean squared error is "
            "bias: a longer experiment will not help much; the bias comes from interference "
            "between treated and control units."
        )
    return table, notes


def tied_with_best(rmse: np.ndarray, gap_errors: np.ndarray) -> np.ndarray:
    """Which candidates are practically tied with the smallest RMSE (:data:`TIE_RULE`).

    Parameters
    ----------
    rmse : numpy.ndarray, shape (n,)
    gap_errors : numpy.ndarray, shape (n,)
        Monte Carlo standard error of each candidate's RMSE minus the smallest (0 for
        the smallest itself).

    Returns
    -------
    numpy.ndarray of bool, shape (n,)
    """
    return rmse - rmse.min() <= 2.0 * gap_errors


def preference_order(rmse: np.ndarray, bias: np.ndarray, tied: np.ndarray) -> np.ndarray:
    """Candidates best first by :data:`TIE_RULE`: the practically tied ones by absolute
    bias (then RMSE), then the others by RMSE.

    Parameters
    ----------
    rmse, bias : numpy.ndarray, shape (n,)
    tied : numpy.ndarray of bool, shape (n,)
        From :func:`tied_with_best`.

    Returns
    -------
    numpy.ndarray of int, shape (n,)
        Indices into the candidates.
    """
    return np.lexsort((rmse, np.where(tied, np.abs(bias), 0.0), ~tied))


def rmse_influence_columns(result: StudyResult, rows: pd.DataFrame) -> np.ndarray:
    """Per-replication influence values of each row's RMSE, one column per row.

    Every arm of a study shares its replication's random numbers with the global
    worlds and the other arms (and estimators on one arm share its ledger), so two
    rows' RMSEs are correlated: differences are judged from these paired values
    (:func:`marketsim.study.rmse_influence`), not as if the rows were independent.

    Parameters
    ----------
    result : StudyResult
    rows : pandas.DataFrame
        Rows of ``result.summary`` (columns ``arm``, ``estimator``, ``metric``).

    Returns
    -------
    numpy.ndarray, shape (replications, len(rows))
    """
    raw = result.replications
    columns = []
    for row in rows.itertuples(index=False):
        mine = raw[(raw["arm"] == row.arm) & (raw["estimator"] == row.estimator)
                   & (raw["metric"] == row.metric)].sort_values("replication")
        columns.append(rmse_influence(mine["estimate"].to_numpy(float),
                                      mine["replication_truth"].to_numpy(float)))
    return np.column_stack(columns)


def paired_rmse_errors(influence: np.ndarray, best: int) -> np.ndarray:
    """Monte Carlo standard error of every row's RMSE minus row ``best``'s (paired).

    Parameters
    ----------
    influence : numpy.ndarray, shape (replications, n)
        From :func:`rmse_influence_columns`.
    best : int
        The reference row.

    Returns
    -------
    numpy.ndarray, shape (n,)
        0 for ``best`` itself.
    """
    difference = influence - influence[:, [best]]
    return np.std(difference, axis=0, ddof=1) / math.sqrt(influence.shape[0])


__all__ = ["TIE_RULE", "DesignChoice", "choose_design", "default_candidates",
           "switchback_candidates", "SWITCHBACK_BLOCKS", "SWITCHBACK_MIN_BLOCKS",
           "rank_candidates",
           "choice_from_result", "tied_with_best", "preference_order", "rmse_influence_columns",
           "paired_rmse_errors"]
