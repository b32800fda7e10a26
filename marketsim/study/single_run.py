"""One simulated run, with the large-market warm start resolved before the engine runs.

The warm start ``start="steady"`` needs the large-market model, which sits above the
engine in the flow; this module sits above both, so neither has to know the other.
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.designs import Design, GlobalControl, Switchback, listing_rounding_note
from marketsim.engine import START_OPTIONS, Ledger, MarketCells, build_cells, run_cells
from marketsim.engine.logs import PlatformLog, run_logged_cells
from marketsim.meanfield import steady_state
from marketsim.model import Market, Treatment
from marketsim.randomness import SeedLike
from marketsim.study.guards import SliceGuard


def simulate(
    market: Market,
    treatment: Treatment | None = None,
    design: Design | None = None,
    *,
    horizon: float,
    burn_in: float = 0.0,
    seed: SeedLike = None,
    start: str | ArrayLike = "empty",
    bins: int | None = None,
    max_seconds: float | None = None,
    max_events: int | None = None,
    progress: bool = True,
) -> Ledger:
    """Simulate the finite market exactly and record the measurement window.

    With exponential busy times the market is a continuous-time Markov chain
    whose state is the number of available listings per listing cell; the
    simulation is exact (no time steps) and its cost per event does not depend
    on the number of listings. With any other busy-time shape
    (``Market(busy_time=...)``) the general engine also keeps each busy
    listing's release time (a heap: cost per event grows like ``log N``), still
    exact event by event. A demand profile (``Market(demand=...)``) is followed
    exactly by both; time 0 is the start of its period. ``Ledger.engine`` says
    which engine ran.

    A :class:`~marketsim.Switchback` design runs its schedule piece by piece
    (each piece exact): the burn-in in the market without the feature, then the
    window's blocks, switching the choice weights at every block boundary while
    the market's state (available listings, release times) carries over. Its
    random assignment comes from a stream of ``seed`` of its own, so the
    customers' arrivals are those of the global worlds with the same seed. The
    ledger then counts each block's kept part (``Ledger.blocks``).

    Parameters
    ----------
    market : Market
    treatment : Treatment, optional
        The feature under test (default: none).
    design : Design, optional
        Who is treated (default :class:`~marketsim.GlobalControl`).
    horizon : float
        Length of the measured window (it starts after the burn-in), > 0 (and at
        least ``1e-9 * burn_in``, so that rounding cannot swallow the window).
    burn_in : float
        Time simulated before the window starts and not recorded, >= 0.
    seed : int, SeedSequence, Generator or None
        Same seed, same ledger.
    start : {"empty", "steady"} or array_like of int, shape (n_listing_cells,)
        Availability at time 0: ``"empty"`` means every listing available;
        ``"steady"`` the large-market steady state rounded to whole listings
        (:func:`marketsim.meanfield.steady_state`; a warm start that shortens
        the burn-in needed); or explicit counts per listing cell, each between
        0 and the cell's size. Measured on the rehearsal-room scenario (mean
        busy times 2 and 3 hours): from ``"empty"`` the expected booking rate
        starts 30% high and needs about 6 hours of burn-in to come within 1%
        of its long-run value (10 hours for 0.1%; large-market path, confirmed
        by simulation); from ``"steady"`` the mean over replications is within
        Monte Carlo error (about 1.5%) of the long-run value from the first
        quarter hour, at 40, 400 and 4,000 listings, so a burn-in of half a
        mean busy time is plenty. With busy times that are not exponential,
        ``"steady"`` still takes the large-market steady state for the counts
        (it depends on the busy times only through their means: at a steady
        state busy listings = booking rate x mean busy time, Little's law), and
        gives each busy listing a remaining busy time drawn from the
        equilibrium (stationary-excess) law of its shape, as a listing found
        busy at a random moment has; explicit counts get the same draws. Under
        a demand profile the steady state is that of the mean arrival rate, not
        of the cycle's start: keep a burn-in of at least one period.
    bins : int, optional
        Also count bookings and arrivals in this many equal time bins of the window.
    max_seconds, max_events : float, int, optional
        Refuse a run estimated to take longer or simulate more events: the
        estimate comes from a short timed slice of events at the start (events
        extrapolated from the simulated time reached), and the ``ValueError``
        gives it. Rough: a run from an empty start is busier at first.
    progress : bool
        Show a progress bar with that estimate if the run lasts over a second.

    Returns
    -------
    Ledger

    Raises
    ------
    marketsim.engine.SimulationInterrupted
        On Ctrl-C, within about a tenth of a second at any market size (the
        engine returns to Python between slices of events). It is a
        ``KeyboardInterrupt`` whose ``ledger`` holds the part of the window
        simulated so far (``window`` is that part's length; ``mean_available``
        is NaN; for a switchback, its blocks simulated to their end), or None if
        nothing of the window was finished: a partial ledger is never returned
        as if it were whole.

    Examples
    --------
    >>> import marketsim as ms
    >>> m = ms.scenarios.rehearsal_rooms()
    >>> ledger = ms.simulate(m, horizon=50.0, burn_in=10.0, seed=1)
    >>> ledger.bookings.shape
    (2, 2)
    """
    cells = build_cells(market, treatment, design)
    note = None if design is None else listing_rounding_note(design, market)
    if note is not None:
        warnings.warn(f"simulate: {design!r} on {market.n_listings} listings: {note}",
                      RuntimeWarning, stacklevel=2)
    guard = SliceGuard(max_seconds, max_events, progress)
    try:
        return run_cells(cells, horizon=horizon, burn_in=burn_in, seed=seed,
                         start=starting_availability(cells, start), bins=bins,
                         on_slice=guard)
    finally:
        guard.close()


def simulate_log(
    market: Market,
    treatment: Treatment | None = None,
    design: Design | None = None,
    *,
    horizon: float,
    burn_in: float = 0.0,
    seed: SeedLike = None,
    start: str | ArrayLike = "empty",
) -> PlatformLog:
    """Simulate the market and return the logs a platform would have recorded.

    The same market, treatment and design as :func:`simulate`, but every listing
    keeps its identity: each customer's considered listings (each available listing
    of type ``j`` considered with probability ``consideration[i, j]``), the choice
    among them and every stay are logged in the tables of the log format (README).
    A released listing is drawn uniformly among the busy listings of its cell, which
    is exact because busy times are exponential (memoryless); this runs its own
    kernel, so :func:`simulate` pays nothing for logging. Arrival times come from
    the same random stream as :func:`simulate` with the same seed; consideration
    and choices do not (they are drawn listing by listing here).

    Parameters
    ----------
    market, treatment, design, horizon, burn_in, seed, start
        As for :func:`simulate`.

    Returns
    -------
    PlatformLog
        ``listings``, ``stays``, ``sessions``, ``impressions`` (DataFrames), the
        ``window`` and the availability each customer found (``available``).

    Examples
    --------
    >>> import marketsim as ms
    >>> log = ms.simulate_log(ms.scenarios.rehearsal_rooms(), horizon=5.0, seed=1)
    >>> list(log.sessions.columns)
    ['session_id', 'time', 'customer_type', 'booked_listing', 'treated']
    """
    if isinstance(design, Switchback):
        raise ValueError("design must not be a switchback for simulate_log (the logging "
                         f"engine does not switch the treatment over time), got {design.label!r}")
    cells = build_cells(market, treatment, design)
    return run_logged_cells(cells, horizon=horizon, burn_in=burn_in, seed=seed,
                            start=starting_availability(cells, start))


def starting_availability(cells: MarketCells, start: str | ArrayLike) -> np.ndarray:
    """Available listings per listing cell at time 0, as a fresh int64 array.

    ``"steady"`` is the large-market steady state of the cells rounded to whole
    listings (for a switchback, that of global control, the market its run's
    burn-in simulates); ``"empty"`` and explicit counts are checked by the engine
    (:meth:`~marketsim.engine.MarketCells.starting_counts`).
    """
    if isinstance(start, str) and check.choice("start", start, START_OPTIONS) == "steady":
        # a switchback's run starts (burn-in included) in the market without the feature
        design = GlobalControl() if isinstance(cells.design, Switchback) else cells.design
        state = steady_state(cells.market, cells.treatment, design)
        rounded = np.rint(state.available).astype(np.int64)
        return np.clip(rounded, 0, cells.listing_count)
    return cells.starting_counts(start)


__all__ = ["simulate", "simulate_log", "starting_availability"]
