"""Group totals of a ledger: the rates ``Q_xy`` every estimator combines, and `Estimate`."""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from marketsim import _validation as check
from marketsim.designs import CellSplit
from marketsim.engine.cells import MarketCells
from marketsim.engine.ledger import Ledger
from marketsim.estimators.batches import batch_standard_error, t_quantile

METRICS = ("bookings", "revenue", "conversion")


def booking_values(cells: MarketCells, metric: str) -> np.ndarray:
    """What one booking with each listing cell adds to ``metric``: 1, or the
    listing's price for revenue; shape (n_listing_cells,).

    Raises
    ------
    ValueError
        For an unknown metric, or revenue in a market without prices.
    """
    check.choice("metric", metric, METRICS)
    if metric != "revenue":
        return np.ones(cells.n_listing_cells)
    if cells.price is None:
        raise ValueError("metric 'revenue' needs a market with prices: pass price=[...] to "
                         "ms.Market, got a market without prices")
    return cells.price


SE_KINDS = ("naive", "batch means")
"""The kinds of standard error an :class:`Estimate` carries."""


@dataclass(frozen=True)
class Estimate:
    """One estimate with each kind of standard error.

    Attributes
    ----------
    value : float
    standard_error : float
        The naive standard error an analyst would report (independent units; see
        :mod:`marketsim.estimators`).
    batch_se : float
        The batch-means standard error over time (:mod:`marketsim.estimators.batches`):
        NaN when the ledger has fewer than 2 time bins.
    batches : int
        Number of batches behind ``batch_se`` (0 without bins).
    """

    value: float
    standard_error: float
    batch_se: float = math.nan
    batches: int = 0

    def interval(self, level: float = 0.95, kind: str = "naive") -> tuple[float, float]:
        """Confidence interval at ``level``: normal-theory with the naive standard
        error, or Student t on ``batches - 1`` degrees of freedom with the
        batch-means one (``kind="batch means"``; NaN bounds without batches)."""
        from scipy.stats import norm

        level = check.number("level", level, low=0.0, high=1.0, low_open=True,
                             high_open=True)
        check.choice("kind", kind, SE_KINDS)
        if kind == "naive":
            half = norm.ppf(0.5 + level / 2.0) * self.standard_error
        else:
            half = t_quantile(level, self.batches) * self.batch_se
        return self.value - half, self.value + half


