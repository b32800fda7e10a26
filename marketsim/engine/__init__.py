"""Exact simulation of the finite market (numba kernel behind a checked front)."""

from marketsim.engine.front import run_cells, simulate

__all__ = ["simulate", "run_cells"]
