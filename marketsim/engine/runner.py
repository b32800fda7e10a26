"""Python front of the engine: validate once, seed the streams, run the kernel in slices."""

from __future__ import annotations

import signal
import threading
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.designs import BlockSchedule, GlobalControl, Switchback
from marketsim.engine.cells import MarketCells, build_cells
from marketsim.engine.kernel_run import KernelRun
from marketsim.engine.ledger import Ledger
from marketsim.randomness import SeedLike, engine_streams, schedule_stream, seed_sequence

MAX_BIN_BYTES = 2**30
"""Largest memory the per-bin counts of one run may take."""

SLICE_EVENTS = 2**20
"""Events per kernel call (about a tenth of a second): the run returns to Python
between slices, where Ctrl-C, progress and ``on_slice`` take effect."""

FIRST_SLICE_EVENTS = 2**14
"""Events of each of the first two slices: short, so that ``on_slice`` can time the
second one (the first may include compiling) and estimate the run's length early."""


@dataclass(frozen=True)
class SliceProgress:
    """Where a run stands after a slice (what ``on_slice`` receives).

    Attributes
    ----------
    time : float
        Simulated time reached.
    end : float
        Time the run ends (``burn_in + horizon``).
    events : int
        Events simulated so far, burn-in included.
    engine : str
        ``"chain"`` or ``"general"``.
    """

    time: float
    end: float
    events: int
    engine: str

    @property
    def fraction(self) -> float:
        """Share of the run's simulated time done, in [0, 1]."""
        return min(1.0, self.time / self.end)


def run_cells(
    cells: MarketCells,
    *,
    horizon: float,
    burn_in: float = 0.0,
    seed: SeedLike = None,
    start: str | ArrayLike = "empty",
    bins: int | None = None,
    engine: str = "auto",
    slice_events: int = SLICE_EVENTS,
    on_slice: Callable[[SliceProgress], None] | None = None,
) -> Ledger:
    """Simulate cells that are already built (see :func:`marketsim.simulate`).

    The engine is chosen from the market: the count-based Markov chain when
    every busy time is exponential, else the general engine, which keeps each
    busy listing's release time (``Ledger.engine`` says which). Both are exact
    event by event and follow the market's demand profile exactly.

    Cells of a :class:`~marketsim.Switchback` run its schedule piece by piece:
    the burn-in with the choice weights of the market without the feature, then
    each block's burn-in and kept part with those of its arm. The kernels'
    state (available counts, the pending arrival, the heap of release times)
    carries over unchanged, so each piece is exact and a switch draws nothing:
    with weights that do not change, the general engine makes exactly the
    bookings of an unbroken run. The schedule's random assignment is drawn from
    its own stream of ``seed`` (:func:`marketsim.randomness.schedule_stream`).

    Parameters
    ----------
    cells : MarketCells
    horizon, burn_in, seed, bins
        As in :func:`marketsim.simulate` (``bins`` must be None for a switchback,
        whose ledger's bins are its blocks).
    start : "empty" or array_like of int, shape (n_listing_cells,)
        ``"empty"`` (every listing available) or the available listings per
        listing cell; the large-market warm start ``"steady"`` is resolved above
        the engine (:func:`marketsim.study.single_run.starting_availability`).
        With general busy times, each listing busy at time 0 gets a remaining
        busy time drawn from the equilibrium (stationary-excess) law of its
        shape, as in a market that has run for long before time 0.
    engine : {"auto", "chain", "general"}
        ``"auto"`` (default) picks as above; ``"general"`` forces the general
        engine (for comparisons; same law for exponential times, different
        random draws); ``"chain"`` refuses busy times that are not exponential.
    slice_events : int
        Events per kernel call, >= 1. The result does not depend on it (same
        seed, same ledger); between slices Python runs ``on_slice`` and sees
        Ctrl-C.
    on_slice : callable, optional
        Called with a :class:`SliceProgress` after every slice that does not
        end the run (the first two slices are of :data:`FIRST_SLICE_EVENTS`).

    Raises
    ------
    SimulationInterrupted
        On Ctrl-C (a ``KeyboardInterrupt``), within about a slice; it carries
        the part of the window simulated.

    Returns
    -------
    Ledger
    """
    horizon, burn_in = check.window(horizon, burn_in)
    n_bins = 0 if bins is None else check.whole_number("bins", bins, low=1)
    slice_events = check.whole_number("slice_events", slice_events, low=1)
    n_customer, n_listing = cells.n_customer_cells, cells.n_listing_cells
    most_bins = MAX_BIN_BYTES // (8 * n_customer * (n_listing + 1))
    if n_bins > most_bins:
        raise ValueError(
            f"bins must be at most {most_bins:,} for this design ({n_customer} x {n_listing} "
            f"cells; the counts per bin would need more than {MAX_BIN_BYTES // 2**30} GiB), "
            f"got {n_bins:,}"
        )
    end = burn_in + horizon
    seed = seed_sequence(seed)  # one advance of a Generator, shared by every stream
    design = cells.design
    switchback = isinstance(design, Switchback)
    if switchback:
        if n_bins:
            raise ValueError(f"bins must be None for a switchback design (its ledger's bins "
                             f"are its blocks), got {n_bins}")
        schedule = design.schedule(horizon, schedule_stream(seed))
        n_bins = schedule.n_blocks
    run = KernelRun(cells, cells.starting_counts(start), burn_in=burn_in, end=end,
                    n_bins=n_bins, streams=engine_streams(seed), engine=engine)
    size, slices = min(slice_events, FIRST_SLICE_EVENTS), 0
    finished_blocks = 0  # a switchback's blocks simulated to their end

    def run_to_piece_end() -> None:
        """Slice after slice to the end of the run's current piece (the whole run
        unless it is a switchback), with ``on_slice`` between slices."""
        nonlocal size, slices
        while not _step_holding_ctrl_c(run, size):
            slices += 1
            size = slice_events if slices >= 2 else size
            if on_slice is not None:
                on_slice(SliceProgress(time=run.time, end=end, events=run.events,
                                       engine=run.engine))

    try:
        if switchback:
            block_time = np.zeros((n_bins, n_listing))
            control = build_cells(cells.market, cells.treatment, GlobalControl())
            pieces = [(0.0, 0.0, False, -1), *schedule.pieces()]  # the run's burn-in first
            for start_time, end_time, treated, block in pieces:
                recording = None if block < 0 else (
                    block_time[block], run.bin_bookings[block:block + 1],
                    run.bin_arrivals[block:block + 1])
                run.enter_piece(burn_in + start_time, burn_in + end_time,
                                cells if treated else control, recording)
                run_to_piece_end()
                finished_blocks = max(finished_blocks, block + 1)
            kept = float(schedule.kept_lengths.sum())
            return _ledger(run, cells, kept, n_bins, horizon, block_time.sum(axis=0) / kept,
                           schedule)
        run_to_piece_end()
    except KeyboardInterrupt:
        reached = min(run.time, end)
        partial = None
        if switchback and finished_blocks:
            partial = _finished_blocks_ledger(run, cells, schedule, block_time,
                                              finished_blocks)
        elif reached > burn_in and not switchback:
            partial = _ledger(run, cells, reached - burn_in, n_bins, horizon,
                              np.full(n_listing, np.nan))
        kept = (f"the {finished_blocks} switchback block(s) simulated to their end"
                if switchback else "the part of the window simulated")
        raise SimulationInterrupted(
            f"simulation interrupted at time {reached:.6g} of {end:.6g} ({run.events:,} "
            f"events); the error's .ledger holds {kept}"
            + ("" if partial else " (None: nothing of the window was finished)"),
            partial) from None
    return _ledger(run, cells, horizon, n_bins, horizon, run.available_time / horizon)