@dataclass(frozen=True, eq=False)
class GroupTotals:
    """A ledger's bookings summed by listing type and (customer status, listing
    status) group.

    Attributes
    ----------
    metric : str
    totals : ndarray, shape (n_listing_types, 2, 2)
        Sum of the metric's value of each booking (1, or the price for revenue):
        ``totals[j, x, y]`` for listing type ``j``, customer status ``x`` and
        listing status ``y``.
    squares : ndarray, shape (n_listing_types, 2, 2)
        Sum of the squared values.
    arrivals : ndarray, shape (2,)
        Arrivals of control and treated customers in the window.
    scale : float
        Divisor turning totals into ``Q_xy``: the window, or for conversion the
        number of arrivals (at least 1).
    batch_totals : ndarray, shape (n_batches, n_listing_types, 2, 2)
        ``totals`` of each time bin that lies wholly in the window (none when the
        ledger has no bins).
    batch_scales : ndarray, shape (n_batches,)
        ``scale`` of each of those bins (its length, or for conversion its arrivals).
    """

    metric: str
    totals: np.ndarray
    squares: np.ndarray
    arrivals: np.ndarray
    scale: float
    batch_totals: np.ndarray = field(default_factory=lambda: np.zeros((0, 0, 2, 2)))
    batch_scales: np.ndarray = field(default_factory=lambda: np.zeros(0))

    @classmethod
    def of(cls, ledger: Ledger, metric: str = "bookings") -> GroupTotals:
        """Sum ``ledger`` by listing type and group for ``metric``."""
        cells = ledger.cells
        value = booking_values(cells, metric)
        bookings = np.asarray(ledger.bookings, dtype=float)
        shape = (cells.market.n_listing_types, 2, 2)
        totals, squares = np.zeros(shape), np.zeros(shape)
        customer = cells.split.customer_treated.astype(int)[:, None]
        listing = cells.split.listing_treated.astype(int)[None, :]
        kind = cells.split.listing_type[None, :]
        np.add.at(totals, (kind, customer, listing), bookings * value[None, :])
        np.add.at(squares, (kind, customer, listing), bookings * (value**2)[None, :])
        arrivals = np.zeros(2)
        np.add.at(arrivals, customer[:, 0], np.asarray(ledger.arrivals, dtype=float))
        scale = ledger.window if metric != "conversion" else max(ledger.arrival_count, 1.0)
        # Bins wholly inside the window (an interrupted run's ledger stops early).
        whole = ledger.bin_edges[1:] <= ledger.window * (1.0 + 1e-12)
        bins = np.asarray(ledger.bin_bookings, dtype=float)[whole] * value
        kind_of = np.eye(shape[0])[cells.split.listing_type]              # (L, J)
        listing_of = np.eye(2)[cells.split.listing_treated.astype(int)]   # (L, 2)
        customer_of = np.eye(2)[customer[:, 0]]                           # (C, 2)
        batch_totals = np.einsum("bcl,cx,lj,ly->bjxy", bins, customer_of, kind_of,
                                 listing_of)
        if metric == "conversion":
            batch_scales = np.asarray(ledger.bin_arrivals, dtype=float)[whole].sum(axis=1)
        else:
            batch_scales = np.diff(ledger.bin_edges)[whole]
        return cls(metric, totals, squares, arrivals, float(scale), batch_totals,
                   batch_scales)

    def combine(self, weights: np.ndarray) -> Estimate:
        """``sum(weights * Q)`` with its naive standard error (see the module notes)
        and, with 2 or more batches, its batch-means standard error.

        ``weights`` has shape (n_listing_types, 2, 2), as from
        :meth:`Estimator.stratum_weights`. The batch values are ``value + (sum(weights
        * batch_totals[b]) - value * batch_scales[b]) / mean(batch_scales)``: for
        rates, the estimate on batch ``b`` alone; for conversion, its linearisation
        (a ratio of bookings to arrivals).
        """
        value = float(np.sum(weights * self.totals)) / self.scale
        if self.metric != "conversion":
            variance = float(np.sum(weights**2 * self.squares))
        else:  # multinomial outcome per arriving customer, within each customer group
            variance = 0.0
            for x in (0, 1):
                if self.arrivals[x] > 0:
                    spread = float(np.sum(weights[:, x] ** 2 * self.squares[:, x]))
                    mean = float(np.sum(weights[:, x] * self.totals[:, x]))
                    variance += max(spread - mean**2 / self.arrivals[x], 0.0)
        k = self.batch_totals.shape[0]
        batch_se = math.nan
        if k >= 2 and self.batch_scales.mean() > 0:
            # The estimate of each batch, linearised around the run's (the delta method
            # for conversion's ratio; for rates it is exactly the batch's own estimate).
            per_batch = np.einsum("bjxy,jxy->b", self.batch_totals, weights)
            values = value + (per_batch - value * self.batch_scales) / self.batch_scales.mean()
            batch_se = batch_standard_error(values)
        return Estimate(value, math.sqrt(variance) / self.scale, batch_se, k)

    def analysis_split(self, split: CellSplit) -> CellSplit:
        """The split at which coefficients are evaluated: ``split`` itself, except for
        conversion, where the treated share of customers is the observed share of
        arrivals (kept as designed when a group had no arrivals)."""
        designed = split.customer_fraction
        if self.metric != "conversion" or not (self.arrivals > 0).all() \
                or not 0.0 < designed < 1.0:
            return split
        observed = self.arrivals[1] / self.arrivals.sum()
        treated = split.customer_treated
        ratio = np.where(treated, observed / designed, (1.0 - observed) / (1.0 - designed))
        return replace(split, customer_share=split.customer_share * ratio)


def group_rates(ledger: Ledger, metric: str = "bookings") -> tuple[np.ndarray, np.ndarray]:
    """Metric per unit time of each (customer status, listing status) group.

    Parameters
    ----------
    ledger : Ledger
    metric : {"bookings", "revenue", "conversion"}

    Returns
    -------
    rates : ndarray, shape (2, 2)
        ``rates[x, y]`` is ``Q_xy`` (for conversion: per arrival instead of per
        unit time).
    variances : ndarray, shape (2, 2)
        Naive (Poisson) variance of each ``Q_xy``. (The conversion estimate's
        own standard error also accounts for the arrivals: :meth:`GroupTotals.combine`.)
    """
    groups = GroupTotals.of(ledger, metric)
    return groups.totals.sum(axis=0) / groups.scale, groups.squares.sum(axis=0) / groups.scale**2


def metric_rate(ledger: Ledger, metric: str = "bookings") -> float:
    """The metric of the whole market in the window (e.g. total bookings per unit
    time); the difference of this between the two global worlds is the global
    treatment effect."""
    groups = GroupTotals.of(ledger, metric)
    return float(groups.totals.sum() / groups.scale)


__all__ = ["METRICS", "SE_KINDS", "booking_values", "Estimate", "GroupTotals", "group_rates",
           "metric_rate"]
