"""Randomized designs: customer-side, listing-side and two-sided randomization."""

from __future__ import annotations

import math
from dataclasses import dataclass

from marketsim import _validation as check
from marketsim.designs.base import Design
from marketsim.designs.split import CellSplit
from marketsim.model.market import Market


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
    "Experimental design in two-sided platforms: an analysis of bias",
    Management Science 68(10), 2022: the two-sided design.
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
        "Experimental design in two-sided platforms: an analysis of bias",
        Management Science 68(10), 2022: the rule for the fractions.

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

    @property
    def label(self) -> str:
        if (self.customers, self.listings) == (0.5, 0.5):
            return "two-sided (follows balance)"
        return (f"two-sided (follows balance, a_C*={self.customers:.3g}, "
                f"a_L*={self.listings:.3g})")


def listing_rounding_note(design: Design, market: Market) -> str | None:
    """Why a design that asks for some treated listings treats none (or all) in ``market``.

    Treated listings are counted per type as ``floor(share * n_j + 0.5)``, so a
    small share of a small market can round to no treated listing at all (and a
    large one to every listing). Returns the explanation, with the share that
    would give one treated (or one control) listing, or None when rounding
    leaves both groups non-empty or the design does not randomize listings.
    """
    if isinstance(design, TwoSidedFollowingBalance):
        design = design.at(market.balance)
    if isinstance(design, ListingSide):
        share = design.treated
    elif isinstance(design, TwoSided):
        share = design.listings
    else:
        return None
    if not 0.0 < share < 1.0:
        return None
    counts = [int(n) for n in market.listing_counts]
    treated = sum(math.floor(share * n + 0.5) for n in counts)
    largest = max(counts)
    if treated == 0:
        return (f"rounding left no treated listing: a treated share of {share:g} of "
                f"{', '.join(str(n) for n in counts)} listing(s) per type rounds to 0 "
                f"(treated listings per type are round(share x count)); a share of at least "
                f"{0.5 / largest:.3g} treats one listing")
    if treated == sum(counts):
        return (f"rounding treated every listing: a treated share of {share:g} of "
                f"{', '.join(str(n) for n in counts)} listing(s) per type rounds to all of "
                f"them (treated listings per type are round(share x count)); a share below "
                f"{(largest - 0.5) / largest:.3g} leaves one listing in control")
    return None


__all__ = ["CustomerSide", "ListingSide", "TwoSided", "TwoSidedFollowingBalance",
           "listing_rounding_note"]
