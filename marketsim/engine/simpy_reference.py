"""A plain SimPy model of the market: the outside reference for the engine.

This is the model a user would otherwise write with SimPy, the general
discrete-event simulator: state aggregated by listing type (a numpy array of
available counts), numpy draws for everything, one SimPy process (or timeout)
per booking. It shares no code with the numba kernels: the consideration step
draws binomial counts instead of racing clocks, and a demand profile is
simulated by thinning (Lewis and Shedler, 1979) instead of the kernels' time
change. Tests compare the engine with it (same market, same law, independent
implementations) and the benchmarks time it (``benchmarks/engine_vs_simpy.py``).

It simulates the market under global control (no treatment, no design).
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import pandas as pd
import simpy

from marketsim import _validation as check
from marketsim.model.market import Market
from marketsim.randomness import SeedLike, seed_sequence


@dataclass(frozen=True, eq=False)
class ReferenceRun:
    """What one run of the SimPy model recorded in its window.

    Attributes
    ----------
    bookings : ndarray of int, shape (n_customer_types, n_listing_types)
    arrivals : ndarray of int, shape (n_customer_types,)
    window : float
        Length of the measurement window.
    events : int
        Arrivals and releases simulated, burn-in included (the engine's count).
    busy_time_integral : ndarray, shape (n_listing_types,)
        Time integral of the number of busy listings of each type over the window.
    seconds : float
        CPU time of the run.
    """

    bookings: np.ndarray
    arrivals: np.ndarray
    window: float
    events: int
    busy_time_integral: np.ndarray
    seconds: float

    def to_frame(self) -> pd.DataFrame:
        """One row per listing type: ``listing_type, bookings, booking_rate, mean_busy``."""
        return pd.DataFrame({
            "listing_type": np.arange(self.bookings.shape[1]),
            "bookings": self.bookings.sum(axis=0),
            "booking_rate": self.bookings.sum(axis=0) / self.window,
            "mean_busy": self.busy_time_integral / self.window,
        })


def simpy_run(market: Market, *, horizon: float, burn_in: float = 0.0, seed: SeedLike = None,
              process_per_booking: bool = True) -> ReferenceRun:
    """Simulate ``market`` (global control) with SimPy, every listing available at time 0.

    Parameters
    ----------
    market : Market
        Its busy-time shapes (``market.busy_time``) and demand profile
        (``market.demand``) are honoured.
    horizon, burn_in : float
        The window is ``[burn_in, burn_in + horizon)``.
    seed : int, SeedSequence, Generator or None
    process_per_booking : bool
        One SimPy process per booking (the common style), or a leaner timeout
        with a callback.

    Returns
    -------
    ReferenceRun
    """
    horizon, burn_in = check.window(horizon, burn_in)
    rng = np.random.Generator(np.random.PCG64(seed_sequence(seed)))
    env = simpy.Environment()
    available = market.listing_counts.astype(np.int64).copy()
    weight = np.exp(market.utility)
    outside = market.n_listings * np.exp(market.outside_utility)
    share_cdf = np.cumsum(market.customer_shares)
    profile = market.demand
    peak = 1.0 if profile is None else float(profile.multipliers.max())
    mean_gap = 1.0 / (market.arrival_rate * peak)
    shapes, means = market.busy_time, market.mean_busy_time
    consideration = market.consideration
    n_types = market.n_listing_types
    counts = {"events": 0}
    bookings = np.zeros((market.n_customer_types, n_types), dtype=np.int64)
    arrivals = np.zeros(market.n_customer_types, dtype=np.int64)
    busy_integral = np.zeros(n_types)
    last_change = np.full(n_types, burn_in)
    end = burn_in + horizon

    def note_change(j):
        if env.now >= burn_in:
            busy_integral[j] += (market.listing_counts[j] - available[j]) * (env.now
                                                                            - last_change[j])
            last_change[j] = env.now

    def release(j):
        note_change(j)
        available[j] += 1
        counts["events"] += 1

    def occupy(j, stay):
        yield env.timeout(stay)
        release(j)

    def customers():
        while True:
            yield env.timeout(rng.exponential(mean_gap))
            if profile is not None and rng.random() * peak >= profile.multiplier_at(env.now):
                continue  # thinning: a candidate arrival the profile rejects
            counts["events"] += 1
            recording = env.now >= burn_in
            i = min(int(np.searchsorted(share_cdf, rng.random(), side="right")),
                    len(share_cdf) - 1)
            considered = rng.binomial(available, consideration[i])
            cumulative = np.cumsum(considered * weight[i])
            draw = rng.random() * (outside[i] + cumulative[-1])
            j = int(np.searchsorted(cumulative, draw, side="right"))
            if recording:
                arrivals[i] += 1
            if j < n_types:
                note_change(j)
                available[j] -= 1
                if recording:
                    bookings[i, j] += 1
                stay = shapes[j].sample(means[j], None, rng)
                if process_per_booking:
                    env.process(occupy(j, stay))
                else:
                    timeout = env.timeout(stay)
                    timeout.callbacks.append(lambda _event, j=j: release(j))

    env.process(customers())
    start = time.process_time()
    env.run(until=end)
    seconds = time.process_time() - start
    busy_integral += (market.listing_counts - available) * (end - last_change)
    return ReferenceRun(bookings=bookings, arrivals=arrivals, window=horizon,
                        events=counts["events"], busy_time_integral=busy_integral,
                        seconds=seconds)


__all__ = ["ReferenceRun", "simpy_run"]
