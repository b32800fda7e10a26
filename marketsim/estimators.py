"""Estimators: a ledger in, an estimate and the naive standard error out.

Every estimator here is a linear combination of the group rates ``Q_xy``: the
metric per unit time produced by customers of treatment status ``x`` with
listings of status ``y`` (1 = treated, 0 = control). A subclass only supplies
the 2 x 2 matrix of coefficients (:meth:`Estimator.weights`) for the design's
treated fractions ``a_C`` (customers) and ``a_L`` (listings); the base class
turns a ledger into an :class:`Estimate`.

Metrics
-------
``"bookings"``
    Bookings per unit time.
``"revenue"``
    Revenue per unit time (needs :attr:`Market.price`).
``"conversion"``
    Bookings per arriving customer. ``Q_xy`` is then the bookings of group
    ``xy`` per arrival, and the customer fraction ``a_C`` in the coefficients is
    the *observed* share of arrivals that were treated (the design probability
    when a group had no arrivals), so that the customer-side estimator is the
    analyst's difference of conversion rates,
    ``bookings_1 / arrivals_1 - bookings_0 / arrivals_0``.

Naive standard error
--------------------
What an analyst who treats units as independent would report. For bookings and
revenue per unit time the counts of each group are independent Poisson
(compound Poisson for revenue), so ``Var(Q_xy) = sum(price**2 * bookings) /
window**2``. For conversion each arriving customer is an independent unit whose
outcome (no booking, or a booking with a control or a treated listing) is
multinomial within its group: the customer-side standard error is the familiar
``sqrt(p_1 (1 - p_1) / n_1 + p_0 (1 - p_0) / n_0)``. Interference between units
makes these wrong, which is exactly what a study measures (interval coverage).

Checks
------
Every formula (values and naive standard errors, all three metrics) is checked
against arithmetic done by hand on a made-up ledger in
``tests/test_estimators.py``; the unbiasedness of each estimator without
competition and the bias patterns with it are checked by simulation in
``tests/test_study.py``.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass, replace

import numpy as np

from marketsim import _validation as check
from marketsim.designs import CellSplit, Design
from marketsim.ledger import Ledger
from marketsim.market import Market

METRICS = ("bookings", "revenue", "conversion")


@dataclass(frozen=True)
class Estimate:
    """One estimate with the naive standard error an analyst would report."""

    value: float
    standard_error: float

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """Normal-theory confidence interval at ``level``."""
        from scipy.stats import norm

        level = check.number("level", level, low=0.0, high=1.0, low_open=True,
                             high_open=True)
        half = norm.ppf(0.5 + level / 2.0) * self.standard_error
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
    """

    metric: str
    totals: np.ndarray
    squares: np.ndarray
    arrivals: np.ndarray
    scale: float

    @classmethod
    def of(cls, ledger: Ledger, metric: str = "bookings") -> GroupTotals:
        """Sum ``ledger`` by listing type and group for ``metric``."""
        check.choice("metric", metric, METRICS)
        cells = ledger.cells
        value = np.ones(cells.n_listing_cells)
        if metric == "revenue":
            if cells.price is None:
                raise ValueError(
                    "metric 'revenue' needs a market with prices: pass price=[...] to "
                    "ms.Market, got a market without prices"
                )
            value = cells.price
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
        return cls(metric, totals, squares, arrivals, float(scale))

    def combine(self, weights: np.ndarray) -> Estimate:
        """``sum(weights * Q)`` with its naive standard error (see the module notes).

        ``weights`` has shape (n_listing_types, 2, 2), as from
        :meth:`Estimator.stratum_weights`.
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
        return Estimate(value, math.sqrt(variance) / self.scale)

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


class Estimator(ABC):
    """Base class of estimators that are linear in the group rates ``Q_xy``.

    A subclass implements :meth:`weights`: the 2 x 2 matrix ``c`` with
    ``estimate = sum over x, y of c[x, y] * Q_xy`` (row = customer status,
    column = listing status, 0 = control, 1 = treated), computed from the
    design's treated fractions. It raises ``ValueError`` when the design does
    not fit (for example a listing-side estimator on a design that treats no
    listings, or all of them). The base class supplies :meth:`estimate` (value
    and naive standard error, for every metric) and a :attr:`name`.

    The formula is applied within each listing type, with that type's own
    treated share of listings, and summed over the types
    (:meth:`stratum_weights`): a stratified estimator, as the stratified
    randomization of listings calls for. When every type has the same treated
    share this is exactly the formula on the whole market; when rounding to
    whole listings gives the types different shares, it keeps the estimate free
    of the bias that mixing them would cause. A type the formula cannot use (for
    the listing-side estimator, one with no treated or no control listings)
    contributes :meth:`fallback_weights`, by default nothing. Keep
    subclasses picklable (plain classes or frozen dataclasses) so that
    :class:`marketsim.Study` can use them in worker processes.

    Examples
    --------
    Compare treated and control listings among treated customers only:

    >>> import numpy as np
    >>> import marketsim as ms
    >>> class AmongTreatedCustomers(ms.Estimator):
    ...     def weights(self, split, market):
    ...         a_c, a_l = split.customer_fraction, split.listing_fraction
    ...         if not (0 < a_c and 0 < a_l < 1):
    ...             raise ValueError(f"{self.name} needs 0 < a_L < 1, got a_L = {a_l:.3g}")
    ...         return np.array([[0.0, 0.0], [-1 / (a_c * (1 - a_l)), 1 / (a_c * a_l)]])
    >>> market = ms.scenarios.rehearsal_rooms()
    >>> ledger = ms.simulate(market, ms.scenarios.instant_confirmation(),
    ...                      ms.TwoSided(0.5, 0.5), horizon=50.0, seed=3)
    >>> estimate = AmongTreatedCustomers().estimate(ledger)
    >>> estimate.standard_error > 0
    True
    """

    @property
    def name(self) -> str:
        """Short name used in tables and plots."""
        return type(self).__name__

    @abstractmethod
    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        """Coefficients ``c[x, y]`` with ``estimate = sum(c * Q)``, shape (2, 2)."""

    def fallback_weights(self, stratum: CellSplit, market: Market) -> np.ndarray:
        """Coefficients for a listing type where :meth:`weights` does not fit;
        zeros: the type contributes nothing."""
        return np.zeros((2, 2))

    def stratum_weights(self, split: CellSplit, market: Market) -> np.ndarray:
        """Coefficients per listing type, shape (n_listing_types, 2, 2).

        Raises
        ------
        ValueError
            If the design as a whole does not fit (the message of :meth:`weights`).
        """
        self.weights(split, market)
        result = np.zeros((market.n_listing_types, 2, 2))
        for kind in np.unique(split.listing_type):
            stratum = split.stratum(kind)
            try:
                result[kind] = self.weights(stratum, market)
            except ValueError:
                result[kind] = self.fallback_weights(stratum, market)
        return result

    def estimate(self, ledger: Ledger, metric: str = "bookings") -> Estimate:
        """Apply the estimator to one ledger.

        Parameters
        ----------
        ledger : Ledger
            A simulated run or a large-market expected ledger.
        metric : {"bookings", "revenue", "conversion"}

        Returns
        -------
        Estimate
        """
        groups = GroupTotals.of(ledger, metric)
        split = groups.analysis_split(ledger.cells.split)
        return groups.combine(self.stratum_weights(split, ledger.cells.market))

    def __repr__(self) -> str:
        return self.name


def _fraction(split: CellSplit, side: str, estimator: str) -> float:
    value = split.customer_fraction if side == "customers" else split.listing_fraction
    if not 0.0 < value < 1.0:
        symbol = "a_C" if side == "customers" else "a_L"
        extent = "none" if value <= 0.0 else "all"
        raise ValueError(
            f"{estimator} needs a design that treats some but not all {side} "
            f"(0 < {symbol} < 1), got {symbol} = {value:.4g} (the design treats {extent} "
            f"of the {side})"
        )
    return value


class CustomerSideEstimator(Estimator):
    """Difference in means between treated and control customers:
    ``Q_1. / a_C - Q_0. / (1 - a_C)``.

    Fits any design that randomizes customers (``0 < a_C < 1``).
    """

    @property
    def name(self) -> str:
        return "customer-side"

    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        a = _fraction(split, "customers", self.name)
        return np.array([[-1.0 / (1.0 - a)] * 2, [1.0 / a] * 2])


class ListingSideEstimator(Estimator):
    """Difference in means between treated and control listings:
    ``Q_.1 / a_L - Q_.0 / (1 - a_L)``, with the realised treated share ``a_L``.

    Fits any design that randomizes listings (``0 < a_L < 1``).
    """

    @property
    def name(self) -> str:
        return "listing-side"

    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        a = _fraction(split, "listings", self.name)
        return np.array([[-1.0 / (1.0 - a), 1.0 / a]] * 2)


class TwoSidedNaive(Estimator):
    """Naive two-sided estimator:
    ``Q_11 / (a_C a_L) - (Q_10 + Q_01 + Q_00) / (1 - a_C a_L)``.

    Equals the customer-side estimator when ``a_L = 1`` and the listing-side
    one when ``a_C = 1``.

    References
    ----------
    Johari, Li, Liskovich and Weintraub, "Experimental design in two-sided
    platforms: an analysis of bias", Management Science 68(10), 2022.
    """

    @property
    def name(self) -> str:
        return "two-sided naive"

    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        both = split.customer_fraction * split.listing_fraction
        if not 0.0 < both < 1.0:
            raise ValueError(
                f"{self.name} needs a design with some treated pairs and some control "
                f"pairs (a_C * a_L strictly between 0 and 1), got a_C * a_L = {both:.4g}"
            )
        rest = -1.0 / (1.0 - both)
        return np.array([[rest, rest], [rest, 1.0 / both]])


@dataclass(frozen=True, repr=False)
class TwoSidedCorrected(Estimator):
    """Two-sided estimator corrected for interference.

    ``naive + k * [beta * (Q_10/a_C - Q_00/(1-a_C)) + (1-beta) * (Q_01/a_L - Q_00/(1-a_L))]``

    The first contrast compares treated and control customers on control
    listings (listings competing for customers), the second treated and control
    listings seen by control customers (customers competing for listings).

    Parameters
    ----------
    k : {1, 2}
        Weight of the correction.
    beta : float, optional
        Weight of the first contrast, in [0, 1]; default ``exp(-balance)`` of
        the market.

    Notes
    -----
    The formula is checked numerically in ``tests/test_meanfield.py`` against
    the large-market limit, where the bias of each estimator is computed without
    Monte Carlo error; what was found is reported there and in the README.

    References
    ----------
    Johari, Li, Liskovich and Weintraub, Management Science 68(10), 2022.
    """

    k: int = 1
    beta: float | None = None

    def __post_init__(self) -> None:
        if self.k not in (1, 2) or isinstance(self.k, bool):
            raise ValueError(f"k must be 1 or 2, got {self.k!r}")
        if self.beta is not None:
            check.number("beta", self.beta, low=0.0, high=1.0)

    @property
    def name(self) -> str:
        suffix = "" if self.beta is None else f", beta={self.beta:g}"
        return f"two-sided corrected (k={self.k}{suffix})"

    def fallback_weights(self, stratum: CellSplit, market: Market) -> np.ndarray:
        """On a listing type with only treated (or only control) listings neither
        correction contrast exists: the naive estimator's coefficients there."""
        try:
            return TwoSidedNaive().weights(stratum, market)
        except ValueError:
            return np.zeros((2, 2))

    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        a_c = _fraction(split, "customers", self.name)
        a_l = _fraction(split, "listings", self.name)
        beta = math.exp(-market.balance) if self.beta is None else self.beta
        first = np.array([[-1.0 / (1.0 - a_c), 0.0], [1.0 / a_c, 0.0]])
        second = np.array([[-1.0 / (1.0 - a_l), 1.0 / a_l], [0.0, 0.0]])
        naive = TwoSidedNaive().weights(split, market)
        return naive + self.k * (beta * first + (1.0 - beta) * second)


