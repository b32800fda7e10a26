"""Batch means: a standard error from one run, and how many batches to cut it into.

The measurement window is cut into ``k`` consecutive batches of equal length; the
estimator is applied to each batch's counts, and the standard error of the whole
run's estimate is the standard deviation of the ``k`` batch values over
``sqrt(k)``, with Student's t on ``k - 1`` degrees of freedom for the interval
(the method of batch means: A. M. Law and W. D. Kelton, "Simulation Modeling and
Analysis", McGraw-Hill, chapter on output analysis for steady-state parameters).
Unlike the naive standard error, it lets counts in the same batch be correlated,
as they are when the market carries availability from one booking to the next; it
assumes batch values far enough apart in time to be nearly independent, which holds
when batches are several mean busy times long (a listing's state is forgotten
after a few busy times). Shorter batches bias it: in the markets of the tests,
where bookings in neighbouring stretches of time offset each other (a booking
leaves fewer listings free for the next customers), batches of 2 to 4 mean busy
times gave standard errors 5-12% too large, and 7 or more within 2-4% of the
replication standard deviation; a metric whose swings outlast a batch (a slow
demand cycle) makes it too small instead.

Rule for the number of batches (:func:`default_batches`): :data:`DEFAULT_BATCHES`
(Law and Kelton, following Schmeiser's 1982 Operations Research study of batch
sizes, advise 10 to 30 batches; recalled from memory), fewer when batches would be
shorter than :data:`BUSY_TIMES_PER_BATCH` mean busy times, never fewer than
:data:`MIN_BATCHES`. :func:`check_batches` refuses fewer than 2 and warns when
batches are shorter than one mean busy time.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from marketsim import _validation as check
from marketsim.model.market import Market

DEFAULT_BATCHES = 20
"""Batches of a long enough window (Law and Kelton: 10 to 30)."""
BUSY_TIMES_PER_BATCH = 5.0
"""Shortest batch the default rule makes, in mean busy times."""
MIN_BATCHES = 2
"""Fewest batches with a standard deviation (one degree of freedom)."""


def mean_busy_time(market: Market) -> float:
    """The market's mean busy time, averaged over listings: ``sum n_j tau_j / sum n_j``."""
    return float(np.sum(market.listing_counts * market.mean_busy_time) / market.n_listings)


def default_batches(market: Market, horizon: float) -> int:
    """Number of batches for a window of length ``horizon`` (see the module notes).

    ``min(DEFAULT_BATCHES, floor(horizon / (BUSY_TIMES_PER_BATCH * mean busy
    time)))``, at least :data:`MIN_BATCHES`.

    Examples
    --------
    >>> import marketsim as ms
    >>> default_batches(ms.scenarios.rehearsal_rooms(), 336.0)   # mean busy time 2.25 h
    20
    >>> default_batches(ms.scenarios.rehearsal_rooms(), 100.0)
    8
    """
    longest = math.floor(horizon / (BUSY_TIMES_PER_BATCH * mean_busy_time(market)))
    return max(MIN_BATCHES, min(DEFAULT_BATCHES, longest))


def check_batches(batches: int | None, market: Market, horizon: float) -> int:
    """``batches`` checked (``None``: :func:`default_batches`), with a warning when a
    batch is shorter than one mean busy time.

    Raises
    ------
    ValueError
        If ``batches`` is not a whole number >= 2.
    """
    if batches is None:
        batches = default_batches(market, horizon)
    else:
        batches = check.whole_number("batches", batches, low=MIN_BATCHES)
    length, busy = horizon / batches, mean_busy_time(market)
    if length < busy:
        most = math.floor(horizon / busy)
        advice = (f"use at most {most} batches or a longer horizon" if most >= MIN_BATCHES
                  else f"use a horizon of at least {MIN_BATCHES * busy:.3g}")
        warnings.warn(
            f"batches={batches} cuts the window of {horizon:g} into batches of {length:.3g}, "
            f"shorter than one mean busy time ({busy:.3g}): consecutive batch values are "
            "correlated, so the batch-means standard error is biased and its intervals do "
            "not cover as claimed (too small when the metric's swings outlast a batch; "
            "too large when they offset each other from one batch to the next, as bookings "
            f"do while listings are busy); {advice}",
            RuntimeWarning, stacklevel=3)
    return batches


def batch_standard_error(values: np.ndarray) -> float:
    """Standard deviation of the batch values over ``sqrt(k)``; NaN below 2 batches."""
    k = values.size
    return float(np.std(values, ddof=1) / math.sqrt(k)) if k >= MIN_BATCHES else math.nan


def t_quantile(level: float, batches: int) -> float:
    """Two-sided Student t quantile at ``level`` on ``batches - 1`` degrees of freedom
    (``scipy.stats.t``); NaN below 2 batches."""
    from scipy.stats import t

    return float(t.ppf(0.5 + level / 2.0, batches - 1)) if batches >= MIN_BATCHES else math.nan


__all__ = ["DEFAULT_BATCHES", "BUSY_TIMES_PER_BATCH", "MIN_BATCHES", "mean_busy_time",
           "default_batches", "check_batches", "batch_standard_error", "t_quantile"]
