"""Numba kernel of the exact continuous-time Markov chain (private).

Plain arrays in, preallocated arrays out; every check happens in the Python
runner before the kernel is called. The steps shared with the general engine
(arrival times under a demand profile, the choice race, the bookkeeping of the
measurement window) live here and are imported by it.

The choice step is exact and costs one uniform per listing cell whatever the
number of listings. Multinomial-logit choice among the considered listings and
the outside option is a race of exponential clocks with rates equal to the
weights (the fastest clock wins with probability ``w / sum w``). The fastest of
the ``k`` available listings of a cell, each considered with probability ``a``
and racing at rate ``w``, has ``P(T > t) = (1 - a + a * exp(-w t))**k``, which
inverts in closed form: with ``E`` a standard exponential draw (``U = exp(-E)``
uniform), ``T = -log1p(expm1(-E / k) / a) / w`` (``T = inf`` when no listing of
the cell is considered). Exponential draws (numpy's ziggurat) are cheaper than
the logarithm of a uniform. A cheap lower bound on each cell's time skips the
logarithms of cells that cannot beat the fastest clock so far, which changes
no outcome.

**Slices.** A kernel call simulates at most ``max_events`` events and returns;
its whole state lives in arrays (``available``, ``clock``, ``counters``,
``last_change`` and, for the general engine, the heap), and the random
generators keep their own state, so the next call resumes exactly where the
last one stopped: the same seed gives the same ledger whatever the slice size.

State arrays:

- ``clock`` (float64, 2): the time of the last event and the time of the next
  arrival (NaN before the first call).
- ``counters`` (int64, 4): events simulated so far, then the period number and
  the piece of the demand profile that holds the next arrival, then (general
  engine) the number of busy listings in the heap.
- ``last_change`` (float64, n_listing_cells): when each cell's availability
  last changed inside the window (starts at ``burn_in``).
"""

from __future__ import annotations

import numpy as np
from numba import njit

EVENTS, PERIOD, PIECE, BUSY = 0, 1, 2, 3
"""Positions in the ``counters`` state array."""


@njit(cache=True, error_model="numpy")
def _cell_race_time(e: float, k: int, a: float, w: float, best: float) -> float:
    """Time at which the fastest considered listing of a cell fires, or ``inf`` if
    no listing of the cell is considered or the cell cannot beat ``best``.

    The pruning is exact: with ``y = e / k``, ``1 - exp(-y) >= y - y**2 / 2`` and
    ``-log1p(x) >= -x``, so ``T >= y (1 - y / 2) / (a w)``; when that lower bound
    already reaches ``best`` the cell loses and its logarithms are skipped.
    """
    if k == 0 or a <= 0.0 or w <= 0.0:
        return np.inf
    if a >= 1.0:
        return e / (k * w)
    y = e / k
    if y * (1.0 - 0.5 * y) >= best * a * w:
        return np.inf
    x = np.expm1(-y) / a
    if x <= -1.0:
        return np.inf
    return -np.log1p(x) / w


@njit(cache=True, error_model="numpy")
def _next_arrival(t, e, arrival_rate, piece_ends, multipliers, period, counters):
    """Time of the first arrival after ``t``, given a standard exponential ``e``.

    With flat demand (``piece_ends`` empty) that is ``t + e / arrival_rate``.
    Under a demand profile the arrivals are a Poisson process of rate
    ``arrival_rate * multipliers[piece]``; the next one is where the integrated
    rate from ``t`` reaches ``e`` (an exact time change), found by walking the
    pieces from the one that holds ``t`` (``counters[PERIOD]``,
    ``counters[PIECE]``, updated in place).
    """
    n_pieces = piece_ends.size
    if n_pieces == 0:
        return t + e / arrival_rate
    while True:
        piece = counters[PIECE]
        piece_end = counters[PERIOD] * period + piece_ends[piece]
        rate = arrival_rate * multipliers[piece]
        if rate > 0.0 and e <= rate * (piece_end - t):
            return t + e / rate
        if rate > 0.0 and piece_end > t:
            e -= rate * (piece_end - t)
        t = max(t, piece_end)
        if piece == n_pieces - 1:
            counters[PIECE] = 0
            counters[PERIOD] += 1
        else:
            counters[PIECE] = piece + 1


@njit(cache=True, error_model="numpy")
def _arriving_customer(draw, share_cdf):
    """Customer cell of an arrival from a uniform ``draw``."""
    customer = 0
    while customer < share_cdf.size - 1 and draw >= share_cdf[customer]:
        customer += 1
    return customer


