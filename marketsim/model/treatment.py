"""The feature under test: how a treatment changes a customer's choice."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.model.market import Market


@dataclass(frozen=True, eq=False, init=False)
class Treatment:
    """The feature under test: how it changes a customer's choice.

    Parameters
    ----------
    utility_shift : float or array_like, shape (n_customer_types, n_listing_types)
        Added to the utility ``u_ij`` of treated customer-listing pairs.
    consideration_factor : float or array_like, shape (n_customer_types, n_listing_types)
        Multiplies the consideration probability of treated pairs; >= 0. The
        product must stay <= 1 (checked against the market when applied).
    outside_utility_shift : float or array_like, shape (n_customer_types,)
        Added to the outside utility of customers the design exposes to the
        treatment (in a listing-side design that is every customer; see
        :class:`marketsim.ListingSide`).

    Examples
    --------
    >>> import marketsim as ms
    >>> ms.Treatment(utility_shift=0.2)
    Treatment(utility_shift=0.2)
    """

    utility_shift: float | np.ndarray = 0.0
    consideration_factor: float | np.ndarray = 1.0
    outside_utility_shift: float | np.ndarray = 0.0

    def __init__(
        self,
        utility_shift: float | ArrayLike = 0.0,
        consideration_factor: float | ArrayLike = 1.0,
        outside_utility_shift: float | ArrayLike = 0.0,
    ) -> None:
        set_ = object.__setattr__
        set_(self, "utility_shift", _scalar_or_array("utility_shift", utility_shift, None))
        set_(self, "consideration_factor",
             _scalar_or_array("consideration_factor", consideration_factor, 0.0))
        set_(self, "outside_utility_shift",
             _scalar_or_array("outside_utility_shift", outside_utility_shift, None))

    def resolve(self, market: Market) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Treated utility, consideration and outside utility for ``market``.

        Returns
        -------
        utility : ndarray, shape (n_customer_types, n_listing_types)
        consideration : ndarray, shape (n_customer_types, n_listing_types)
        outside_utility : ndarray, shape (n_customer_types,)

        Raises
        ------
        ValueError
            If a shift has the wrong shape for the market, the treated
            consideration would exceed 1 or a treated utility would overflow.
        """
        if not isinstance(market, Market):
            raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
        pair = (market.n_customer_types, market.n_listing_types)
        pair_text = "(n_customer_types, n_listing_types)"
        shift = check.array("utility_shift", self.utility_shift, pair, pair_text,
                            broadcast=True)
        factor = check.array("consideration_factor", self.consideration_factor, pair,
                             pair_text, low=0.0, broadcast=True)
        outside = check.array("outside_utility_shift", self.outside_utility_shift,
                              (market.n_customer_types,), "(n_customer_types,)",
                              broadcast=True)
        with np.errstate(over="ignore"):
            treated_utility = market.utility + shift
            treated_outside = market.outside_utility + outside
        for label, base, total, added in (
                ("utility_shift", "utility", treated_utility, shift),
                ("outside_utility_shift", "outside_utility", treated_outside, outside)):
            if not np.isfinite(total).all():
                where = tuple(int(i) for i in np.argwhere(~np.isfinite(total))[0])
                raise ValueError(
                    f"{label} plus the market's {base} must be finite, got "
                    f"{float(added[where])!r} at index {where if len(where) > 1 else where[0]}"
                )
        treated_consideration = market.consideration * factor
        if (treated_consideration > 1.0).any():
            where = tuple(int(i) for i in np.argwhere(treated_consideration > 1.0)[0])
            raise ValueError(
                "consideration_factor times the market's consideration must be <= 1, "
                f"got {float(treated_consideration[where])!r} for pair {where}"
            )
        return treated_utility, treated_consideration, treated_outside

    def changes_choice(self, market: Market) -> bool:
        """Whether the treatment changes any customer's choice in ``market``.

        The treated and control worlds are the same market exactly when every
        considered listing type keeps its attraction ``consideration * exp(utility)``
        and every customer type that considers anything keeps its outside weight;
        then the global treatment effect is 0 for every metric.
        """
        utility, consideration, outside = self.resolve(market)
        with np.errstate(over="ignore"):
            before = market.consideration * np.exp(market.utility)
            after = consideration * np.exp(utility)
        considers = (market.consideration > 0.0).any(axis=1) | (consideration > 0.0).any(axis=1)
        return bool((before != after).any()
                    or (considers & (outside != market.outside_utility)).any())

    @property
    def is_null(self) -> bool:
        """True when the treatment changes nothing."""
        return (
            np.all(np.asarray(self.utility_shift) == 0.0)
            and np.all(np.asarray(self.consideration_factor) == 1.0)
            and np.all(np.asarray(self.outside_utility_shift) == 0.0)
        )

    def __repr__(self) -> str:
        parts = []
        defaults = {"utility_shift": 0.0, "consideration_factor": 1.0,
                    "outside_utility_shift": 0.0}
        for name, default in defaults.items():
            value = getattr(self, name)
            if np.ndim(value) or value != default:
                shown = value.tolist() if isinstance(value, np.ndarray) else value
                parts.append(f"{name}={shown!r}")
        return f"Treatment({', '.join(parts)})"


def _scalar_or_array(name: str, value: object, low: float | None) -> float | np.ndarray:
    values = np.asarray(value, dtype=object)
    if values.ndim == 0:
        return check.number(name, value, low=low)
    try:
        if check.first_non_number(value) is not check.ALL_NUMBERS:
            raise ValueError
        numeric = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number or an array of numbers, got {value!r}") \
            from None
    return check.array(name, numeric, numeric.shape, "given", low=low)


NO_TREATMENT = Treatment()
"""The null treatment: global treatment equals global control."""

__all__ = ["Treatment", "NO_TREATMENT"]