def _step_holding_ctrl_c(run: KernelRun, size: int) -> bool:
    """One slice, with Ctrl-C held until it ends (then raised as usual).

    The first call of a kernel in a process compiles or loads it through LLVM, whose
    callbacks into Python swallow a ``KeyboardInterrupt`` raised inside them
    ("Exception ignored on calling ctypes callback function"): a Ctrl-C in that
    window (the first tenths of a second of a fresh process) was lost, so the run
    went on to its end, and it cut the compilation half-way. Holding SIGINT for the
    call avoids both; a slice lasts about a tenth of a second. Only the main thread
    receives signals, so other threads (Dask workers) and an ignored SIGINT (worker
    processes) run the slice as it is.
    """
    handler = signal.getsignal(signal.SIGINT)
    if (threading.current_thread() is not threading.main_thread()
            or not callable(handler)):  # SIG_IGN, SIG_DFL or not set from Python
        return run.step(size)
    held: list[int] = []
    signal.signal(signal.SIGINT, lambda signum, frame: held.append(signum))
    try:
        return run.step(size)
    finally:
        signal.signal(signal.SIGINT, handler)
        if held:
            signal.raise_signal(signal.SIGINT)  # to the handler in place: Ctrl-C as usual


class SimulationInterrupted(KeyboardInterrupt):
    """Ctrl-C stopped a run; ``ledger`` is the part of the measurement window simulated
    (its ``window`` is that part's length, ``mean_available`` is NaN; for a switchback,
    the blocks simulated to their end, with their own ``blocks`` schedule), or None if
    nothing of the window was finished. A study catches it like any Ctrl-C and keeps its finished
    replications."""

    def __init__(self, message: str, ledger: Ledger | None) -> None:
        super().__init__(message)
        self.ledger = ledger


def _finished_blocks_ledger(run: KernelRun, cells: MarketCells, schedule: BlockSchedule,
                            block_time: np.ndarray, done: int) -> Ledger:
    """The ledger of a switchback's first ``done`` blocks (those simulated to their end)."""
    blocks = BlockSchedule(schedule.starts[:done], schedule.ends[:done],
                           schedule.kept_starts[:done], schedule.treated[:done])
    window = float(blocks.kept_lengths.sum())
    bin_bookings, bin_arrivals = run.bin_bookings[:done], run.bin_arrivals[:done]
    return Ledger(cells=cells, bookings=bin_bookings.sum(axis=0),
                  arrivals=bin_arrivals.sum(axis=0), window=window,
                  mean_available=block_time[:done].sum(axis=0) / window,
                  final_available=run.available, events=run.events, bin_edges=blocks.edges,
                  bin_bookings=bin_bookings, bin_arrivals=bin_arrivals, engine=run.engine,
                  blocks=blocks)


def _ledger(run: KernelRun, cells: MarketCells, window: float, n_bins: int, horizon: float,
            mean_available: np.ndarray, schedule: BlockSchedule | None = None) -> Ledger:
    if schedule is not None:
        edges = schedule.edges
    else:
        edges = np.linspace(0.0, horizon, n_bins + 1) if n_bins else np.empty(0)
    return Ledger(
        cells=cells,
        bookings=run.bookings,
        arrivals=run.arrivals,
        window=window,
        mean_available=mean_available,
        final_available=run.available,
        events=run.events,
        bin_edges=edges,
        bin_bookings=run.bin_bookings,
        bin_arrivals=run.bin_arrivals,
        engine=run.engine,
        blocks=schedule,
    )


__all__ = ["run_cells", "MAX_BIN_BYTES", "SLICE_EVENTS", "FIRST_SLICE_EVENTS", "SliceProgress",
           "SimulationInterrupted"]
