"""Which estimators go with which design, and which fit a design's split."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from marketsim.designs import (
    CellSplit,
    CustomerSide,
    Design,
    ListingSide,
    Switchback,
    TwoSided,
    TwoSidedFollowingBalance,
)
from marketsim.estimators.base import Estimator
from marketsim.estimators.linear import (
    CustomerSideEstimator,
    ListingSideEstimator,
    TwoSidedCorrected,
    TwoSidedDebiased,
    TwoSidedNaive,
)
from marketsim.estimators.switchback import SwitchbackDifference, SwitchbackHorvitzThompson
from marketsim.model.market import Market


def all_estimators() -> tuple[Estimator, ...]:
    """Every built-in estimator, in the order tables show them."""
    return (
        CustomerSideEstimator(),
        ListingSideEstimator(),
        TwoSidedNaive(),
        TwoSidedCorrected(k=1),
        TwoSidedCorrected(k=2),
        TwoSidedDebiased(),
    )


def two_sided_family() -> tuple[Estimator, ...]:
    """The estimators of a two-sided design: naive, corrected (k = 1, 2), debiased."""
    return (TwoSidedNaive(), TwoSidedCorrected(k=1), TwoSidedCorrected(k=2),
            TwoSidedDebiased())


OWN_ESTIMATORS: dict[type[Design], Callable[[], tuple[Estimator, ...]]] = {
    CustomerSide: lambda: (CustomerSideEstimator(),),
    ListingSide: lambda: (ListingSideEstimator(),),
    # The one-sided contrasts of a two-sided experiment measure a partial exposure
    # (treated customers see the feature on only a share of the listings): they are
    # scored only when asked for.
    TwoSided: lambda: two_sided_family(),
    TwoSidedFollowingBalance: lambda: two_sided_family(),
    # Random assignment: both; alternating: the difference only (the Horvitz-Thompson
    # estimator refuses it in its fit check).
    Switchback: lambda: (SwitchbackDifference(), SwitchbackHorvitzThompson()),
}
"""Each design's own estimators, by design class. The table lives here, with the
estimators, so that designs never need to know about estimators; a new design
class can be added to it (a subclass inherits its parent's entry)."""


def design_estimators(design: Design) -> tuple[Estimator, ...]:
    """The estimators that go with ``design`` (before checking that they fit).

    Looked up in :data:`OWN_ESTIMATORS` by the design's class and then its parent
    classes; a design found nowhere (a custom one) gets every built-in estimator.
    """
    for kind in type(design).__mro__:
        if kind in OWN_ESTIMATORS:
            return OWN_ESTIMATORS[kind]()
    return all_estimators()


def default_estimators(design: Design, market: Market) -> tuple[Estimator, ...]:
    """The estimators to score on ``design`` when none are given.

    The design's own estimators (:func:`design_estimators`: customer-side for
    customer-side randomization, listing-side for listing-side, the two-sided
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
    for estimator in design_estimators(design):
        try:
            estimator.fits(design, market)
        except ValueError:
            continue
        if not estimator.is_linear:
            chosen.append(estimator)
            continue
        weights = np.where(present, estimator.stratum_weights(split, market), 0.0)
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


__all__ = ["OWN_ESTIMATORS", "two_sided_family", "all_estimators", "design_estimators",
           "default_estimators", "fitting_estimators"]
