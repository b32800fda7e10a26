"""The market specification: listing and customer types, choice, busy times.

A market is immutable and validated once, at construction; everything
downstream (designs, engine, large-market model) trusts it.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.model.busy_time import BusyTime, Exponential
from marketsim.model.busy_time import per_listing_type as busy_time_per_type
from marketsim.model.demand import DemandProfile, checked_profile

SHARE_TOLERANCE = 1e-9
MAX_LISTINGS = 2**53
"""Most listings a market may have, per type and in all (counted exactly in float64)."""


@dataclass(frozen=True, eq=False, init=False)
class Market:
    """A finite two-sided market of customers and listings.

    Listings of type ``j`` (``listing_counts[j]`` of them) are either available or
    busy. A booked listing stays busy for a time of mean ``mean_busy_time[j]``,
    exponential unless ``busy_time`` gives another shape. Customers arrive as a
    Poisson process of rate ``arrival_rate`` (the mean rate, when a ``demand``
    profile makes it follow the clock); each is of type ``i`` with probability
    ``customer_shares[i]``, considers each *available* listing of type ``j``
    independently with probability ``consideration[i, j]`` and books listing ``l``
    of type ``j`` among those considered with the multinomial-logit probability

    .. math:: \\frac{w_{ij}}{N w_{0i} + \\sum_{\\text{considered}} w},
              \\qquad w_{ij} = e^{u_{ij}},\\ w_{0i} = e^{u_{0i}},

    or leaves without booking. ``N`` is the total number of listings.

    Parameters
    ----------
    listing_counts : sequence of int, shape (n_listing_types,)
        Number of listings of each type; whole numbers >= 1.
    mean_busy_time : array_like, shape (n_listing_types,)
        Mean time a booked listing stays busy; finite, > 0.
    arrival_rate : float
        Customer arrivals per unit time (all types); finite, > 0.
    customer_shares : array_like, shape (n_customer_types,)
        Probability that an arriving customer is of each type; >= 0, summing to 1.
    consideration : array_like, shape (n_customer_types, n_listing_types)
        Probability that a customer of type ``i`` considers a given available
        listing of type ``j``; in [0, 1]. A scalar applies to every pair.
    utility : array_like, shape (n_customer_types, n_listing_types)
        Logit utility ``u_ij`` of a listing of type ``j`` to a customer of type ``i``.
        A scalar applies to every pair.
    outside_utility : array_like, shape (n_customer_types,)
        Utility ``u_0i`` of not booking. A scalar applies to every type.
    listing_types, customer_types : sequence of str, optional
        Distinct names of the types (default ``"listing type 0"``, ...).
    price : array_like, shape (n_listing_types,), optional
        Price of one booking of each listing type; enables the revenue metric.
    busy_time : BusyTime or sequence of BusyTime, optional
        Shape of the busy-time distribution (:mod:`marketsim.busy_time`): one
        for every listing type or one per listing type; its mean is
        ``mean_busy_time``. Default: exponential, the Markov chain. Any other
        shape is simulated by the general engine (a heap of release times).
    demand : DemandProfile, optional
        Arrival-rate multipliers over a repeating period (:class:`~marketsim.DemandProfile`),
        normalised to average 1 so that ``arrival_rate`` is the mean rate over
        a period. Default: a constant rate.

    Notes
    -----
    **The outside option grows with the market.** Its weight is ``N * w_0i``, not
    ``w_0i``. With a fixed number of considered listings per listing, the booking
    probability therefore stays meaningful as ``N`` grows, and the market has the
    large-market limit of :mod:`marketsim.meanfield` (Kurtz, 1970).

    **Balance** is ``arrival_rate / sum_j(n_j / mean_busy_time[j])``: arrivals per
    unit time over the rate at which listings would be released if every listing
    were busy. Small balance means demand is scarce, large balance means supply
    is scarce.

    Examples
    --------
    >>> import marketsim as ms
    >>> m = ms.Market(listing_counts=[20], mean_busy_time=[2.0], arrival_rate=5.0,
    ...               customer_shares=[1.0], consideration=0.5, utility=0.0,
    ...               outside_utility=-2.0)
    >>> round(m.balance, 3)
    0.5
    """

    listing_counts: np.ndarray
    mean_busy_time: np.ndarray
    arrival_rate: float
    customer_shares: np.ndarray
    consideration: np.ndarray
    utility: np.ndarray
    outside_utility: np.ndarray
    listing_types: tuple[str, ...]
    customer_types: tuple[str, ...]
    price: np.ndarray | None = field(default=None)
    busy_time: tuple[BusyTime, ...] = field(default=())
    demand: DemandProfile | None = field(default=None)

    def __init__(
        self,
        listing_counts: Sequence[int],
        mean_busy_time: ArrayLike,
        arrival_rate: float,
        customer_shares: ArrayLike,
        consideration: ArrayLike,
        utility: ArrayLike,
        outside_utility: ArrayLike,
        listing_types: Sequence[str] | None = None,
        customer_types: Sequence[str] | None = None,
        price: ArrayLike | None = None,
        busy_time: BusyTime | Sequence[BusyTime] | None = None,
        demand: DemandProfile | None = None,
    ) -> None:
        counts = _listing_counts(listing_counts)
        n_listing = counts.size
        shares = check.array("customer_shares", customer_shares, (None,),
                             "(n_customer_types,)", low=0.0, high=1.0)
        n_customer = shares.size
        if shares.size == 0:
            raise ValueError("customer_shares must list at least one customer type, got []")
        if abs(shares.sum() - 1.0) > SHARE_TOLERANCE:
            raise ValueError(
                f"customer_shares must sum to 1 (tolerance {SHARE_TOLERANCE:g}), "
                f"got sum {float(shares.sum())!r}"
            )
        pair = (n_customer, n_listing)
        pair_text = "(n_customer_types, n_listing_types)"
        set_ = object.__setattr__
        set_(self, "listing_counts", counts)
        set_(self, "mean_busy_time", check.array(
            "mean_busy_time", mean_busy_time, (n_listing,), "(n_listing_types,)",
            low=0.0, low_open=True))
        with np.errstate(divide="ignore", over="ignore"):
            release = counts / self.mean_busy_time
        if not np.isfinite(release).all():
            k = int(np.argmin(np.isfinite(release)))
            raise ValueError(
                "mean_busy_time must be large enough that listing_counts / mean_busy_time "
                f"is finite, got {float(self.mean_busy_time[k])!r} at index {k}"
            )
        set_(self, "arrival_rate", check.number("arrival_rate", arrival_rate, low=0.0,
                                                low_open=True))
        set_(self, "customer_shares", shares)
        set_(self, "consideration", check.array(
            "consideration", consideration, pair, pair_text, low=0.0, high=1.0,
            broadcast=True))
        set_(self, "utility", check.array("utility", utility, pair, pair_text,
                                          broadcast=True))
        set_(self, "outside_utility", check.array(
            "outside_utility", outside_utility, (n_customer,), "(n_customer_types,)",
            broadcast=True))
        set_(self, "listing_types", check.names("listing_types", listing_types, n_listing,
                                                "listing type"))
        set_(self, "customer_types", check.names("customer_types", customer_types,
                                                 n_customer, "customer type"))
        set_(self, "price", None if price is None else check.array(
            "price", price, (n_listing,), "(n_listing_types,)", low=0.0))
        set_(self, "busy_time", busy_time_per_type(busy_time, n_listing))
        set_(self, "demand", checked_profile(demand))

    # ----------------------------------------------------------------- derived
    @property
    def n_listings(self) -> int:
        """Total number of listings ``N``."""
        return int(self.listing_counts.sum())

    @property
    def n_listing_types(self) -> int:
        """Number of listing types ``J``."""
        return int(self.listing_counts.size)

    @property
    def n_customer_types(self) -> int:
        """Number of customer types ``I``."""
        return int(self.customer_shares.size)

    @property
    def release_capacity(self) -> float:
        """Release rate if every listing were busy: ``sum_j n_j / mean_busy_time[j]``."""
        return float(np.sum(self.listing_counts / self.mean_busy_time))

    @property
    def has_exponential_busy_times(self) -> bool:
        """True when every listing type's busy time is exponential (the Markov chain)."""
        return all(isinstance(shape, Exponential) for shape in self.busy_time)

    @property
    def balance(self) -> float:
        """Arrival-to-supply balance ``arrival_rate / release_capacity``."""
        return self.arrival_rate / self.release_capacity

    # ----------------------------------------------------------------- variants
    def with_balance(self, balance: float) -> Market:
        """The same market with the arrival rate rescaled to reach ``balance``."""
        target = check.number("balance", balance, low=0.0, low_open=True)
        return self.replace(arrival_rate=target * self.release_capacity)

    def scaled(self, factor: float) -> Market:
        """The market with ``factor`` times the listings and arrivals (same balance).

        Listing counts are rounded to the nearest whole number, at least 1.
        """
        factor = check.number("factor", factor, low=0.0, low_open=True)
        counts = np.maximum(1.0, np.rint(self.listing_counts * factor))
        if counts.sum() > MAX_LISTINGS:
            raise ValueError(
                f"factor must keep the market at most {MAX_LISTINGS} listings, got {factor!r} "
                f"({counts.sum():.3g} listings)"
            )
        grown = self.replace(listing_counts=counts)
        return grown.with_balance(self.balance)

    def replace(self, **changes: object) -> Market:
        """A copy of the market with some parameters changed (and validated again).

        Parameters
        ----------
        **changes
            Any constructor argument, e.g. ``mean_busy_time=[1.0, 2.0]``.

        Examples
        --------
        >>> import marketsim as ms
        >>> ms.scenarios.rehearsal_rooms().replace(arrival_rate=8.0).arrival_rate
        8.0
        """
        fields = {
            "listing_counts": self.listing_counts,
            "mean_busy_time": self.mean_busy_time,
            "arrival_rate": self.arrival_rate,
            "customer_shares": self.customer_shares,
            "consideration": self.consideration,
            "utility": self.utility,
            "outside_utility": self.outside_utility,
            "listing_types": self.listing_types,
            "customer_types": self.customer_types,
            "price": self.price,
            "busy_time": self.busy_time,
            "demand": self.demand,
        }
        unknown = sorted(set(changes) - set(fields))
        if unknown:
            raise ValueError(
                f"replace takes Market parameters ({', '.join(fields)}), got {unknown[0]!r}"
            )
        fields.update(changes)
        return Market(**fields)

    # ----------------------------------------------------------------- display
    def summary(self) -> pd.DataFrame:
        """One row per customer type x listing type with every parameter of the pair.

        Returns
        -------
        pandas.DataFrame
            Columns ``customer_type, listing_type, customer_share, outside_utility,
            listing_count, mean_busy_time, busy_time, consideration, utility`` (and
            ``price``); ``busy_time`` names the shape (e.g. ``"lognormal (cv 2)"``).
        """
        rows = []
        for i, customer in enumerate(self.customer_types):
            for j, listing in enumerate(self.listing_types):
                row = {
                    "customer_type": customer,
                    "listing_type": listing,
                    "customer_share": float(self.customer_shares[i]),
                    "outside_utility": float(self.outside_utility[i]),
                    "listing_count": int(self.listing_counts[j]),
                    "mean_busy_time": float(self.mean_busy_time[j]),
                    "busy_time": self.busy_time[j].describe(),
                    "consideration": float(self.consideration[i, j]),
                    "utility": float(self.utility[i, j]),
                }
                if self.price is not None:
                    row["price"] = float(self.price[j])
                rows.append(row)
        return pd.DataFrame(rows)

    def __repr__(self) -> str:
        listings = ", ".join(
            f"{name}: {count}" for name, count in zip(self.listing_types, self.listing_counts)
        )
        customers = ", ".join(
            f"{name}: {share:.3g}" for name, share in zip(self.customer_types,
                                                          self.customer_shares)
        )
        extras = ""
        if not self.has_exponential_busy_times:
            extras += f", busy_time [{', '.join(b.describe() for b in self.busy_time)}]"
        if self.demand is not None:
            extras += f", demand {self.demand.describe()}"
        return (
            f"Market(N={self.n_listings} listings [{listings}], "
            f"arrival_rate={self.arrival_rate:.4g}, balance={self.balance:.4g}, "
            f"customers [{customers}]{extras})"
        )


