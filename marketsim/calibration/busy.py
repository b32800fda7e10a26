"""Mean busy time per listing type: exponential maximum likelihood with censoring,
and whether the busy times look exponential at all."""

from __future__ import annotations

import inspect
from dataclasses import dataclass

import numpy as np
from scipy import stats

from marketsim.calibration.tables import CheckedLog

TEST_MARGIN = 10.0
"""Stays used by the exponential check must start at least this many mean busy times
before the window's end, so that (if busy times are exponential) at most e^-10 of
them are still running and set aside."""


@dataclass(frozen=True, eq=False)
class BusyFit:
    """Exponential fit of the busy times, per listing type (arrays of shape (J,)).

    Attributes
    ----------
    mean, se : ndarray
        Maximum-likelihood mean busy time and its standard error ``mean / sqrt(ended)``.
    ended : ndarray of int
        Stays that ended inside the window (the events).
    exposure : ndarray
        Busy time observed inside the window (ended and censored stays).
    censored : ndarray of int
        Stays still running at the window's end.
    """

    mean: np.ndarray
    se: np.ndarray
    ended: np.ndarray
    exposure: np.ndarray
    censored: np.ndarray


def fit_busy_times(log: CheckedLog) -> BusyFit:
    """Exponential maximum likelihood of the mean busy time per listing type.

    Each stay contributes the part of it inside the window. A stay still running at
    the window's end is censored there (it counts as exposure, not as an event); a
    stay that began before the window's start counts from the start, which is exact
    for exponential busy times (memoryless). The estimate is exposure / events and
    its standard error comes from the observed information, ``mean / sqrt(events)``.

    Raises
    ------
    ValueError
        If a listing type has no stay ending inside the window.
    """
    low, high = log.window
    n_types = len(log.listing_types)
    group = log.listing_type[log.stay_listing]
    inside = np.clip(np.minimum(log.stay_end, high) - np.maximum(log.stay_start, low), 0, None)
    ended = (log.stay_end > low) & (log.stay_end <= high) & (log.stay_start < high)
    running = (log.stay_end > high) & (log.stay_start < high)
    exposure = np.bincount(group, inside, minlength=n_types)
    events = np.bincount(group, ended, minlength=n_types).astype(np.int64)
    if (events == 0).any():
        j = int(np.argmin(events))
        raise ValueError(
            f"stays: no stay of listing type {log.listing_types[j]!r} ends inside the window "
            f"{log.window}, so its mean busy time cannot be estimated"
        )
    mean = exposure / events
    return BusyFit(mean=mean, se=mean / np.sqrt(events), ended=events, exposure=exposure,
                   censored=np.bincount(group, running, minlength=n_types).astype(np.int64))


def complete_durations(log: CheckedLog, listing_type: int, mean: float) -> np.ndarray:
    """Busy times of the stays of one type that start inside the window at least
    ``TEST_MARGIN`` mean busy times before its end and end inside it."""
    low, high = log.window
    mine = log.listing_type[log.stay_listing] == listing_type
    start, end = log.stay_start[mine], log.stay_end[mine]
    early = (start >= low) & (start <= high - TEST_MARGIN * mean) & (end <= high)
    return end[early] - start[early]


@dataclass(frozen=True)
class ExponentialTest:
    """How far busy times are from exponential.

    Attributes
    ----------
    count : int
        Complete busy times tested.
    cv : float
        Coefficient of variation (1 for exponential times).
    cv_z : float
        ``sqrt(count) * (cv**2 - 1) / 2``: approximately standard normal for exponential
        times (delta method: the central moments of an exponential of mean 1 are
        1, 2, 9, which give the asymptotic variance 4 of ``sqrt(n) * (cv**2 - 1)``).
    anderson : float
        Anderson-Darling statistic against the exponential with the mean estimated.
    anderson_pvalue : float
        Its p-value, interpolated in Stephens' tables by scipy.stats.anderson (between
        0.01 and 0.15; ``nan`` with scipy older than 1.17, which gives critical values).
    flagged : bool
        The Anderson-Darling test rejects exponential busy times at the 5% level.
    """

    count: int
    cv: float
    cv_z: float
    anderson: float
    anderson_pvalue: float
    flagged: bool


def exponential_test(durations: np.ndarray) -> ExponentialTest:
    """Test whether ``durations`` (complete busy times, > 0) look exponential."""
    n = int(durations.size)
    if n < 5:
        return ExponentialTest(n, np.nan, np.nan, np.nan, np.nan, False)
    cv = float(np.std(durations, ddof=1) / np.mean(durations))
    keywords = ({"method": "interpolate"}
                if "method" in inspect.signature(stats.anderson).parameters else {})
    result = stats.anderson(durations, "expon", **keywords)
    if hasattr(result, "pvalue"):
        pvalue = float(result.pvalue)
        flagged = pvalue < 0.05
    else:  # scipy < 1.17: critical values at 15, 10, 5, 2.5, 1 %
        pvalue = float("nan")
        flagged = bool(result.statistic > result.critical_values[2])
    return ExponentialTest(n, cv, float(np.sqrt(n) * (cv**2 - 1) / 2),
                           float(result.statistic), pvalue, flagged)
