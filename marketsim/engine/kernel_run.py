"""One run of a kernel: its arrays, its state between slices, and one step.

:class:`KernelRun` turns checked cells into the plain arrays the numba kernels
read (demand profile, busy-time families, the heap of release times) and keeps
the state that lets a run go on in slices; :mod:`marketsim.engine.runner` loops
over the slices.
"""

from __future__ import annotations

import numpy as np

from marketsim import _validation as check
from marketsim.engine import general_kernel as general
from marketsim.engine.cells import MarketCells
from marketsim.engine.chain_kernel import BUSY, EVENTS, run_chain
from marketsim.model.busy_time import (
    BusyTime,
    Empirical,
    Exponential,
    Fixed,
    Gamma,
    LogNormal,
)
from marketsim.model.demand import DemandProfile

ENGINES = ("auto", "chain", "general")
"""``"chain"``: the count-based Markov chain (exponential busy times only);
``"general"``: the event-by-event engine with a heap of release times (any
shape); ``"auto"``: the chain when every busy time is exponential, else general."""

MAX_HEAP_BYTES = 2**30
"""Largest memory the general engine's heap of release times may take."""


def engine_for(cells: MarketCells, engine: str = "auto") -> str:
    """The engine that runs ``cells``: ``"chain"`` or ``"general"``.

    ``engine="auto"`` picks the chain when every busy time is exponential and
    the general engine otherwise; ``"general"`` always takes the general engine
    (exact for exponential times too, for comparisons); ``"chain"`` refuses a
    market whose busy times are not all exponential.
    """
    engine = check.choice("engine", engine, ENGINES)
    exponential = cells.market.has_exponential_busy_times
    if engine == "chain" and not exponential:
        raise ValueError(
            "engine must be 'auto' or 'general' for busy times that are not exponential "
            f"(the chain is exact only for exponential ones), got 'chain' with busy_time "
            f"{[b.describe() for b in cells.market.busy_time]}"
        )
    if engine == "auto":
        return "chain" if exponential else "general"
    return engine


def busy_time_per_cell(cells: MarketCells) -> tuple[BusyTime, ...]:
    """Busy-time shape of each listing cell (that of its listing type)."""
    return tuple(cells.market.busy_time[j] for j in cells.split.listing_type)


def demand_arrays(profile: DemandProfile | None) -> tuple[np.ndarray, np.ndarray, float]:
    """``(piece_ends, multipliers, period)`` for the kernels; empty arrays for flat demand."""
    if profile is None or profile.is_flat:
        return np.empty(0), np.empty(0), 1.0
    return profile.ends.copy(), profile.multipliers.copy(), profile.period


