"""Read and check platform logs: four tables in, coded arrays out.

The tables and their columns are those of the log format (README, ``docs/logs.md``):

- ``listings``: ``listing_id``, ``listing_type``; optional ``price``, ``treated``.
- ``stays``: ``listing_id``, ``start``, ``end``; optional ``session_id``. A missing
  ``end`` means the listing was still busy when the log was cut.
- ``sessions``: ``session_id``, ``time``, ``customer_type``, ``booked_listing``
  (missing when the customer left without booking); optional ``treated``.
- ``impressions`` (optional): ``session_id``, ``listing_id``: the available listings
  each customer considered.

Every rule that fails raises ``ValueError`` naming the table, the column, how many
rows break it and one example row. Nothing is dropped silently: sessions outside an
explicit ``window`` are set aside and counted in :attr:`CheckedLog.set_aside`.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from numba import njit

from marketsim import _validation as check

REQUIRED = {
    "listings": ("listing_id", "listing_type"),
    "stays": ("listing_id", "start", "end"),
    "sessions": ("session_id", "time", "customer_type", "booked_listing"),
    "impressions": ("session_id", "listing_id"),
}
OPTIONAL = {
    "listings": ("price", "treated"),
    "stays": ("session_id",),
    "sessions": ("treated",),
    "impressions": (),
}
ID_COLUMNS = ("listing_id", "session_id", "booked_listing")


@dataclass(frozen=True, eq=False)
class CheckedLog:
    """Platform logs after every check, as integer codes and float times.

    Listings are coded ``0..n_listings-1`` in the order of the ``listings`` table,
    sessions ``0..n_sessions-1`` in time order (only those inside the window).

    Attributes
    ----------
    listing_types, customer_types : tuple of str
        Type names, sorted.
    listing_type : ndarray of int, shape (n_listings,)
        Type code of each listing.
    listing_treated : ndarray of bool, shape (n_listings,) or None
    price : ndarray, shape (n_listing_types,) or None
        Mean price of the listings of each type, when ``listings`` has ``price``.
    stay_listing : ndarray of int, shape (n_stays,)
    stay_start, stay_end : ndarray, shape (n_stays,)
        Times; ``stay_end`` is ``inf`` for a stay still running when the log ends.
    session_time : ndarray, shape (n_sessions,)
    session_customer : ndarray of int, shape (n_sessions,)
    session_booked : ndarray of int, shape (n_sessions,)
        Listing code booked, ``-1`` for a customer who left.
    session_treated : ndarray of bool, shape (n_sessions,) or None
    impression_session, impression_listing : ndarray of int, shape (n_impressions,) or None
    window : tuple of float
        ``(start, end)`` of the observation window.
    set_aside : dict of str to int
        Rows not used, by reason (e.g. sessions outside the window).
    """

    listing_types: tuple[str, ...]
    customer_types: tuple[str, ...]
    listing_type: np.ndarray
    listing_treated: np.ndarray | None
    price: np.ndarray | None
    stay_listing: np.ndarray
    stay_start: np.ndarray
    stay_end: np.ndarray
    session_time: np.ndarray
    session_customer: np.ndarray
    session_booked: np.ndarray
    session_treated: np.ndarray | None
    impression_session: np.ndarray | None
    impression_listing: np.ndarray | None
    window: tuple[float, float]
    set_aside: dict[str, int]

    @property
    def duration(self) -> float:
        """Length of the observation window."""
        return self.window[1] - self.window[0]

    @property
    def listing_counts(self) -> np.ndarray:
        """Listings of each type, shape (n_listing_types,)."""
        return np.bincount(self.listing_type, minlength=len(self.listing_types))

    @property
    def has_impressions(self) -> bool:
        """Whether the log says which listings each customer considered."""
        return self.impression_session is not None


def read_log_folder(folder: str | Path) -> dict[str, pd.DataFrame]:
    """Read ``listings``, ``stays``, ``sessions`` and (if present) ``impressions``
    from ``folder``, each as ``NAME.csv`` or ``NAME.parquet``.

    Identifier columns of CSV files are read as text, so that ``7`` in one table and
    ``7.0`` in another (pandas' reading of a column with missing values) cannot differ.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise ValueError(f"folder must be an existing folder of log tables, got {str(folder)!r}")
    tables: dict[str, pd.DataFrame] = {}
    for name in REQUIRED:
        found = [folder / f"{name}.{ext}" for ext in ("csv", "parquet")
                 if (folder / f"{name}.{ext}").is_file()]
        if not found:
            if name == "impressions":
                continue
            raise ValueError(
                f"folder {str(folder)!r} must hold {name}.csv or {name}.parquet, found "
                f"{sorted(p.name for p in folder.iterdir())}"
            )
        if len(found) > 1:
            raise ValueError(f"folder {str(folder)!r} holds both {name}.csv and "
                             f"{name}.parquet; keep one")
        path = found[0]
        if path.suffix == ".csv":
            tables[name] = pd.read_csv(path, dtype={c: str for c in ID_COLUMNS})
        else:
            tables[name] = pd.read_parquet(path)
    return tables


def check_log(
    sessions: pd.DataFrame,
    stays: pd.DataFrame,
    listings: pd.DataFrame,
    impressions: pd.DataFrame | None = None,
    *,
    window: tuple[float, float] | None = None,
) -> CheckedLog:
    """Check the four tables against the log format and code them.

    Parameters
    ----------
    sessions, stays, listings : pandas.DataFrame
    impressions : pandas.DataFrame, optional
    window : (float, float), optional
        Observation window. Default: from the first to the last session time.
        Sessions outside an explicit window are set aside (and counted).

    Returns
    -------
    CheckedLog
    """
    frames = {"listings": listings, "stays": stays, "sessions": sessions}
    if impressions is not None:
        frames["impressions"] = impressions
    for name, frame in frames.items():
        _check_columns(name, frame)

    listing_index = pd.Index(listings["listing_id"].to_numpy())
    _refuse(listings, listing_index.duplicated(keep="first"), "listings", "listing_id",
            "must not repeat a listing")
    _refuse(listings, listings["listing_type"].isna().to_numpy(), "listings",
            "listing_type", "must not be missing")
    type_names, listing_type = _names(listings["listing_type"])
    listing_treated = _flags(listings, "listings")
    price = None
    if "price" in listings:
        values = listings["price"].to_numpy(dtype=float)
        _refuse(listings, ~np.isfinite(values) | (values < 0), "listings", "price",
                "must be a finite number >= 0")
        price = np.bincount(listing_type, values) / np.bincount(listing_type)

    time = _times(sessions, "sessions", "time")
    _refuse(sessions, np.r_[False, np.diff(time) < 0], "sessions", "time",
            "must be sorted (each time >= the one before)")
    session_index = pd.Index(sessions["session_id"].to_numpy())
    _refuse(sessions, session_index.duplicated(keep="first"), "sessions", "session_id",
            "must not repeat a session")
    _refuse(sessions, sessions["customer_type"].isna().to_numpy(), "sessions",
            "customer_type", "must not be missing")
    booked_given = sessions["booked_listing"].notna().to_numpy()
    booked = np.full(len(sessions), -1)
    booked[booked_given] = _codes(listing_index, sessions["booked_listing"][booked_given])
    _refuse(sessions, booked_given & (booked < 0), "sessions", "booked_listing",
            "must be a listing_id of the listings table (or missing)")
    session_treated = _flags(sessions, "sessions")

    stay_listing = _codes(listing_index, stays["listing_id"])
    _refuse(stays, stay_listing < 0, "stays", "listing_id",
            "must be a listing_id of the listings table")
    start = _times(stays, "stays", "start")
    end = stays["end"].to_numpy(dtype=float, na_value=np.nan)
    _refuse(stays, np.isinf(end), "stays", "end", "must be a finite time (or missing "
            "for a stay still running when the log ends)")
    end = np.where(np.isnan(end), np.inf, end)
    _refuse(stays, end < start, "stays", "end", "must be >= start")
    order = np.lexsort((start, stay_listing))
    overlap = np.zeros(len(stays), dtype=bool)
    same = stay_listing[order][1:] == stay_listing[order][:-1]
    overlap[order[1:]] = same & (start[order][1:] < end[order][:-1])
    _refuse(stays, overlap, "stays", "start",
            "must not fall inside an earlier stay of the same listing (stays overlap)")

    if window is None:
        window = (float(time.min()), float(time.max())) if time.size else (0.0, 0.0)
    else:
        low, high = (check.number("window start", w) for w in window)
        if not high > low:
            raise ValueError(f"window must be (start, end) with end > start, got {window!r}")
        window = (low, high)
    inside = (time >= window[0]) & (time <= window[1])
    if inside.sum() < 2 or not window[1] > window[0]:
        raise ValueError(
            f"sessions: the window {window} must hold at least two sessions at different "
            f"times, got {int(inside.sum())} of {len(time)} sessions"
        )
    set_aside = {"sessions outside the window": int((~inside).sum())}
    busy = _busy_at(stay_listing, start, end, booked[booked_given], time[booked_given])
    bad = np.zeros(len(sessions), dtype=bool)
    bad[np.flatnonzero(booked_given)[busy]] = True
    _refuse(sessions, bad, "sessions", "booked_listing",
            "must be available at the session's time (a stay of that listing covers it)")

    impression_session = impression_listing = None
    if impressions is not None:
        impression_session, impression_listing = _impressions(
            impressions, session_index, listing_index, time, stay_listing, start, end, booked)
        kept = np.cumsum(inside) - 1
        keep = inside[impression_session]
        set_aside["impressions of sessions outside the window"] = int((~keep).sum())
        impression_session = kept[impression_session[keep]]
        impression_listing = impression_listing[keep]
    customer_names, customer = _names(sessions["customer_type"])
    return CheckedLog(
        listing_types=tuple(str(n) for n in type_names),
        customer_types=tuple(str(n) for n in customer_names),
        listing_type=listing_type.astype(np.int64),
        listing_treated=listing_treated,
        price=price,
        stay_listing=stay_listing,
        stay_start=start,
        stay_end=end,
        session_time=time[inside],
        session_customer=customer[inside].astype(np.int64),
        session_booked=booked[inside],
        session_treated=None if session_treated is None else session_treated[inside],
        impression_session=impression_session,
        impression_listing=impression_listing,
        window=window,
        set_aside=set_aside,
    )


def _impressions(impressions, session_index, listing_index, time, stay_listing, start, end,
                 booked) -> tuple[np.ndarray, np.ndarray]:
    """Coded impressions, after checking they name known sessions and available listings."""
    session = _codes(session_index, impressions["session_id"])
    _refuse(impressions, session < 0, "impressions", "session_id",
            "must be a session_id of the sessions table")
    listing = _codes(listing_index, impressions["listing_id"])
    _refuse(impressions, listing < 0, "impressions", "listing_id",
            "must be a listing_id of the listings table")
    pair = session * np.int64(len(listing_index)) + listing
    _refuse(impressions, pd.Index(pair).duplicated(keep="first"), "impressions", "listing_id",
            "must not repeat a listing within a session")
    _refuse(impressions, _busy_at(stay_listing, start, end, listing, time[session]),
            "impressions", "listing_id", "must be available at the session's time (a stay "
            "of that listing covers it)")
    with_booking = booked >= 0
    shown = np.zeros(len(session_index), dtype=bool)
    shown[session[listing == booked[session]]] = True
    missing = with_booking & ~shown
    if missing.any():
        k = int(np.argmax(missing))
        raise ValueError(
            f"impressions: column 'listing_id' must include the booked listing of every "
            f"session that booked: {int(missing.sum()):,} sessions book a listing they were "
            f"not shown, e.g. session_id {session_index[k]!r}"
        )
    return session, listing


def _busy_at(stay_listing, start, end, listing, time) -> np.ndarray:
    """Whether each (listing, time) query falls strictly inside a stay of that listing.

    Stays are sorted by (listing, start); since stays of one listing do not overlap,
    the last stay of the listing that started strictly before the query is the only
    one that can cover it (a stay starting at the query's own time is that session's
    booking). Found by binary search within the listing's stays.
    """
    order = np.lexsort((start, stay_listing))
    n_listings = int(max(stay_listing.max(initial=-1), listing.max(initial=-1))) + 1
    first = np.searchsorted(stay_listing[order], np.arange(n_listings + 1))
    result = np.zeros(listing.size, dtype=np.bool_)
    _covered(start[order], end[order], first, listing, time, result)
    return result


@njit(cache=True)
def _covered(start, end, first, listing, time, result):  # pragma: no cover (numba)
    for q in range(listing.size):
        lo, hi = first[listing[q]], first[listing[q] + 1]
        while lo < hi:  # first stay of the listing starting at or after the query
            middle = (lo + hi) // 2
            if start[middle] < time[q]:
                lo = middle + 1
            else:
                hi = middle
        stay = lo - 1
        result[q] = stay >= first[listing[q]] and end[stay] > time[q]


def _check_columns(name: str, frame: object) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(f"{name} must be a pandas DataFrame, got {type(frame).__name__}")
    for column in REQUIRED[name]:
        if column not in frame.columns:
            known = REQUIRED[name] + OPTIONAL[name]
            extra = [str(c) for c in frame.columns if c not in known]
            close = difflib.get_close_matches(column, extra, n=1)
            hint = f" (is {close[0]!r} a misspelling?)" if close else ""
            raise ValueError(
                f"{name}: column {column!r} is missing{hint}; {name} must have columns "
                f"{list(REQUIRED[name])} (optional {list(OPTIONAL[name])}), got "
                f"{[str(c) for c in frame.columns]}"
            )


def _times(frame: pd.DataFrame, name: str, column: str) -> np.ndarray:
    try:
        values = pd.to_numeric(frame[column]).to_numpy(dtype=float, na_value=np.nan)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: column {column!r} must hold numbers (times), got "
                         f"{frame[column].head(3).tolist()}") from None
    _refuse(frame, ~np.isfinite(values), name, column, "must be a finite time (not missing)")
    return values


