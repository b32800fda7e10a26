"""Numba kernel of the exact continuous-time Markov chain (private).

Plain arrays in, preallocated arrays out; every check happens in
:mod:`marketsim.engine.runner` before the kernel is called.

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
"""

from __future__ import annotations

import numpy as np
from numba import njit


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
def run_chain(
    arrival_rate,
    share_cdf,
    outside_weight,
    weight,
    consideration,
    count,
    release_rate,
    available,
    burn_in,
    end,
    rng_arrivals,
    rng_choices,
    rng_releases,
    bookings,
    arrivals,
    available_time,
    bin_bookings,
    bin_arrivals,
):
    """Simulate the chain on ``[0, end)`` and record what happens in ``[burn_in, end)``.

    ``available`` (int64, per listing cell) is the starting state and holds the
    final state on return. ``bookings`` (customer cells x listing cells),
    ``arrivals`` (customer cells), ``available_time`` (listing cells, the time
    integral of availability over the window) and the per-bin arrays (shape
    (n_bins, ...); n_bins may be 0) are incremented in place. Returns the number
    of events simulated, burn-in included.
    """
    n_customer, n_listing = weight.shape
    n_bins = bin_arrivals.shape[0]
    bin_width = (end - burn_in) / n_bins if n_bins > 0 else 1.0
    last_change = np.full(n_listing, burn_in)
    t = 0.0
    events = 0
    next_arrival = rng_arrivals.exponential() / arrival_rate
    while True:
        busy_rate = 0.0
        for cell in range(n_listing):
            busy_rate += release_rate[cell] * (count[cell] - available[cell])
        next_release = np.inf
        if busy_rate > 0.0:
            next_release = t + rng_releases.exponential() / busy_rate
        is_arrival = next_arrival <= next_release
        t = next_arrival if is_arrival else next_release
        if t >= end:
            break
        events += 1
        in_window = t >= burn_in
        slot = 0
        if in_window and n_bins > 0:
            slot = min(int((t - burn_in) / bin_width), n_bins - 1)
        if is_arrival:
            next_arrival = t + rng_arrivals.exponential() / arrival_rate
            draw = rng_arrivals.random()
            customer = 0
            while customer < n_customer - 1 and draw >= share_cdf[customer]:
                customer += 1
            best = rng_choices.exponential() / outside_weight[customer]
            chosen = -1
            for cell in range(n_listing):
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
            if in_window:
                arrivals[customer] += 1
                if n_bins > 0:
                    bin_arrivals[slot, customer] += 1
            if chosen >= 0:
                if in_window:
                    bookings[customer, chosen] += 1
                    if n_bins > 0:
                        bin_bookings[slot, customer, chosen] += 1
                    available_time[chosen] += available[chosen] * (t - last_change[chosen])
                    last_change[chosen] = t
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
                available_time[cell] += available[cell] * (t - last_change[cell])
                last_change[cell] = t
            available[cell] += 1
    for cell in range(n_listing):
        available_time[cell] += available[cell] * (end - last_change[cell])
    return events
