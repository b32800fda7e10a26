"""Experiment designs: who is treated, expressed as a split of the market into cells.

A design never touches the engine. It only says how each customer type and each
listing type divides into a treated and a control part (:class:`CellSplit`);
:func:`marketsim.cells.build_cells` turns that split into the arrays the engine
and the large-market model read. A treated customer looking at a treated listing
sees the treatment; every other pair sees the market as it is.

Writing a new design takes a few lines::

    @dataclass(frozen=True)
    class OnlyStudios(ms.Design):
        treated: float = 0.5
        def split(self, market):
            listings = [self.treated if name == "studio" else 0.0
                        for name in market.listing_types]
            return ms.CellSplit.from_fractions(market, customers=1.0, listings=listings)
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.market import Market

if TYPE_CHECKING:
    from marketsim.estimators import Estimator


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


class Design(ABC):
    """Base class of experiment designs.

    A design is an expansion of the market into cells: it says, for every
    customer type, which share of arriving customers is treated and, for every
    listing type, how many listings are treated. The engine, the large-market
    model and the estimators only ever see the resulting cells.

    To write a new design, subclass :class:`Design` and implement :meth:`split`,
    usually in one line with :meth:`CellSplit.from_fractions`. Make the subclass
    a frozen dataclass: it then has a readable ``repr`` (used as its
    :attr:`label`), compares by value and pickles, which
    :class:`marketsim.Study` needs to send it to worker processes.

    Examples
    --------
    Only the first listing type is eligible for treatment; every customer is
    exposed:

    >>> from dataclasses import dataclass
    >>> import marketsim as ms
    >>> @dataclass(frozen=True)
    ... class FirstTypeOnly(ms.Design):
    ...     treated: float = 0.5
    ...     def split(self, market):
    ...         listings = [self.treated] + [0.0] * (market.n_listing_types - 1)
    ...         return ms.CellSplit.from_fractions(market, customers=1.0, listings=listings)
    >>> split = FirstTypeOnly().split(ms.scenarios.rehearsal_rooms())
    >>> split.listing_count.tolist(), split.listing_treated.tolist()
    ([15, 15, 10], [False, True, False])
    """

    @abstractmethod
    def split(self, market: Market) -> CellSplit:
        """Divide ``market`` into treated and control cells.

        Parameters
        ----------
        market : Market

        Returns
        -------
        CellSplit
        """

    @property
    def label(self) -> str:
        """Short name used in tables and plots (the ``repr`` unless overridden)."""
        return repr(self)

    def default_estimators(self) -> tuple[Estimator, ...]:
        """Estimators a study scores on this design when none are given.

        Every built-in estimator unless a design says otherwise; those that do
        not fit the design's split are left out when the study is set up
        (:func:`marketsim.estimators.default_estimators`).
        """
        from marketsim.estimators import all_estimators

        return all_estimators()


@dataclass(frozen=True)
class GlobalControl(Design):
    """Nobody is treated: the world without the feature."""

    def split(self, market: Market) -> CellSplit:
        return CellSplit.from_fractions(market, customers=0.0, listings=0.0)

    @property
    def label(self) -> str:
        return "global control"


@dataclass(frozen=True)
class GlobalTreatment(Design):
    """Everybody is treated: the world with the feature."""

    def split(self, market: Market) -> CellSplit:
        return CellSplit.from_fractions(market, customers=1.0, listings=1.0)

    @property
    def label(self) -> str:
        return "global treatment"


@dataclass(frozen=True)
class CustomerSide(Design):
    """Customer-side randomization: each arriving customer is treated with probability
    ``treated`` and then sees the treatment on every listing.

    Parameters
    ----------
    treated : float
        Treated share of customers ``a_C``, in (0, 1). Each arrival is treated
        independently with this probability (no rounding); the estimators use
        this probability as ``a_C``.

    Examples
    --------
    >>> import marketsim as ms
    >>> ms.CustomerSide(0.5).label
    'customer-side (a_C=0.5)'
    """

    treated: float = 0.5

    def __post_init__(self) -> None:
        object.__setattr__(self, "treated", check.number(
            "treated", self.treated, low=0.0, high=1.0, low_open=True, high_open=True))

    def split(self, market: Market) -> CellSplit:
        return CellSplit.from_fractions(market, customers=self.treated, listings=1.0)

    def default_estimators(self) -> tuple[Estimator, ...]:
        from marketsim.estimators import CustomerSideEstimator

        return (CustomerSideEstimator(),)

    @property
    def label(self) -> str:
        return f"customer-side (a_C={self.treated:.3g})"


@dataclass(frozen=True)
class ListingSide(Design):
    """Listing-side randomization: a share ``treated`` of the listings of every type
    carries the treatment, for every customer.

    Parameters
    ----------
    treated : float
        Treated share of listings ``a_L``, in (0, 1). Each type is stratified:
        ``floor(treated * n_j + 0.5)`` of its ``n_j`` listings are treated, so the
        realised share can differ slightly from ``treated`` and from type to type;
        estimators are stratified by listing type and use each type's realised
        share (see :class:`~marketsim.Estimator`). For example ``ListingSide(0.5)``
        treats 2 of 3 listings of a type with 3 (1.5 rounds up) and 1 of a type
        with 1 (0.5 rounds up).

    Examples
    --------
    >>> import marketsim as ms
    >>> split = ms.ListingSide(0.3).split(ms.scenarios.rehearsal_rooms())
    >>> split.listing_count.tolist(), split.listing_treated.tolist()
    ([21, 9, 7, 3], [False, True, False, True])

    Notes
    -----
    Every customer counts as exposed, so a treatment's ``outside_utility_shift``
    applies to all customers (this is two-sided randomization with ``a_C = 1``).
    """

    treated: float = 0.5

    def __post_init__(self) -> None:
        object.__setattr__(self, "treated", check.number(
            "treated", self.treated, low=0.0, high=1.0, low_open=True, high_open=True))

    def split(self, market: Market) -> CellSplit:
        return CellSplit.from_fractions(market, customers=1.0, listings=self.treated)

    def default_estimators(self) -> tuple[Estimator, ...]:
        from marketsim.estimators import ListingSideEstimator

        return (ListingSideEstimator(),)

    @property
    def label(self) -> str:
        return f"listing-side (a_L={self.treated:.3g})"


@dataclass(frozen=True)
class TwoSided(Design):
    """Two-sided randomization: customers treated with probability ``customers``,
    listings with share ``listings``; only a treated customer looking at a treated
    listing sees the treatment.

    ``listings=1`` is customer-side randomization, ``customers=1`` listing-side.

    Parameters
    ----------
    customers : float
        Treated share of customers ``a_C``, in (0, 1].
    listings : float
        Treated share of listings ``a_L``, in (0, 1] (stratified by type as in
        :class:`ListingSide`). Not both equal to 1.

    References
    ----------
    Johari, Li, Liskovich and Weintraub, "Experimental design in two-sided
    platforms: an analysis of bias", Management Science 68(10), 2022.
    """

    customers: float = 0.5
    listings: float = 0.5

    def __post_init__(self) -> None:
        object.__setattr__(self, "customers", check.number(
            "customers", self.customers, low=0.0, high=1.0, low_open=True))
        object.__setattr__(self, "listings", check.number(
            "listings", self.listings, low=0.0, high=1.0, low_open=True))
        if self.customers == 1.0 and self.listings == 1.0:
            raise ValueError(
                "customers and listings must not both be 1 (that is global treatment), "
                "got customers=1.0, listings=1.0"
            )

    def split(self, market: Market) -> CellSplit:
        return CellSplit.from_fractions(market, customers=self.customers,
                                        listings=self.listings)

    def default_estimators(self) -> tuple[Estimator, ...]:
        """The two-sided estimators (naive, corrected with k = 1 and 2). The
        one-sided contrasts of a two-sided experiment measure a partial exposure
        (treated customers see the feature on only a share of the listings); pass
        them explicitly to score them."""
        from marketsim.estimators import TwoSidedCorrected, TwoSidedNaive

        return (TwoSidedNaive(), TwoSidedCorrected(k=1), TwoSidedCorrected(k=2))

    @property
    def label(self) -> str:
        return f"two-sided (a_C={self.customers:.3g}, a_L={self.listings:.3g})"

    @classmethod
    def for_balance(
        cls, balance: float, customers: float = 0.5, listings: float = 0.5
    ) -> TwoSided:
        """Treated fractions that follow the market balance.

        With ``beta = exp(-balance)``: ``a_C = (1 - beta) + beta * customers`` and
        ``a_L = listings * (1 - beta) + beta``. Near customer-side randomization
        when demand is scarce (small balance), near listing-side when supply is
        scarce (large balance).

        At the extremes a fraction can reach 1 exactly (in floating point
        ``beta`` is below 1e-16 once balance exceeds about 37, giving
        ``customers=1.0``: listing-side randomization), and with few listings the
        stratified rounding can treat every listing (customer-side). Estimators
        that need both sides randomized (:class:`~marketsim.TwoSidedCorrected`)
        then do not fit the design and say so.

        Parameters
        ----------
        balance : float
            Market balance (:attr:`Market.balance`), > 0.
        customers, listings : float
            Base fractions ``a_C*`` and ``a_L*``, in (0, 1).

        Returns
        -------
        TwoSided

        References
        ----------
        Johari et al., Management Science 68(10), 2022.

        Examples
        --------
        >>> import marketsim as ms
        >>> ms.TwoSided.for_balance(1.0).label        # beta = exp(-1) = 0.368
        'two-sided (a_C=0.816, a_L=0.684)'
        """
        balance = check.number("balance", balance, low=0.0, low_open=True)
        check.number("customers", customers, low=0.0, high=1.0, low_open=True,
                     high_open=True)
        check.number("listings", listings, low=0.0, high=1.0, low_open=True,
                     high_open=True)
        beta = math.exp(-balance)
        return cls(customers=(1.0 - beta) + beta * customers,
                   listings=listings * (1.0 - beta) + beta)


@dataclass(frozen=True)
class TwoSidedFollowingBalance(Design):
    """Two-sided randomization whose treated fractions follow the balance of the
    market it is applied to (:meth:`TwoSided.for_balance` at ``market.balance``).

    Unlike ``TwoSided.for_balance(b)``, which fixes the fractions for one
    balance, this design recomputes them for every market, so one object serves
    a whole sweep over balance (and can carry its own estimators in an
    :class:`~marketsim.Arm`).

    Parameters
    ----------
    customers, listings : float
        Base fractions ``a_C*`` and ``a_L*``, in (0, 1).

    Examples
    --------
    >>> import marketsim as ms
    >>> design = ms.TwoSidedFollowingBalance()
    >>> design.at(1.0) == ms.TwoSided.for_balance(1.0)
    True
    """

    customers: float = 0.5
    listings: float = 0.5

    def __post_init__(self) -> None:
        for name in ("customers", "listings"):
            object.__setattr__(self, name, check.number(
                name, getattr(self, name), low=0.0, high=1.0, low_open=True, high_open=True))

    def at(self, balance: float) -> TwoSided:
        """The two-sided design this one is at ``balance``."""
        return TwoSided.for_balance(balance, self.customers, self.listings)

    def split(self, market: Market) -> CellSplit:
        return self.at(market.balance).split(market)

    def default_estimators(self) -> tuple[Estimator, ...]:
        return self.at(1.0).default_estimators()

    @property
    def label(self) -> str:
        if (self.customers, self.listings) == (0.5, 0.5):
            return "two-sided (follows balance)"
        return (f"two-sided (follows balance, a_C*={self.customers:.3g}, "
                f"a_L*={self.listings:.3g})")


__all__ = [
    "CellSplit",
    "Design",
    "GlobalControl",
    "GlobalTreatment",
    "CustomerSide",
    "ListingSide",
    "TwoSided",
    "TwoSidedFollowingBalance",
]
