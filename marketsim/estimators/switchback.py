"""Estimators of a switchback design: they read the ledger block by block.

Block ``k`` of the window has a kept part (after its burn-in) of length
``l_k`` (for the conversion metric: its arrivals), the metric's total ``Y_k``
over it (bookings, or revenue) and an assignment ``W_k`` (1 = treated).
"""

from __future__ import annotations

import math

import numpy as np

from marketsim.designs import CellSplit, Design, Switchback
from marketsim.engine.ledger import Ledger
from marketsim.estimators.base import Estimator
from marketsim.estimators.totals import Estimate, booking_values
from marketsim.model.market import Market

TREATED_PROBABILITY = 0.5
"""Probability that a block of a random switchback is treated."""


def block_totals(ledger: Ledger, metric: str = "bookings"
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per kept block: the metric's total ``Y_k``, its divisor ``l_k`` and ``W_k``.

    Parameters
    ----------
    ledger : Ledger
        A ledger of a switchback design (``ledger.blocks`` set).
    metric : {"bookings", "revenue", "conversion"}

    Returns
    -------
    totals, divisors : ndarray, shape (n_kept_blocks,)
        Bookings (or revenue) in each block's kept part; its length (for
        conversion: its arrivals). Blocks whose kept part is empty are left out.
    treated : ndarray of bool, shape (n_kept_blocks,)
    """
    value = booking_values(ledger.cells, metric)
    schedule = ledger.blocks
    if schedule is None:
        raise ValueError(
            "the switchback estimators need the ledger of a switchback design (ms.Switchback"
            f"(...), whose ledger is by blocks), got a ledger of {ledger.cells.design!r}"
        )
    totals = np.asarray(ledger.bin_bookings, dtype=float).sum(axis=1) @ value
    if metric == "conversion":
        divisors = np.asarray(ledger.bin_arrivals, dtype=float).sum(axis=1)
    else:
        divisors = schedule.kept_lengths.astype(float)
    kept = schedule.kept_lengths > 0.0
    return totals[kept], divisors[kept], np.asarray(schedule.treated)[kept]


class _SwitchbackEstimator(Estimator):
    """Shared checks of the switchback estimators (they are not linear in ``Q_xy``)."""

    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        raise ValueError(
            f"{self.name} needs a switchback design (ms.Switchback(...)): it compares "
            "treated and control time blocks, not randomized customers or listings"
        )

    def fits(self, design: Design, market: Market) -> None:
        if not isinstance(design, Switchback):
            self.weights(design.split(market), market)


class SwitchbackDifference(_SwitchbackEstimator):
    """Difference in the mean metric rate over the kept parts of treated and control
    blocks, with a standard error from the block-to-block variation.

    ``r_g = sum(Y_k) / sum(l_k)`` over the blocks of group ``g`` (treated or
    control); the estimate is ``r_1 - r_0``. Standard error: the blocks are taken
    as independent draws with a variance shared by both groups, from the
    residuals ``d_k = (Y_k - r_g l_k) / mean(l in g)`` (the linearised ratio
    estimator): ``s**2 = sum(d_k**2) / (n - 2)`` and
    ``se = s * sqrt(1 / n_1 + 1 / n_0)`` (NaN with fewer than 3 kept blocks).
    Carry-over across switches makes neighbouring blocks dependent and biases
    the estimate; the burn-in of each block is what limits it.

    Fits any switchback design (random or alternating assignment). The blocks
    play the part of batches here, so there is no separate batch-means standard
    error (``batch_se`` is NaN).

    References
    ----------
    "Design and analysis of switchback experiments", Management Science (2023).
    """

    @property
    def name(self) -> str:
        return "switchback difference"

    def estimate(self, ledger: Ledger, metric: str = "bookings") -> Estimate:
        totals, divisors, treated = block_totals(ledger, metric)
        rates, spread = [], 0.0
        counts = []
        for group in (treated, ~treated):
            y, ell = totals[group], divisors[group]
            total = ell.sum()
            if total <= 0.0:
                return Estimate(math.nan, math.nan)
            rate = y.sum() / total
            spread += float(np.sum(((y - rate * ell) / ell.mean()) ** 2))
            rates.append(rate)
            counts.append(y.size)
        n = sum(counts)
        if n <= 2:
            return Estimate(float(rates[0] - rates[1]), math.nan)
        variance = spread / (n - 2) * (1.0 / counts[0] + 1.0 / counts[1])
        return Estimate(float(rates[0] - rates[1]), math.sqrt(variance))


class SwitchbackHorvitzThompson(_SwitchbackEstimator):
    """Horvitz-Thompson estimator of a random switchback (each block treated with the
    known probability ``p = 1/2``).

    ``sum_k (W_k / p - (1 - W_k) / (1 - p)) Y_k / sum_k l_k``: unbiased under the
    random assignment when there is no carry-over, whatever the blocks' levels,
    and noisier than :class:`SwitchbackDifference` (it weighs levels, not
    differences). Its standard error is the usual conservative bound for
    independent assignment,
    ``sqrt(sum_k (W_k / p**2 + (1 - W_k) / (1 - p)**2) Y_k**2) / sum_k l_k``.

    Fits a switchback with ``assignment="random"`` only (an alternating
    schedule has no assignment probabilities).

    References
    ----------
    "Design and analysis of switchback experiments", Management Science (2023).
    """

    @property
    def name(self) -> str:
        return "switchback Horvitz-Thompson"

    def fits(self, design: Design, market: Market) -> None:
        super().fits(design, market)
        if design.assignment != "random":
            raise ValueError(
                f"{self.name} needs a switchback with assignment='random' (it weighs blocks "
                f"by their known probability 1/2), got assignment={design.assignment!r}"
            )

    def estimate(self, ledger: Ledger, metric: str = "bookings") -> Estimate:
        totals, divisors, treated = block_totals(ledger, metric)
        if ledger.blocks is not None and ledger.cells.design.assignment != "random":
            self.fits(ledger.cells.design, ledger.cells.market)
        total = divisors.sum()
        if total <= 0.0:
            return Estimate(math.nan, math.nan)
        p = TREATED_PROBABILITY
        signs = np.where(treated, 1.0 / p, -1.0 / (1.0 - p))
        value = float(signs @ totals) / total
        spread = float(np.sum(signs**2 * totals**2))
        return Estimate(value, math.sqrt(spread) / total)


__all__ = ["TREATED_PROBABILITY", "block_totals", "SwitchbackDifference",
           "SwitchbackHorvitzThompson"]
