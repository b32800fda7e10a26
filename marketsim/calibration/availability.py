"""Availability at every session, rebuilt from the stays (vectorised)."""

from __future__ import annotations

import numpy as np


def available_at(
    times: np.ndarray,
    stay_group: np.ndarray,
    stay_start: np.ndarray,
    stay_end: np.ndarray,
    group_size: np.ndarray,
) -> np.ndarray:
    """Available listings of each group just before each time.

    A listing is busy at ``t`` when one of its stays has ``start < t < end``: a stay
    that starts exactly at a session's time is that session's booking, so the
    session still saw the listing available. Per group, the busy count is the number
    of stays started before ``t`` minus the number ended by ``t``, read off sorted
    starts and ends with :func:`numpy.searchsorted` (no loop over sessions).

    Parameters
    ----------
    times : ndarray, shape (n_times,)
    stay_group : ndarray of int, shape (n_stays,)
        Group (listing type, or listing type x treatment status) of each stay's listing.
    stay_start, stay_end : ndarray, shape (n_stays,)
        ``stay_end`` is ``inf`` for a stay still running when the log ends.
    group_size : ndarray of int, shape (n_groups,)
        Listings in each group.

    Returns
    -------
    ndarray of int64, shape (n_times, n_groups)
    """
    n_groups = group_size.size
    result = np.empty((times.size, n_groups), dtype=np.int64)
    lasting = stay_end > stay_start  # a stay of length zero never makes a listing busy
    for g in range(n_groups):
        mine = lasting & (stay_group == g)
        starts = np.sort(stay_start[mine])
        ends = np.sort(stay_end[mine])
        busy = np.searchsorted(starts, times, "left") - np.searchsorted(ends, times, "right")
        result[:, g] = group_size[g] - busy
    return result
