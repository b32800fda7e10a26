"""Platform logs from the simulator: the four tables a marketplace would record.

:func:`run_logged_cells` runs the market listing by listing (exponential busy times
only) with its own kernel, so that the count-based engine behind
:func:`marketsim.simulate` pays nothing for logging. The public front is
:func:`marketsim.simulate_log`, which also resolves warm starts.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.engine.cells import MarketCells
from marketsim.engine.logging_kernel import run_logged
from marketsim.randomness import SeedLike, engine_streams

TABLES = ("listings", "stays", "sessions", "impressions")


@dataclass(frozen=True, eq=False)
class PlatformLog:
    """What a platform would have logged during one simulated run.

    Attributes
    ----------
    listings : pandas.DataFrame
        ``listing_id, listing_type, treated`` (and ``price`` when the market has prices).
    stays : pandas.DataFrame
        ``listing_id, start, end, session_id``: every stay that overlaps the window;
        ``end`` is missing for a stay still running when the run ends, ``session_id``
        for a stay booked before the window (or busy at time 0, then ``start`` is 0).
    sessions : pandas.DataFrame
        ``session_id, time, customer_type, booked_listing, treated``: every arrival in
        the window, in time order.
    impressions : pandas.DataFrame
        ``session_id, listing_id``: the available listings each customer considered.
    window : (float, float)
        ``(burn_in, burn_in + horizon)``.
    available : ndarray of int, shape (n_sessions, n_listing_cells)
        Available listings per listing cell each customer found (the engine's state).
    cells : MarketCells
        The cells of the run.
    events : int
        Events simulated, burn-in included.
    """

    listings: pd.DataFrame
    stays: pd.DataFrame
    sessions: pd.DataFrame
    impressions: pd.DataFrame
    window: tuple[float, float]
    available: np.ndarray
    cells: MarketCells
    events: int

    def tables(self) -> dict[str, pd.DataFrame]:
        """The four tables by name."""
        return {name: getattr(self, name) for name in TABLES}

    def to_folder(self, folder: str | Path, kind: str = "csv") -> Path:
        """Write the four tables as ``NAME.csv`` (or ``.parquet``) files in ``folder``."""
        check.choice("kind", kind, ("csv", "parquet"))
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        for name, frame in self.tables().items():
            path = folder / f"{name}.{kind}"
            if kind == "csv":
                frame.to_csv(path, index=False)
            else:
                frame.to_parquet(path, index=False)
        return folder

    def __repr__(self) -> str:
        return (f"PlatformLog(window={self.window}, sessions={len(self.sessions):,}, "
                f"stays={len(self.stays):,}, impressions={len(self.impressions):,}, "
                f"listings={len(self.listings):,})")


def run_logged_cells(cells: MarketCells, *, horizon: float, burn_in: float = 0.0,
                     seed: SeedLike = None, start: np.ndarray | str = "empty") -> PlatformLog:
    """Simulate built cells listing by listing and return the logs (see
    :func:`marketsim.simulate_log`); ``start`` is ``"empty"`` or counts per listing cell.

    Raises
    ------
    ValueError
        If the window or the start is invalid, or the market has busy times that are
        not exponential or a demand profile.
    """
    horizon, burn_in = check.window(horizon, burn_in)
    market, split = cells.market, cells.split
    if not market.has_exponential_busy_times or market.demand is not None:
        raise ValueError(
            "market must have exponential busy times and a constant arrival rate for logged "
            f"runs (the logging kernel simulates only those), got busy_time "
            f"{[b.describe() for b in market.busy_time]} and demand {market.demand!r}"
        )
    available = cells.starting_counts(start)
    count = cells.listing_count.astype(np.int64)
    offset = np.r_[0, np.cumsum(count)[:-1]].astype(np.int64)
    pool = np.arange(count.sum(), dtype=np.int64)
    rng_arrivals, rng_choices, rng_releases = engine_streams(seed)
    (n_sessions, session_time, session_customer, session_booked, session_available,
     n_impressions, impression_session, impression_listing, n_stays, stay_listing,
     stay_start, stay_end, stay_session, events) = run_logged(
        cells.arrival_rate, np.cumsum(cells.customer_share), cells.outside_weight,
        cells.weight, cells.consideration, count, cells.release_rate, available,
        burn_in, burn_in + horizon, rng_arrivals, rng_choices, rng_releases, pool, offset)
    listing_cell = np.repeat(np.arange(count.size), count)
    listings = pd.DataFrame({
        "listing_id": np.arange(count.sum()),
        "listing_type": np.asarray(market.listing_types, dtype=object)[
            split.listing_type[listing_cell]],
        "treated": split.listing_treated[listing_cell].astype(bool),
    })
    if market.price is not None:
        listings["price"] = market.price[split.listing_type[listing_cell]]
    stay_end = stay_end[:n_stays]
    keep = ~(stay_end <= burn_in)  # drop only stays over before the window (nan = running)
    session_of_stay = stay_session[:n_stays][keep]
    stays = pd.DataFrame({
        "listing_id": stay_listing[:n_stays][keep],
        "start": stay_start[:n_stays][keep],
        "end": stay_end[keep],
        "session_id": pd.array(np.where(session_of_stay >= 0, session_of_stay, 0),
                               dtype="Int64"),
    })
    stays.loc[session_of_stay < 0, "session_id"] = pd.NA
    customer = session_customer[:n_sessions]
    booked = session_booked[:n_sessions]
    sessions = pd.DataFrame({
        "session_id": np.arange(n_sessions),
        "time": session_time[:n_sessions],
        "customer_type": np.asarray(market.customer_types, dtype=object)[
            split.customer_type[customer]],
        "booked_listing": pd.array(np.where(booked >= 0, booked, 0), dtype="Int64"),
        "treated": split.customer_treated[customer].astype(bool),
    })
    sessions.loc[booked < 0, "booked_listing"] = pd.NA
    impressions = pd.DataFrame({"session_id": impression_session[:n_impressions],
                                "listing_id": impression_listing[:n_impressions]})
    return PlatformLog(listings=listings, stays=stays, sessions=sessions,
                       impressions=impressions, window=(burn_in, burn_in + horizon),
                       available=session_available[:n_sessions].copy(), cells=cells,
                       events=int(events))