def _flags(frame: pd.DataFrame, name: str) -> np.ndarray | None:
    if "treated" not in frame:
        return None
    values = frame["treated"]
    if values.dtype == bool:
        return values.to_numpy()
    text = values.astype(str).str.lower()
    ok = text.isin(["true", "false", "1", "0"]).to_numpy()
    _refuse(frame, ~ok, name, "treated", "must be true or false")
    return text.isin(["true", "1"]).to_numpy()


def _names(values: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct names (as text) and each row's position among them (hashing, not
    sorting, the rows)."""
    codes, uniques = pd.factorize(values.astype(str) if values.dtype.kind != "O" else values)
    names = np.asarray([str(u) for u in uniques])
    order = np.argsort(names)
    rank = np.empty_like(order)
    rank[order] = np.arange(order.size)
    return names[order], rank[codes]


def _codes(index: pd.Index, values) -> np.ndarray:
    """Positions of ``values`` in ``index`` (-1 when absent); whole-number floats match
    integer ids, since pandas stores an integer column with gaps as floats."""
    values = pd.Series(values).to_numpy()
    if index.dtype.kind in "iu" and values.dtype.kind == "f":
        whole = np.isfinite(values) & (values == np.round(values))
        codes = np.full(values.size, -1, dtype=np.int64)
        codes[whole] = index.get_indexer(values[whole].astype(np.int64))
        return codes
    return index.get_indexer(values).astype(np.int64)


def _refuse(frame: pd.DataFrame, bad: np.ndarray, name: str, column: str, rule: str) -> None:
    """Raise naming the table, column, rule, count of rows and one example row."""
    bad = np.asarray(bad, dtype=bool)
    if not bad.any():
        return
    k = int(np.argmax(bad))
    row = frame.iloc[k].to_dict()
    raise ValueError(
        f"{name}: column {column!r} {rule}: {int(bad.sum()):,} of {len(frame):,} rows break "
        f"this, e.g. row {k}: {row}"
    )
