"""Stage 2, designs: who is treated, expressed as a split of the market into cells.

May import: model (and the shared helpers _validation, randomness).

A design never touches the engine. It only says how each customer type and each
listing type divides into a treated and a control part (:class:`CellSplit`);
:func:`marketsim.engine.cells.build_cells` turns that split into the arrays the engine
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

from marketsim.designs.base import Design, GlobalControl, GlobalTreatment
from marketsim.designs.randomized import (
    CustomerSide,
    ListingSide,
    TwoSided,
    TwoSidedFollowingBalance,
    listing_rounding_note,
)
from marketsim.designs.split import CellSplit
from marketsim.designs.switchback import ASSIGNMENTS, BlockSchedule, Switchback

__all__ = [
    "ASSIGNMENTS",
    "BlockSchedule",
    "CellSplit",
    "Switchback",
    "Design",
    "GlobalControl",
    "GlobalTreatment",
    "CustomerSide",
    "ListingSide",
    "TwoSided",
    "TwoSidedFollowingBalance",
    "listing_rounding_note",
]
