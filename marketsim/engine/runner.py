"""Python front of the engine: validate once, seed the streams, call the kernel."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.engine.cells import MarketCells
from marketsim.engine.chain_kernel import run_chain
from marketsim.engine.ledger import Ledger
from marketsim.randomness import SeedLike, engine_streams

MAX_BIN_BYTES = 2**30
"""Largest memory the per-bin counts of one run may take."""


def run_cells(
    cells: MarketCells,
    *,
    horizon: float,
    burn_in: float = 0.0,
    seed: SeedLike = None,
    start: str | ArrayLike = "empty",
    bins: int | None = None,
) -> Ledger:
    """Simulate cells that are already built (see :func:`marketsim.simulate`).

    ``start`` is ``"empty"`` (every listing available) or the available listings per
    listing cell; the large-market warm start ``"steady"`` is resolved above the
    engine (:func:`marketsim.study.warm_start.starting_availability`).
    """
    horizon, burn_in = check.window(horizon, burn_in)
    n_bins = 0 if bins is None else check.whole_number("bins", bins, low=1)
    n_customer, n_listing = cells.n_customer_cells, cells.n_listing_cells
    most_bins = MAX_BIN_BYTES // (8 * n_customer * (n_listing + 1))
    if n_bins > most_bins:
        raise ValueError(
            f"bins must be at most {most_bins:,} for this design ({n_customer} x {n_listing} "
            f"cells; the counts per bin would need more than {MAX_BIN_BYTES // 2**30} GiB), "
            f"got {n_bins:,}"
        )
    available = cells.starting_counts(start)
    rng_arrivals, rng_choices, rng_releases = engine_streams(seed)
    bookings = np.zeros((n_customer, n_listing), dtype=np.int64)
    arrivals = np.zeros(n_customer, dtype=np.int64)
    available_time = np.zeros(n_listing)
    bin_bookings = np.zeros((n_bins, n_customer, n_listing), dtype=np.int64)
    bin_arrivals = np.zeros((n_bins, n_customer), dtype=np.int64)
    share_cdf = np.cumsum(cells.customer_share)
    events = run_chain(
        cells.arrival_rate, share_cdf, cells.outside_weight, cells.weight,
        cells.consideration, cells.listing_count, cells.release_rate, available,
        burn_in, burn_in + horizon, rng_arrivals, rng_choices, rng_releases,
        bookings, arrivals, available_time, bin_bookings, bin_arrivals,
    )
    return Ledger(
        cells=cells,
        bookings=bookings,
        arrivals=arrivals,
        window=horizon,
        mean_available=available_time / horizon,
        final_available=available,
        events=int(events),
        bin_edges=np.linspace(0.0, horizon, n_bins + 1) if n_bins else np.empty(0),
        bin_bookings=bin_bookings,
        bin_arrivals=bin_arrivals,
    )


__all__ = ["run_cells", "MAX_BIN_BYTES"]
