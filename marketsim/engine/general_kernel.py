"""Numba kernel of the general engine: busy times of any distribution (private).

With busy times that are not exponential the count of available listings per
cell is no longer a Markov chain: when a listing is released depends on when
it was booked. The state therefore keeps, next to the available counts per
listing cell, every busy listing's release time and cell in a binary min-heap
(``heap_time``, ``heap_cell``; ``counters[BUSY]`` entries). Each event is the
earlier of the next arrival and the heap's first release, so the simulation is
exact event by event; a booking costs one busy-time draw and a heap insertion,
a release a heap removal (``O(log N)`` each).

Arrival times under a demand profile, the choice race (DESIGN section 9) and
the bookkeeping of the measurement window are the chain kernel's own helpers;
the state arrays and the slicing follow its conventions
(:mod:`marketsim.engine.chain_kernel`).

Busy-time draws per listing cell (``busy_code``; ``busy_parameters`` columns
``p0, p1, p2``):

- 0 exponential: ``p0 * E`` (``p0`` the mean)
- 1 gamma: shape ``p0``, scale ``p1``
- 2 lognormal: ``exp(p0 + p1 Z)``
- 3 fixed: ``p0``
- 4 empirical: ``p0 * busy_table[p1 + K]``, ``K`` uniform on ``0 .. p2 - 1``
"""

from __future__ import annotations

import numpy as np
from numba import njit

from marketsim.engine.chain_kernel import (
    BUSY,
    EVENTS,
    _arriving_customer,
    _bin_slot,
    _choice,
    _close_window,
    _next_arrival,
    _note_change,
)

EXPONENTIAL, GAMMA, LOGNORMAL, FIXED, EMPIRICAL = 0, 1, 2, 3, 4
"""Codes of the busy-time families in ``busy_code``."""


@njit(cache=True, error_model="numpy")
def _busy_time(rng, code, parameters, table):
    """One busy time drawn from the family ``code`` with its ``parameters``."""
    if code == EXPONENTIAL:
        return parameters[0] * rng.exponential()
    if code == GAMMA:
        return rng.gamma(parameters[0], parameters[1])
    if code == LOGNORMAL:
        return rng.lognormal(parameters[0], parameters[1])
    if code == FIXED:
        return parameters[0]
    offset = int(parameters[1])
    return parameters[0] * table[offset + rng.integers(0, int(parameters[2]))]


@njit(cache=True, error_model="numpy")
def _heap_push(heap_time, heap_cell, size, time, cell):
    """Insert ``(time, cell)`` into the heap of ``size`` entries."""
    i = size
    while i > 0:
        parent = (i - 1) >> 1
        if heap_time[parent] <= time:
            break
        heap_time[i] = heap_time[parent]
        heap_cell[i] = heap_cell[parent]
        i = parent
    heap_time[i] = time
    heap_cell[i] = cell


@njit(cache=True, error_model="numpy")
def _heap_pop(heap_time, heap_cell, size):
    """Remove the first entry of the heap of ``size`` entries."""
    last = size - 1
    time = heap_time[last]
    cell = heap_cell[last]
    i = 0
    while True:
        child = 2 * i + 1
        if child >= last:
            break
        if child + 1 < last and heap_time[child + 1] < heap_time[child]:
            child += 1
        if heap_time[child] >= time:
            break
        heap_time[i] = heap_time[child]
        heap_cell[i] = heap_cell[child]
        i = child
    heap_time[i] = time
    heap_cell[i] = cell


def fill_heap(heap_time, heap_cell, release_times, release_cells):
    """Put the busy listings of the starting state in the heap; returns their count.

    Parameters
    ----------
    heap_time, heap_cell : ndarray, shape (capacity,)
    release_times : ndarray, shape (n_busy,)
        When each busy listing is released.
    release_cells : ndarray of int, shape (n_busy,)
        Its listing cell.
    """
    order = np.argsort(release_times, kind="stable")  # a sorted array is a heap
    n_busy = order.size
    heap_time[:n_busy] = release_times[order]
    heap_cell[:n_busy] = release_cells[order]
    return n_busy


@njit(cache=True, error_model="numpy")
def run_general(
    arrival_rate,
    share_cdf,
    outside_weight,
    weight,
    consideration,
    piece_ends,
    multipliers,
    period,
    busy_code,
    busy_parameters,
    busy_table,
    available,
    heap_time,
    heap_cell,
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
    """Simulate at most ``max_events`` events with general busy times, up to ``end``.

    Same contract as :func:`marketsim.engine.chain_kernel.run_chain`, with the
    heap of release times as extra state; busy times are drawn from
    ``rng_releases``. Returns True when the run has reached ``end``.
    """
    n_bins = bin_arrivals.shape[0]
    bin_width = (end - burn_in) / n_bins if n_bins > 0 else 1.0
    t = clock[0]
    if np.isnan(clock[1]):
        clock[1] = _next_arrival(t, rng_arrivals.exponential(), arrival_rate, piece_ends,
                                 multipliers, period, counters)
    next_arrival = clock[1]
    busy = counters[BUSY]
    done = 0
    finished = False
    while done < max_events:
        next_release = heap_time[0] if busy > 0 else np.inf
        is_arrival = next_arrival <= next_release
        t = next_arrival if is_arrival else next_release
        if t >= end:
            finished = True
            break
        done += 1
        in_window = t >= burn_in
        if is_arrival:
            next_arrival = _next_arrival(t, rng_arrivals.exponential(), arrival_rate,
                                         piece_ends, multipliers, period, counters)
            customer = _arriving_customer(rng_arrivals.random(), share_cdf)
            chosen = _choice(rng_choices, customer, available, outside_weight, weight,
                             consideration)
            if in_window:
                slot = _bin_slot(t, burn_in, bin_width, n_bins)
                arrivals[customer] += 1
                if n_bins > 0:
                    bin_arrivals[slot, customer] += 1
                if chosen >= 0:
                    bookings[customer, chosen] += 1
                    if n_bins > 0:
                        bin_bookings[slot, customer, chosen] += 1
                    _note_change(chosen, t, available, available_time, last_change)
            if chosen >= 0:
                available[chosen] -= 1
                release = t + _busy_time(rng_releases, busy_code[chosen],
                                         busy_parameters[chosen], busy_table)
                _heap_push(heap_time, heap_cell, busy, release, chosen)
                busy += 1
        else:
            cell = heap_cell[0]
            _heap_pop(heap_time, heap_cell, busy)
            busy -= 1
            if in_window:
                _note_change(cell, t, available, available_time, last_change)
            available[cell] += 1
    counters[EVENTS] += done
    counters[BUSY] = busy
    clock[1] = next_arrival
    if finished:
        clock[0] = end
        _close_window(end, available, available_time, last_change)
    else:
        clock[0] = t
    return finished
