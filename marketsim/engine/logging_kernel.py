"""Numba kernel that simulates the market listing by listing and writes its logs (private).

Exponential busy times only. Unlike the chain kernel, which keeps counts per cell,
this one keeps the identity of every listing: each listing cell's slice of ``pool``
holds its available listings first and its busy ones after. An arriving customer
considers each available listing of a cell independently (a binomial count, then
that many distinct listings drawn uniformly), chooses by multinomial logit among
the considered and the outside option (weight ``N e^{u_0}``), and the chosen listing
becomes busy. A release picks the cell at its total release rate and then a busy
listing of the cell uniformly, which is exact when busy times are exponential
(every busy listing of a cell has the same release rate, whatever its age). Output
buffers grow by doubling inside the kernel, since the number of rows is random.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True)
def _grown(values, needed):
    """``values`` copied into an array at least twice as long (first axis)."""
    size = max(needed, 2 * values.shape[0])
    bigger = np.empty((size,) + values.shape[1:], dtype=values.dtype)  # noqa: RUF005 (numba)
    bigger[: values.shape[0]] = values
    return bigger


@njit(cache=True)
def run_logged(
    arrival_rate, share_cdf, outside_weight, weight, consideration, count, release_rate,
    available, burn_in, end, rng_arrivals, rng_choices, rng_releases, pool, offset,
):
    """Simulate ``[0, end)`` and log sessions in ``[burn_in, end)`` and every stay.

    ``pool`` (int64, n_listings) holds listing ids cell by cell (cell ``c`` in
    ``pool[offset[c]:offset[c] + count[c]]``, available ones first); ``available`` is
    the starting state. Both are updated in place. Listings busy at time 0 get a stay
    starting at 0. Returns ``(n_sessions, session_time, session_customer,
    session_booked, session_available, n_impressions, impression_session,
    impression_listing, n_stays, stay_listing, stay_start, stay_end, stay_session,
    events)``; arrays are longer than their counts.
    """
    n_customer, n_listing = weight.shape
    guess = int(arrival_rate * (end - burn_in) * 1.1) + 16
    session_time = np.empty(guess)
    session_customer = np.empty(guess, dtype=np.int64)
    session_booked = np.empty(guess, dtype=np.int64)
    session_available = np.empty((guess, n_listing), dtype=np.int64)
    impression_session = np.empty(4 * guess, dtype=np.int64)
    impression_listing = np.empty(4 * guess, dtype=np.int64)
    stay_listing = np.empty(guess, dtype=np.int64)
    stay_start = np.empty(guess)
    stay_end = np.empty(guess)
    stay_session = np.empty(guess, dtype=np.int64)
    current_stay = np.full(pool.size, -1)
    n_sessions = 0
    n_impressions = 0
    n_stays = 0
    for cell in range(n_listing):
        for r in range(available[cell], count[cell]):
            if n_stays == stay_listing.size:
                stay_listing = _grown(stay_listing, n_stays + 1)
                stay_start = _grown(stay_start, n_stays + 1)
                stay_end = _grown(stay_end, n_stays + 1)
                stay_session = _grown(stay_session, n_stays + 1)
            listing = pool[offset[cell] + r]
            stay_listing[n_stays] = listing
            stay_start[n_stays] = 0.0
            stay_end[n_stays] = np.nan
            stay_session[n_stays] = -1
            current_stay[listing] = n_stays
            n_stays += 1
    considered = np.zeros(n_listing, dtype=np.int64)
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
        if is_arrival:
            next_arrival = t + rng_arrivals.exponential() / arrival_rate
            draw = rng_arrivals.random()
            customer = 0
            while customer < n_customer - 1 and draw >= share_cdf[customer]:
                customer += 1
            in_window = t >= burn_in
            if in_window:
                if n_sessions == session_time.size:
                    session_time = _grown(session_time, n_sessions + 1)
                    session_customer = _grown(session_customer, n_sessions + 1)
                    session_booked = _grown(session_booked, n_sessions + 1)
                    session_available = _grown(session_available, n_sessions + 1)
                session_time[n_sessions] = t
                session_customer[n_sessions] = customer
                session_booked[n_sessions] = -1
                for cell in range(n_listing):
                    session_available[n_sessions, cell] = available[cell]
            total = outside_weight[customer]
            for cell in range(n_listing):
                k = 0
                a = consideration[customer, cell]
                if available[cell] > 0 and a > 0.0:
                    k = available[cell] if a >= 1.0 else rng_choices.binomial(available[cell], a)
                first = offset[cell]
                for r in range(k):  # partial shuffle: the first k available are considered
                    pick = first + r + rng_choices.integers(0, available[cell] - r)
                    held = pool[first + r]
                    pool[first + r] = pool[pick]
                    pool[pick] = held
                considered[cell] = k
                total += k * weight[customer, cell]
                if in_window and k > 0:
                    if n_impressions + k > impression_session.size:
                        impression_session = _grown(impression_session, n_impressions + k)
                        impression_listing = _grown(impression_listing, n_impressions + k)
                    for r in range(k):
                        impression_session[n_impressions] = n_sessions
                        impression_listing[n_impressions] = pool[first + r]
                        n_impressions += 1
            target = rng_choices.random() * total
            chosen = -1
            cumulative = outside_weight[customer]
            if target >= cumulative:
                for cell in range(n_listing):
                    if considered[cell] > 0:
                        chosen = cell
                        cumulative += considered[cell] * weight[customer, cell]
                        if target < cumulative:
                            break
            if chosen >= 0:
                first = offset[chosen]
                r = rng_choices.integers(0, considered[chosen])
                last = first + available[chosen] - 1
                listing = pool[first + r]
                pool[first + r] = pool[last]
                pool[last] = listing
                available[chosen] -= 1
                if n_stays == stay_listing.size:
                    stay_listing = _grown(stay_listing, n_stays + 1)
                    stay_start = _grown(stay_start, n_stays + 1)
                    stay_end = _grown(stay_end, n_stays + 1)
                    stay_session = _grown(stay_session, n_stays + 1)
                stay_listing[n_stays] = listing
                stay_start[n_stays] = t
                stay_end[n_stays] = np.nan
                stay_session[n_stays] = n_sessions if in_window else -1
                current_stay[listing] = n_stays
                n_stays += 1
                if in_window:
                    session_booked[n_sessions] = listing
            if in_window:
                n_sessions += 1
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
            first = offset[cell]
            pick = first + available[cell] + rng_releases.integers(
                0, count[cell] - available[cell])
            listing = pool[pick]
            pool[pick] = pool[first + available[cell]]
            pool[first + available[cell]] = listing
            available[cell] += 1
            stay_end[current_stay[listing]] = t
            current_stay[listing] = -1
    return (n_sessions, session_time, session_customer, session_booked, session_available,
            n_impressions, impression_session, impression_listing, n_stays, stay_listing,
            stay_start, stay_end, stay_session, events)
