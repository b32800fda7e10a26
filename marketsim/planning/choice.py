"""Which design: RMSE of candidate designs at the planned horizon, split into bias and noise."""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim.designs import (
    CustomerSide,
    Design,
    ListingSide,
    TwoSided,
    TwoSidedFollowingBalance,
)
from marketsim.model import Market, Treatment
from marketsim.planning.sweep import require_market_and_treatment
from marketsim.randomness import SeedLike
from marketsim.study import Arm, Study, StudyResult, rmse_influence


@dataclass(frozen=True)
class DesignChoice:
    """The designs compared at the planned horizon, and the one recommended.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per arm x estimator, sorted by RMSE: the study's summary columns
        plus ``bias_share`` (the share of the mean squared error that is bias)
        and ``rank``.
    recommended : pandas.Series
        The row with the smallest RMSE.
    notes : tuple of str
        Whether the runner-up is within Monte Carlo error, and the caveats.
    result : StudyResult
        The study behind the table.
    """

    table: pd.DataFrame
    recommended: pd.Series
    notes: tuple[str, ...]
    result: StudyResult

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


def default_candidates() -> list[Arm]:
    """A grid of designs and treated fractions to compare (the default of :func:`choose_design`)."""
    arms = [Arm(CustomerSide(a)) for a in (0.25, 0.5, 0.75)]
    arms += [Arm(ListingSide(a)) for a in (0.25, 0.5, 0.75)]
    arms.append(Arm(TwoSided(0.5, 0.5)))
    arms.append(Arm(TwoSidedFollowingBalance()))
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
) -> DesignChoice:
    """Compare designs and treated fractions by their RMSE at the planned horizon.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    horizon : float
        The planned length of the experiment.
    burn_in : float
    candidates : sequence of Arm or Design, optional
        Default :func:`default_candidates`: customer-side and listing-side at
        25%, 50% and 75% treated, two-sided 50/50 and two-sided following balance.
    metric : {"bookings", "revenue", "conversion"}
    replications, seed, workers, progress, backend, client, store
        As for :meth:`Study.run` (the store holds the study of the candidates).

    Returns
    -------
    DesignChoice
    """
    require_market_and_treatment(market, treatment)
    arms = default_candidates() if candidates is None else list(candidates)
    study = Study(market, treatment, arms, horizon=horizon, burn_in=burn_in, metric=metric)
    result = study.run(replications, seed=seed, workers=workers, progress=progress,
                       backend=backend, client=client, store=store)
    table = result.summary.sort_values("rmse", kind="stable").reset_index(drop=True)
    mse = table["rmse"] ** 2
    table["bias_share"] = np.where(mse > 0, table["bias"] ** 2 / mse, 0.0)
    table["rank"] = np.arange(1, len(table) + 1)
    best = table.iloc[0]
    notes = []
    if len(table) > 1:
        runner = table.iloc[1]
        gap = runner["rmse"] - best["rmse"]
        noise = _rmse_difference_error(result, best, runner)
        if gap < 2.0 * noise:
            notes.append(
                f"The runner-up ({runner['arm']}, {runner['estimator']}) is within Monte "
                f"Carlo error (RMSE {runner['rmse']:.3g} against {best['rmse']:.3g}, "
                f"difference {gap:.2g}, paired Monte Carlo s.e. {noise:.2g}); more "
                "replications would separate them."
            )
    if best["bias_share"] > 0.5:
        notes.append(
            "Most of the best RMSE is bias: a longer experiment will not help much; the "
            "bias comes from interference between treated and control units."
        )
    notes.append(result.caveats)
    return DesignChoice(table=table, recommended=best, notes=tuple(notes), result=result)


def _rmse_difference_error(result: StudyResult, first: pd.Series, second: pd.Series) -> float:
    """Monte Carlo standard error of the difference of two rows' RMSEs.

    Every arm of a study shares its replication's random numbers with the global
    worlds and the other arms (and estimators on one arm share its ledger), so the
    two RMSEs are correlated: the error is computed from the paired per-replication
    influence values (:func:`marketsim.study.rmse_influence`), not as if the rows
    were independent.
    """
    raw = result.replications

    def influence(row: pd.Series) -> np.ndarray:
        mine = raw[(raw["arm"] == row["arm"]) & (raw["estimator"] == row["estimator"])
                   & (raw["metric"] == row["metric"])].sort_values("replication")
        return rmse_influence(mine["estimate"].to_numpy(float),
                              mine["replication_truth"].to_numpy(float))

    difference = influence(first) - influence(second)
    return float(np.std(difference, ddof=1) / math.sqrt(difference.size))


__all__ = ["DesignChoice", "choose_design", "default_candidates"]
