"""CellSplit: how a design divides customer and listing types into treated and control cells."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.model.market import Market


@dataclass(frozen=True, eq=False)
class CellSplit:
    """How a design divides customer types and listing types into cells.

    Attributes
    ----------
    customer_type : ndarray of int, shape (n_customer_cells,)
        Customer type of each customer cell.
    customer_treated : ndarray of bool, shape (n_customer_cells,)
        Whether customers of the cell are exposed to the treatment.
    customer_share : ndarray of float, shape (n_customer_cells,)
        Probability that an arriving customer falls in the cell (sums to 1).
    listing_type : ndarray of int, shape (n_listing_cells,)
        Listing type of each listing cell.
    listing_treated : ndarray of bool, shape (n_listing_cells,)
        Whether listings of the cell carry the treatment.
    listing_count : ndarray of int, shape (n_listing_cells,)
        Number of listings in the cell.
    """

    customer_type: np.ndarray
    customer_treated: np.ndarray
    customer_share: np.ndarray
    listing_type: np.ndarray
    listing_treated: np.ndarray
    listing_count: np.ndarray

    def __post_init__(self) -> None:
        """Check the split on its own (:meth:`check_market` checks it against a market)
        and store every field as a read-only array of the documented dtype."""
        set_ = object.__setattr__
        for side, fields in (("customer", ("customer_type", "customer_treated",
                                           "customer_share")),
                             ("listing", ("listing_type", "listing_treated",
                                          "listing_count"))):
            arrays = [_cell_field(name, getattr(self, name)) for name in fields]
            lengths = [a.size for a in arrays]
            if min(lengths) == 0 or len(set(lengths)) > 1:
                raise ValueError(
                    f"{', '.join(fields)} must have the same length >= 1 (one entry per "
                    f"{side} cell), got lengths {lengths}"
                )
            for name, values in zip(fields, arrays):
                set_(self, name, _frozen(values))
        total = float(self.customer_share.sum())
        if abs(total - 1.0) > 1e-9:
            raise ValueError(f"customer_share must sum to 1, got sum {total!r}")

    @classmethod
    def from_fractions(
        cls, market: Market, customers: float | ArrayLike, listings: float | ArrayLike
    ) -> CellSplit:
        """Split every type by the share of it that is treated.

        Parameters
        ----------
        market : Market
        customers : float or array_like, shape (n_customer_types,)
            Probability that an arriving customer of each type is treated.
        listings : float or array_like, shape (n_listing_types,)
            Share of the listings of each type that is treated. The treated count
            of type ``j`` is ``floor(listings[j] * n_j + 0.5)`` (nearest whole
            number, halves rounded up).

        Returns
        -------
        CellSplit
            Cells with no customers or no listings are left out.
        """
        if not isinstance(market, Market):
            raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
        customer_fraction = check.array(
            "customers", customers, (market.n_customer_types,), "(n_customer_types,)",
            low=0.0, high=1.0, broadcast=True)
        listing_fraction = check.array(
            "listings", listings, (market.n_listing_types,), "(n_listing_types,)",
            low=0.0, high=1.0, broadcast=True)
        c_type, c_treated, c_share = [], [], []
        for i, share in enumerate(market.customer_shares):
            for treated, part in ((False, 1.0 - customer_fraction[i]),
                                  (True, customer_fraction[i])):
                if share * part > 0.0:
                    c_type.append(i)
                    c_treated.append(treated)
                    c_share.append(share * part)
        l_type, l_treated, l_count = [], [], []
        for j, count in enumerate(market.listing_counts):
            n_treated = math.floor(listing_fraction[j] * count + 0.5)
            for treated, part in ((False, int(count) - n_treated), (True, n_treated)):
                if part > 0:
                    l_type.append(j)
                    l_treated.append(treated)
                    l_count.append(part)
        shares = np.array(c_share)
        return cls(
            customer_type=_frozen(np.array(c_type, dtype=np.int64)),
            customer_treated=_frozen(np.array(c_treated, dtype=bool)),
            customer_share=_frozen(shares / shares.sum()),
            listing_type=_frozen(np.array(l_type, dtype=np.int64)),
            listing_treated=_frozen(np.array(l_treated, dtype=bool)),
            listing_count=_frozen(np.array(l_count, dtype=np.int64)),
        )

    def stratum(self, listing_type: int) -> CellSplit:
        """The split restricted to the listing cells of one listing type (every
        customer cell kept): its :attr:`listing_fraction` is that type's own
        treated share."""
        keep = self.listing_type == listing_type
        return CellSplit(
            customer_type=self.customer_type,
            customer_treated=self.customer_treated,
            customer_share=self.customer_share,
            listing_type=_frozen(self.listing_type[keep].copy()),
            listing_treated=_frozen(self.listing_treated[keep].copy()),
            listing_count=_frozen(self.listing_count[keep].copy()),
        )

    def check_market(self, market: Market, source: str = "the split") -> None:
        """Check that the split divides ``market`` and changes nothing else: every
        listing type's cells hold all its listings, every customer type's cells all
        its share of arrivals.

        Parameters
        ----------
        market : Market
        source : str
            Who made the split, for the error message (e.g. the design).

        Raises
        ------
        ValueError
            Naming ``source``, the field, the type and what it got.
        """
        for name, types, n_types in (
                ("customer_type", self.customer_type, market.n_customer_types),
                ("listing_type", self.listing_type, market.n_listing_types)):
            if types.max() >= n_types:
                raise ValueError(
                    f"{source}: {name} must be below the market's {n_types} types, got "
                    f"{int(types.max())}"
                )
        counts = np.bincount(self.listing_type, weights=self.listing_count,
                             minlength=market.n_listing_types)
        for j, (got, want) in enumerate(zip(counts, market.listing_counts)):
            if got != want:
                raise ValueError(
                    f"{source}: listing_count of the cells of listing type "
                    f"{market.listing_types[j]!r} must add up to its {int(want)} listings, "
                    f"got {int(got)}"
                )
        shares = np.bincount(self.customer_type, weights=self.customer_share,
                             minlength=market.n_customer_types)
        wanted = market.customer_shares / market.customer_shares.sum()
        for i, (got, want) in enumerate(zip(shares, wanted)):
            if abs(got - want) > 1e-9:
                raise ValueError(
                    f"{source}: customer_share of the cells of customer type "
                    f"{market.customer_types[i]!r} must add up to its share {float(want)!r}, "
                    f"got {float(got)!r}"
                )

    @property
    def customer_fraction(self) -> float:
        """Share of arriving customers who are treated (``a_C``)."""
        return float(self.customer_share[self.customer_treated].sum())

    @property
    def listing_fraction(self) -> float:
        """Share of listings that are treated after rounding (``a_L``)."""
        return float(self.listing_count[self.listing_treated].sum() / self.listing_count.sum())


def _frozen(values: np.ndarray) -> np.ndarray:
    values.flags.writeable = False
    return values


def _cell_field(name: str, value: object) -> np.ndarray:
    """One field of a :class:`CellSplit` as a fresh 1-d array of its dtype."""
    try:
        values = np.array(value)
    except (TypeError, ValueError):  # ragged nesting
        values = np.array(None)
    if name.endswith("_treated"):
        if values.ndim != 1 or (values.size and values.dtype.kind != "b"):
            raise ValueError(f"{name} must be a 1-d array of True/False, got "
                             f"{check._shown(value)}")
        return values.astype(bool)
    if name == "customer_share":
        return check.array(name, value, (None,), "(n_customer_cells,)", low=0.0,
                           low_open=True, high=1.0).copy()
    low = 1 if name == "listing_count" else 0
    if values.ndim != 1 or (values.size and (values.dtype.kind not in "iu"
                                             or values.min() < low)):
        raise ValueError(f"{name} must be a 1-d array of whole numbers >= {low}, got "
                         f"{check._shown(value)}")
    return values.astype(np.int64)


__all__ = ["CellSplit"]
