"""The built-in estimators: customer-side, listing-side, two-sided naive, corrected and
debiased."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from marketsim import _validation as check
from marketsim.designs import CellSplit
from marketsim.estimators.base import Estimator
from marketsim.model.market import Market


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
    "Experimental design in two-sided platforms: an analysis of bias",
    Management Science 68(10), 2022: the two-sided design and this naive estimator.
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
    """Two-sided estimator with a heuristic interference correction.

    ``naive + k * [beta * (Q_10/a_C - Q_00/(1-a_C)) + (1-beta) * (Q_01/a_L - Q_00/(1-a_L))]``

    The first contrast compares treated and control customers on control
    listings (listings competing for customers), the second treated and control
    listings seen by control customers (customers competing for listings).

    This form is this project's reading of a published heuristic; the exact
    normalisation of the published corrected estimators was not checked, so do
    not read it as the paper's estimator. In the large-market model it shrinks
    the naive bias but leaves +5% to +70% of the effect (k = 2) at balance 0.3
    to 3; :class:`TwoSidedDebiased` weighs the same two contrasts by a
    first-order derivation.

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
    "Experimental design in two-sided platforms: an analysis of bias",
    Management Science 68(10), 2022: the two-sided design, the naive estimator
    and the weight ``beta = exp(-balance)`` of the fraction rule; not the
    coefficients above.
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
        return _naive_or_nothing(stratum, market)

    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        _, _, naive, first, second = _contrasts(split, market, self.name)
        beta = _beta(market, self.beta)
        return naive + self.k * (beta * first + (1.0 - beta) * second)


@dataclass(frozen=True, repr=False)
class TwoSidedDebiased(Estimator):
    """Two-sided estimator debiased to first order in the effect at both balance limits.

    ``naive + beta / (a_L (1 - a_C a_L)) * (Q_10/a_C - Q_00/(1-a_C))
    + (1 - beta) / (a_C (1 - a_C a_L)) * (Q_01/a_L - Q_00/(1-a_L))``

    The two contrasts of :class:`TwoSidedCorrected` (treated against control
    customers on control listings; treated against control listings seen by control
    customers), each weighed so that it cancels the naive estimator's bias to first
    order in the effect in one limit of the large-market model: the first when
    demand is scarce (every listing available), the second when supply is scarce
    and the outside option dominates the choice. ``beta`` moves between the two.

    Parameters
    ----------
    beta : float, optional
        Weight of the demand-scarce correction, in [0, 1]; default
        ``exp(-balance)`` of the market.

    Notes
    -----
    The derivation is in ``docs/two_sided_debiased.md``. Demand scarce:
    ``bias(naive) = p^2 d (1 - a_L) / (1 - a_C a_L)`` and the first contrast is
    ``-a_L (1 - a_L) p^2 d`` (``p`` a control customer's booking probability,
    ``d`` the utility shift), whose ratio is the first weight. Supply scarce with
    a dominant outside option (hazard ``h`` of an available listing, bookings per
    listing ``r(h) = h / (1 + h / tau)``): ``bias(naive) = d (1 - a_C)(r - h r') /
    (1 - a_C a_L)`` and the second contrast is ``-a_C (1 - a_C)(r - h r') d``.
    Both hold per customer and listing type, so the formula is first-order exact
    at each limit on heterogeneous markets too (checked in
    ``tests/test_debiased.py``). Between the limits and for large effects it is an
    interpolation: with fractions that follow balance its large-market relative
    bias stayed within about 10% on the markets tested; with fixed fractions at
    high balance and consideration near 1 (the outside option does not dominate)
    it over-corrects (``docs/where_each_estimator_wins.md``).

    Applied, like every estimator here, within each listing type with that type's
    treated share of listings. It needs both sides randomized (``0 < a_C < 1``,
    ``0 < a_L < 1``); on a listing type with only treated or only control listings
    it falls back to the naive estimator.
    """

    beta: float | None = None

    def __post_init__(self) -> None:
        if self.beta is not None:
            check.number("beta", self.beta, low=0.0, high=1.0)

    @property
    def name(self) -> str:
        suffix = "" if self.beta is None else f", beta={self.beta:g}"
        return f"two-sided debiased (first order{suffix})"

    def fallback_weights(self, stratum: CellSplit, market: Market) -> np.ndarray:
        """The naive estimator's coefficients where neither contrast exists."""
        return _naive_or_nothing(stratum, market)

    def weights(self, split: CellSplit, market: Market) -> np.ndarray:
        a_c, a_l, naive, first, second = _contrasts(split, market, self.name)
        beta = _beta(market, self.beta)
        both = 1.0 - a_c * a_l
        return naive + beta / (a_l * both) * first + (1.0 - beta) / (a_c * both) * second


def _beta(market: Market, beta: float | None) -> float:
    """``exp(-balance)`` of the market, unless given."""
    return math.exp(-market.balance) if beta is None else beta


def _contrasts(split: CellSplit, market: Market, estimator: str) -> tuple:
    """``a_C``, ``a_L`` and the coefficients of the naive estimator and of the two
    contrasts ``Q_10/a_C - Q_00/(1-a_C)`` and ``Q_01/a_L - Q_00/(1-a_L)``."""
    a_c = _fraction(split, "customers", estimator)
    a_l = _fraction(split, "listings", estimator)
    first = np.array([[-1.0 / (1.0 - a_c), 0.0], [1.0 / a_c, 0.0]])
    second = np.array([[-1.0 / (1.0 - a_l), 1.0 / a_l], [0.0, 0.0]])
    return a_c, a_l, TwoSidedNaive().weights(split, market), first, second


def _naive_or_nothing(stratum: CellSplit, market: Market) -> np.ndarray:
    try:
        return TwoSidedNaive().weights(stratum, market)
    except ValueError:
        return np.zeros((2, 2))


__all__ = ["CustomerSideEstimator", "ListingSideEstimator", "TwoSidedNaive", "TwoSidedCorrected",
           "TwoSidedDebiased"]