def _listing_counts(value: object) -> np.ndarray:
    raw = np.atleast_1d(np.asarray(value, dtype=object))
    if raw.ndim != 1 or raw.size == 0:
        raise ValueError(
            f"listing_counts must be a non-empty list of whole numbers >= 1, got {value!r}"
        )
    for k, item in enumerate(raw):
        try:
            check.whole_number(f"listing_counts[{k}]", _as_int_like(item), low=1)
        except ValueError:
            raise ValueError(
                f"listing_counts must contain whole numbers >= 1, got {check._shown(item)} "
                f"at index {k}"
            ) from None
    values = [int(_as_int_like(x)) for x in raw]
    for k, item in enumerate(values):
        if item > MAX_LISTINGS:
            raise ValueError(
                f"listing_counts must contain whole numbers <= 2**53 = {MAX_LISTINGS}, got "
                f"{item} at index {k}"
            )
    if sum(values) > MAX_LISTINGS:
        raise ValueError(
            f"listing_counts must add up to at most 2**53 = {MAX_LISTINGS}, got {sum(values)}"
        )
    counts = np.array(values, dtype=np.int64)
    counts.flags.writeable = False
    return counts


def _as_int_like(item: object) -> object:
    """Accept floats that are whole (e.g. ``10.0``) as counts; keep the rest as is."""
    if isinstance(item, (float, np.floating)) and np.isfinite(item) and float(item).is_integer():
        return int(item)
    if isinstance(item, np.integer):
        return int(item)
    return item


__all__ = ["Market"]