@njit(cache=True, error_model="numpy")
def _choice(rng_choices, customer, available, outside_weight, weight, consideration):
    """Listing cell the customer books (the closed-form race), or -1 for none."""
    best = rng_choices.exponential() / outside_weight[customer]
    chosen = -1
    for cell in range(available.size):
        race = _cell_race_time(
            rng_choices.exponential(),
            available[cell],
            consideration[customer, cell],
            weight[customer, cell],
            best,
        )
        if race < best:
            best = race
            chosen = cell
    return chosen


@njit(cache=True, error_model="numpy")
def _bin_slot(t, burn_in, bin_width, n_bins):
    """Time bin of the window that holds ``t`` (0 when there are no bins)."""
    if n_bins == 0:
        return 0
    return min(int((t - burn_in) / bin_width), n_bins - 1)


@njit(cache=True, error_model="numpy")
def _note_change(cell, t, available, available_time, last_change):
    """Add the cell's availability since its last change to the window's integral."""
    available_time[cell] += available[cell] * (t - last_change[cell])
    last_change[cell] = t


@njit(cache=True, error_model="numpy")
def _close_window(end, available, available_time, last_change):
    """Add every cell's availability from its last change to the end of the window."""
    for cell in range(available.size):
        _note_change(cell, end, available, available_time, last_change)


@njit(cache=True, error_model="numpy")
def run_chain(
    arrival_rate,
    share_cdf,
    outside_weight,
    weight,
    consideration,
    piece_ends,
    multipliers,
    period,
    count,
    release_rate,
    available,
    clock,
    counters,
    last_change,
    burn_in,
    end,
    max_events,
    rng_arrivals,
    rng_choices,
    rng_releases,
    bookings,
    arrivals,
    available_time,
    bin_bookings,
    bin_arrivals,
):
    """Simulate at most ``max_events`` events of the chain, up to ``end``.

    Records what happens in ``[burn_in, end)``. ``available`` (int64, per
    listing cell) and the state arrays (module notes) hold the state and are
    updated in place. ``bookings`` (customer cells x listing cells),
    ``arrivals`` (customer cells), ``available_time`` (listing cells, the time
    integral of availability over the window) and the per-bin arrays (shape
    (n_bins, ...); n_bins may be 0) are incremented in place. Returns True when
    the run has reached ``end`` (and the window is closed).
    """
    n_listing = count.size
    n_bins = bin_arrivals.shape[0]
    bin_width = (end - burn_in) / n_bins if n_bins > 0 else 1.0
    t = clock[0]
    if np.isnan(clock[1]):
        clock[1] = _next_arrival(t, rng_arrivals.exponential(), arrival_rate, piece_ends,
                                 multipliers, period, counters)
    next_arrival = clock[1]
    done = 0
    finished = False
    while done < max_events:
        busy_rate = 0.0
        for cell in range(n_listing):
            busy_rate += release_rate[cell] * (count[cell] - available[cell])
        next_release = np.inf
        if busy_rate > 0.0:
            next_release = t + rng_releases.exponential() / busy_rate
        is_arrival = next_arrival <= next_release
        t = next_arrival if is_arrival else next_release
        if t >= end:
            finished = True
            break
        done += 1
        in_window = t >= burn_in
        slot = _bin_slot(t, burn_in, bin_width, n_bins) if in_window else 0
        if is_arrival:
            next_arrival = _next_arrival(t, rng_arrivals.exponential(), arrival_rate,
                                         piece_ends, multipliers, period, counters)
            customer = _arriving_customer(rng_arrivals.random(), share_cdf)
            chosen = _choice(rng_choices, customer, available, outside_weight, weight,
                             consideration)
            if in_window:
                arrivals[customer] += 1
                if n_bins > 0:
                    bin_arrivals[slot, customer] += 1
            if chosen >= 0:
                if in_window:
                    bookings[customer, chosen] += 1
                    if n_bins > 0:
                        bin_bookings[slot, customer, chosen] += 1
                    _note_change(chosen, t, available, available_time, last_change)
                available[chosen] -= 1
        else:
            target = rng_releases.random() * busy_rate
            cell = -1
            cumulative = 0.0
            for candidate in range(n_listing):
                busy = count[candidate] - available[candidate]
                if busy > 0:
                    cell = candidate
                    cumulative += release_rate[candidate] * busy
                    if target < cumulative:
                        break
            if in_window:
                _note_change(cell, t, available, available_time, last_change)
            available[cell] += 1
    counters[EVENTS] += done
    clock[1] = next_arrival
    if finished:
        clock[0] = end
        _close_window(end, available, available_time, last_change)
    else:
        clock[0] = t
    return finished
