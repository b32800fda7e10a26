"""Stage 1, model: the market, the treatment under test and the scenarios built from them.

May import: only the shared helpers (_validation, randomness). Everything downstream
trusts what is built here: a Market and a Treatment are immutable and validated once.
"""

from marketsim.model import busy_time
from marketsim.model.demand import DemandProfile
from marketsim.model.market import Market
from marketsim.model.treatment import NO_TREATMENT, Treatment

__all__ = ["Market", "Treatment", "NO_TREATMENT", "DemandProfile", "busy_time"]
