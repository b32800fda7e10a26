"""The design interface and the two global worlds (nobody / everybody treated)."""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass

from marketsim.designs.split import CellSplit
from marketsim.model.market import Market


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


__all__ = ["Design", "GlobalControl", "GlobalTreatment"]