def busy_time_arrays(shapes: tuple[BusyTime, ...], means: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Family codes, parameters and the empirical table of the general kernel.

    Parameters
    ----------
    shapes : tuple of BusyTime, length n_listing_cells
    means : ndarray, shape (n_listing_cells,)
        Mean busy time of each listing cell.

    Returns
    -------
    codes : ndarray of int64, shape (n_listing_cells,)
    parameters : ndarray, shape (n_listing_cells, 3)
    table : ndarray, shape (n_values,)
        Every empirical shape's stays divided by their mean, one after another.
    """
    codes = np.zeros(len(shapes), dtype=np.int64)
    parameters = np.zeros((len(shapes), 3))
    pieces = []
    offset = 0
    for cell, (shape, mean) in enumerate(zip(shapes, means)):
        if isinstance(shape, Exponential):
            codes[cell], parameters[cell, 0] = general.EXPONENTIAL, mean
        elif isinstance(shape, Gamma):
            codes[cell] = general.GAMMA
            parameters[cell, :2] = shape.shape, mean * shape.cv**2
        elif isinstance(shape, LogNormal):
            codes[cell] = general.LOGNORMAL
            parameters[cell, :2] = shape.log_mean(mean), shape.sigma
        elif isinstance(shape, Fixed):
            codes[cell], parameters[cell, 0] = general.FIXED, mean
        elif isinstance(shape, Empirical):
            values = shape.relative_stays
            codes[cell] = general.EMPIRICAL
            parameters[cell] = mean, offset, values.size
            pieces.append(values)
            offset += values.size
        else:
            raise ValueError(f"busy_time must be one of marketsim.busy_time's shapes, got "
                             f"{shape!r}")
    table = np.concatenate(pieces) if pieces else np.zeros(1)
    return codes, parameters, table


class KernelRun:
    """The arrays of one run and its state between slices.

    Parameters
    ----------
    cells : MarketCells
    available : ndarray of int64, shape (n_listing_cells,)
        Available listings per cell at time 0 (updated in place as the run goes).
    burn_in, end : float
        The window is ``[burn_in, end)``.
    n_bins : int
        Time bins of the window (0 for none).
    streams : tuple of numpy.random.Generator
        Arrivals, choices and releases (:func:`marketsim.randomness.engine_streams`).
    engine : {"auto", "chain", "general"}
        See :func:`engine_for`.
    """

    def __init__(self, cells: MarketCells, available: np.ndarray, *, burn_in: float,
                 end: float, n_bins: int, streams: tuple[np.random.Generator, ...],
                 engine: str = "auto") -> None:
        n_customer, n_listing = cells.n_customer_cells, cells.n_listing_cells
        self.cells = cells
        self.engine = engine_for(cells, engine)
        self.available = available
        self.burn_in, self.end = burn_in, end
        self.streams = streams
        self.clock = np.array([0.0, np.nan])
        self.counters = np.zeros(4, dtype=np.int64)
        self.last_change = np.full(n_listing, burn_in)
        self.bookings = np.zeros((n_customer, n_listing), dtype=np.int64)
        self.arrivals = np.zeros(n_customer, dtype=np.int64)
        self.available_time = np.zeros(n_listing)
        self.bin_bookings = np.zeros((n_bins, n_customer, n_listing), dtype=np.int64)
        self.bin_arrivals = np.zeros((n_bins, n_customer), dtype=np.int64)
        self.share_cdf = np.cumsum(cells.customer_share)
        self.choice = (cells.outside_weight, cells.weight, cells.consideration)
        self.recording = (self.available_time, self.bin_bookings, self.bin_arrivals)
        self.demand = demand_arrays(cells.market.demand)
        if self.engine == "general":
            self._set_up_heap()

    def _set_up_heap(self) -> None:
        """Busy-time arrays, and the heap holding the listings busy at time 0.

        A listing busy at time 0 gets a remaining busy time drawn from the
        equilibrium (stationary-excess) law of its cell
        (:meth:`marketsim.busy_time.BusyTime.residual_sample`): the state of a
        market that has run for long before time 0.
        """
        cells = self.cells
        capacity = cells.market.n_listings
        if 16 * capacity > MAX_HEAP_BYTES:
            raise ValueError(
                f"the general engine (busy times that are not exponential) keeps one release "
                f"time per listing and takes markets of at most "
                f"{MAX_HEAP_BYTES // 16:,} listings, got {capacity:,}"
            )
        shapes = busy_time_per_cell(cells)
        means = 1.0 / cells.release_rate
        self.busy_code, self.busy_parameters, self.busy_table = busy_time_arrays(shapes, means)
        self.heap_time = np.empty(capacity)
        self.heap_cell = np.empty(capacity, dtype=np.int64)
        rng_releases = self.streams[2]
        busy = cells.listing_count - self.available
        times = [shape.residual_sample(mean, int(n), rng_releases)
                 for shape, mean, n in zip(shapes, means, busy)]
        cell_of = [np.full(int(n), cell, dtype=np.int64) for cell, n in enumerate(busy)]
        self.counters[BUSY] = general.fill_heap(self.heap_time, self.heap_cell,
                                                np.concatenate(times), np.concatenate(cell_of))

    @property
    def events(self) -> int:
        """Events simulated so far, burn-in included."""
        return int(self.counters[EVENTS])

    @property
    def time(self) -> float:
        """Simulated time reached."""
        return float(self.clock[0])

    def enter_piece(self, start: float, end: float, choice: MarketCells,
                    recording: tuple[np.ndarray, np.ndarray, np.ndarray] | None) -> None:
        """Go on to the piece ``[start, end)`` of a schedule (a switchback's blocks).

        The market's state carries over; only the choice weights (those of
        ``choice``, cells of the same shape) and where the piece's counts go
        change. ``recording`` is ``(available_time, bin_bookings, bin_arrivals)``
        with one bin (the piece's block), or None for a piece that is not
        recorded (a block's burn-in).
        """
        self.choice = (choice.outside_weight, choice.weight, choice.consideration)
        self.end = end
        if recording is None:
            n_customer, n_listing = self.bookings.shape
            self.burn_in = end
            self.recording = (np.zeros(n_listing), np.zeros((0, n_customer, n_listing),
                                                            dtype=np.int64),
                              np.zeros((0, n_customer), dtype=np.int64))
        else:
            self.burn_in = start
            self.last_change[:] = start
            self.recording = recording

    def step(self, max_events: int) -> bool:
        """Simulate at most ``max_events`` more events; True once the run has ended."""
        cells = self.cells
        piece_ends, multipliers, period = self.demand
        head = (cells.arrival_rate, self.share_cdf, *self.choice, piece_ends, multipliers,
                period)
        tail = (self.burn_in, self.end, max_events, *self.streams, self.bookings,
                self.arrivals, *self.recording)
        if self.engine == "chain":
            return bool(run_chain(*head, cells.listing_count, cells.release_rate,
                                  self.available, self.clock, self.counters,
                                  self.last_change, *tail))
        return bool(general.run_general(
            *head, self.busy_code, self.busy_parameters, self.busy_table, self.available,
            self.heap_time, self.heap_cell, self.clock, self.counters, self.last_change,
            *tail))
