"""Where two designs are equally biased: root-finding on the large-market curves.

A grid of balances only says that the better design changes somewhere between
two grid points; :func:`crossover_balances` brackets each change on a grid and
then finds the balance itself with Brent's method (:func:`scipy.optimize.brentq`),
on the difference of the two absolute relative biases in the large-market limit,
which has no Monte Carlo error.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.optimize import brentq

from marketsim import _validation as check
from marketsim.designs import Design
from marketsim.estimators import Estimator
from marketsim.meanfield.expected import expected_estimates
from marketsim.model import Market, Treatment

RELATIVE_TOLERANCE = 1e-6
"""Brent's method stops when the balance is known to this relative precision."""


def _relative_bias(market: Market, treatment: Treatment, design: Design,
                   estimator: Estimator | None, metric: str) -> float:
    table = expected_estimates(market, treatment, design,
                               None if estimator is None else [estimator], metric)
    return float(table["relative_bias"].iloc[0])


def crossover_balances(
    market: Market,
    treatment: Treatment,
    first: Design,
    second: Design,
    *,
    estimators: Sequence[Estimator | None] = (None, None),
    low: float = 0.01,
    high: float = 100.0,
    grid: int = 41,
    metric: str = "bookings",
) -> np.ndarray:
    """Balances at which two designs have the same absolute relative bias (large market).

    Parameters
    ----------
    market : Market
        The market; its arrival rate is rescaled to each balance
        (:meth:`Market.with_balance`), everything else stays.
    treatment : Treatment
    first, second : Design
        The two designs to compare.
    estimators : pair of Estimator or None
        The estimator read on each design (None: the design's first own
        estimator, e.g. customer-side for customer-side randomization).
    low, high : float
        The balances searched, ``0 < low < high``.
    grid : int
        Points of the logarithmic grid that brackets sign changes (>= 3); two
        crossings closer than one grid step can be missed.
    metric : {"bookings", "revenue", "conversion"}

    Returns
    -------
    numpy.ndarray
        Shape ``(n_crossings,)``, ascending: each balance where ``|relative
        bias of first| = |relative bias of second|``, to a relative precision
        of :data:`RELATIVE_TOLERANCE` of the large-market limit (the limit of a
        finite market differs from the market itself by Monte Carlo-free but
        real finite-size effects; see the README).

    Examples
    --------
    >>> import marketsim as ms
    >>> market = ms.scenarios.rehearsal_rooms().scaled(25)
    >>> crossings = crossover_balances(market, ms.scenarios.instant_confirmation(),
    ...                                ms.CustomerSide(0.5), ms.ListingSide(0.5))
    >>> [round(float(b), 2) for b in crossings]
    [1.04]
    """
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    for name, design in (("first", first), ("second", second)):
        if not isinstance(design, Design):
            raise ValueError(f"{name} must be a marketsim.Design, got {type(design).__name__}")
    low = check.number("low", low, low=0.0, low_open=True)
    high = check.number("high", high, low=low, low_open=True)
    points = check.whole_number("grid", grid, low=3)
    pair = list(estimators)
    if len(pair) != 2:
        raise ValueError(f"estimators must be a pair (one per design), got {len(pair)} items")

    def gap(log_balance: float) -> float:
        at = market.with_balance(float(np.exp(log_balance)))
        return (abs(_relative_bias(at, treatment, first, pair[0], metric))
                - abs(_relative_bias(at, treatment, second, pair[1], metric)))

    logs = np.linspace(np.log(low), np.log(high), points)
    values = np.array([gap(x) for x in logs])
    roots = []
    for k in range(points - 1):
        if values[k] == 0.0:
            roots.append(logs[k])
        elif values[k] * values[k + 1] < 0.0:
            roots.append(brentq(gap, logs[k], logs[k + 1], xtol=RELATIVE_TOLERANCE / 2,
                                rtol=RELATIVE_TOLERANCE / 2))
    if values[-1] == 0.0:
        roots.append(logs[-1])
    return np.exp(np.array(roots, dtype=float))


__all__ = ["RELATIVE_TOLERANCE", "crossover_balances"]
