"""The built-in estimators: customer-side, listing-side, two-sided naive and corrected."""

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
    to 3.

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


__all__ = ["CustomerSideEstimator", "ListingSideEstimator", "TwoSidedNaive", "TwoSidedCorrected"]
