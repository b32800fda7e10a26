"""What one run records: counts per cell in the measurement window."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim.designs import BlockSchedule
from marketsim.engine.cells import MarketCells


@dataclass(frozen=True, eq=False)
class Ledger:
    """Counts of one run (or their large-market expectations) per cell.

    Attributes
    ----------
    cells : MarketCells
        The cells of the run: labels, treatment status, counts, prices.
    bookings : ndarray, shape (n_customer_cells, n_listing_cells)
        Bookings in the window by customers of each customer cell with
        listings of each listing cell.
    arrivals : ndarray, shape (n_customer_cells,)
        Customer arrivals in the window per customer cell.
    window : float
        Length of the measurement window (the horizon).
    mean_available : ndarray, shape (n_listing_cells,)
        Time-average number of available listings per listing cell in the window.
    final_available : ndarray of int, shape (n_listing_cells,)
        Available listings per cell at the end of the run.
    events : int
        Events simulated, burn-in included (0 for an expected ledger).
    bin_edges : ndarray, shape (n_bins + 1,)
        Times (from the start of the window) bounding the time bins; empty
        when no bins were asked for.
    bin_bookings : ndarray, shape (n_bins, n_customer_cells, n_listing_cells)
    bin_arrivals : ndarray, shape (n_bins, n_customer_cells)
    engine : str
        What produced the counts: ``"chain"`` (the count-based Markov chain,
        exponential busy times), ``"general"`` (the event-by-event engine with
        a heap of release times, any busy-time shape), ``"large-market"``
        (expectations of the large-market model) or ``"none"`` (counts built by
        hand, e.g. from platform logs; the default).
    blocks : BlockSchedule or None
        For a switchback design: its blocks (times from the start of the
        window) and which were treated. The bins are then the blocks:
        ``bin_edges`` are the block boundaries and ``bin_bookings`` and
        ``bin_arrivals`` count each block's *kept* part only (after the
        block's burn-in); ``bookings``, ``arrivals`` and ``mean_available``
        cover the kept parts of all blocks, and ``window`` is their total
        length. None for every other design.
    """

    cells: MarketCells
    bookings: np.ndarray
    arrivals: np.ndarray
    window: float
    mean_available: np.ndarray
    final_available: np.ndarray
    events: int
    bin_edges: np.ndarray
    bin_bookings: np.ndarray
    bin_arrivals: np.ndarray
    engine: str = "none"
    blocks: BlockSchedule | None = None

    @property
    def booking_rate(self) -> float:
        """Total bookings per unit time in the window."""
        return float(self.bookings.sum() / self.window)

    @property
    def arrival_count(self) -> float:
        """Total arrivals in the window."""
        return float(self.arrivals.sum())

    @property
    def customer_labels(self) -> tuple[str, ...]:
        """Names of the customer cells."""
        return self.cells.customer_labels

    @property
    def listing_labels(self) -> tuple[str, ...]:
        """Names of the listing cells."""
        return self.cells.listing_labels

    def to_frame(self) -> pd.DataFrame:
        """Tidy table, one row per customer cell x listing cell.

        Columns: ``customer_cell, listing_cell, bookings, booking_rate,
        arrivals`` (of the customer cell) and ``mean_available`` (of the
        listing cell).
        """
        rows = []
        for c, customer in enumerate(self.customer_labels):
            for ell, listing in enumerate(self.listing_labels):
                rows.append({
                    "customer_cell": customer,
                    "listing_cell": listing,
                    "bookings": self.bookings[c, ell],
                    "booking_rate": self.bookings[c, ell] / self.window,
                    "arrivals": self.arrivals[c],
                    "mean_available": self.mean_available[ell],
                })
        return pd.DataFrame(rows)

    def __repr__(self) -> str:
        return (
            f"Ledger(window={self.window:g}, arrivals={self.arrival_count:g}, "
            f"bookings={float(self.bookings.sum()):g}, booking_rate={self.booking_rate:.4g}, "
            f"cells={self.cells.n_customer_cells}x{self.cells.n_listing_cells}, "
            f"engine={self.engine!r})"
        )