def all_estimators() -> tuple[Estimator, ...]:
    """Every built-in estimator, in the order tables show them."""
    return (
        CustomerSideEstimator(),
        ListingSideEstimator(),
        TwoSidedNaive(),
        TwoSidedCorrected(k=1),
        TwoSidedCorrected(k=2),
    )


def default_estimators(design: Design, market: Market) -> tuple[Estimator, ...]:
    """The estimators to score on ``design`` when none are given.

    The design's own estimators (:meth:`Design.default_estimators`: customer-side
    for customer-side randomization, listing-side for listing-side, the two-sided
    family for two-sided, every built-in for a custom design) that fit its split
    in ``market``, leaving out any that repeat an earlier one on the groups the
    split has (scored on a custom design that treats every listing, the two-sided
    naive estimator *is* the customer-side one).

    Returns
    -------
    tuple of Estimator
        Possibly empty (e.g. for a global design).
    """
    split = design.split(market)
    present = np.zeros((market.n_listing_types, 2, 2), dtype=bool)
    present[split.listing_type[None, :], split.customer_treated.astype(int)[:, None],
            split.listing_treated.astype(int)[None, :]] = True
    chosen: list[Estimator] = []
    seen: list[np.ndarray] = []
    for estimator in design.default_estimators():
        try:
            weights = np.where(present, estimator.stratum_weights(split, market), 0.0)
        except ValueError:
            continue
        if any(np.allclose(weights, other, rtol=1e-12, atol=0.0) for other in seen):
            continue
        chosen.append(estimator)
        seen.append(weights)
    return tuple(chosen)


def fitting_estimators(split: CellSplit, market: Market) -> tuple[Estimator, ...]:
    """The built-in estimators that fit a design's split."""
    fitting = []
    for estimator in all_estimators():
        try:
            estimator.weights(split, market)
        except ValueError:
            continue
        fitting.append(estimator)
    return tuple(fitting)
