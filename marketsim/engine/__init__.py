"""Stage 3, engine: cells of a design, the exact simulation and the ledger it records.

May import: model, designs (and the shared helpers). The numba kernels are private;
``run_cells`` is the checked front that validates once and calls them.
"""

from marketsim.engine.cells import START_OPTIONS, MarketCells, build_cells
from marketsim.engine.ledger import Ledger
from marketsim.engine.runner import SimulationInterrupted, SliceProgress, run_cells

__all__ = ["MarketCells", "build_cells", "Ledger", "run_cells", "START_OPTIONS",
           "SimulationInterrupted", "SliceProgress"]
