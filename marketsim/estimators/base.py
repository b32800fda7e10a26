"""The estimator interface: coefficients on the group rates, stratified by listing type."""

from __future__ import annotations

from abc import ABC, abstractmethod

import numpy as np

from marketsim.designs import CellSplit, Design, Switchback
from marketsim.engine.ledger import Ledger
from marketsim.estimators.totals import Estimate, GroupTotals
from marketsim.model.market import Market


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

    @property
    def is_linear(self) -> bool:
        """True when the estimate is the base class's combination of group rates
        (coefficients from :meth:`weights`); False for an estimator that overrides
        :meth:`estimate` (e.g. the switchback estimators)."""
        return type(self).estimate is Estimator.estimate

    def fits(self, design: Design, market: Market) -> None:
        """Check that the estimator applies to ``design`` in ``market``.

        Raises
        ------
        ValueError
            Saying why not: by default the message of :meth:`weights` on the
            design's split; a switchback design (whose ledger is by blocks, not
            by randomized groups) fits only the switchback estimators.
        """
        if isinstance(design, Switchback):
            raise ValueError(
                f"{self.name} combines the rates of randomized customer and listing groups; "
                f"a switchback design compares time blocks: use ms.SwitchbackDifference() "
                f"or ms.SwitchbackHorvitzThompson(), got the design {design.label!r}"
            )
        self.weights(design.split(market), market)

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


__all__ = ["Estimator"]
