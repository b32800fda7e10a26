"""Arrival rate and customer shares (Poisson, multinomial), and whether arrivals
look stationary over the window."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from marketsim.calibration.tables import CheckedLog

DAY = 24
"""Hours in a day: with a window of at least two days, arrivals are binned by hour of
day (times are then read as hours); shorter windows use 24 equal bins."""


@dataclass(frozen=True, eq=False)
class ArrivalFit:
    """Arrival rate and customer shares with their standard errors.

    Attributes
    ----------
    rate, rate_se : float
        Sessions per unit time ``n / T`` and ``sqrt(n) / T`` (Poisson).
    shares, shares_se : ndarray, shape (n_customer_types,)
        ``n_i / n`` and ``sqrt(share (1 - share) / n)`` (multinomial).
    counts : ndarray of int, shape (n_customer_types,)
    """

    rate: float
    rate_se: float
    shares: np.ndarray
    shares_se: np.ndarray
    counts: np.ndarray


def fit_arrivals(log: CheckedLog) -> ArrivalFit:
    """Maximum likelihood of the arrival rate and the customer shares."""
    counts = np.bincount(log.session_customer, minlength=len(log.customer_types))
    n = counts.sum()
    shares = counts / n
    return ArrivalFit(rate=n / log.duration, rate_se=np.sqrt(n) / log.duration,
                      shares=shares, shares_se=np.sqrt(shares * (1 - shares) / n),
                      counts=counts)


@dataclass(frozen=True, eq=False)
class StationarityTest:
    """Arrivals per bin against a constant rate.

    Attributes
    ----------
    by_hour : bool
        Bins are hours of the day (times read as hours); else equal parts of the window.
    rate : ndarray, shape (n_bins,)
        Sessions per unit time in each bin.
    exposure : ndarray, shape (n_bins,)
        Time the window spends in each bin.
    chi2, dof, pvalue : float
        Pearson dispersion statistic ``sum (O - E)**2 / E`` of the counts against a
        constant rate, its degrees of freedom and p-value (chi-square).
    """

    by_hour: bool
    rate: np.ndarray
    exposure: np.ndarray
    chi2: float
    dof: int
    pvalue: float

    @property
    def flagged(self) -> bool:
        """The constant rate is rejected at the 5% level."""
        return bool(self.pvalue < 0.05)


def stationarity_test(log: CheckedLog) -> StationarityTest:
    """Dispersion test of the session counts per hour of day (or per 1/24 of a short window)."""
    low, high = log.window
    by_hour = log.duration >= 2 * DAY
    if by_hour:
        edges = np.unique(np.r_[low, np.arange(np.ceil(low), high), high])
        slot = np.floor(edges[:-1]).astype(np.int64) % DAY
        exposure = np.bincount(slot, np.diff(edges), minlength=DAY)
        counts = np.bincount(np.floor(log.session_time).astype(np.int64) % DAY, minlength=DAY)
    else:
        exposure = np.full(DAY, log.duration / DAY)
        part = np.minimum(((log.session_time - low) / log.duration * DAY).astype(np.int64),
                          DAY - 1)
        counts = np.bincount(part, minlength=DAY)
    used = exposure > 0
    expected = counts.sum() * exposure[used] / exposure.sum()
    chi2 = float(np.sum((counts[used] - expected) ** 2 / expected))
    dof = int(used.sum() - 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        rate = np.where(used, counts / exposure, np.nan)
    return StationarityTest(by_hour, rate, exposure, chi2, dof, float(stats.chi2.sf(chi2, dof)))
