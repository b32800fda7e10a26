"""``analyze``: the estimates of an experiment that was actually run, from its logs.

The sessions and listings carry a ``treated`` column. The group rates ``Q_xy``
(bookings per unit time by customers of status ``x`` with listings of status ``y``)
are counted from the logs per listing type, and every built-in estimator that fits
the realised design is applied with its naive standard error, exactly as the study
applies them to a simulated ledger, and with its batch-means standard error: the
window is cut into consecutive batches by session time
(:mod:`marketsim.estimators.batches`). Given a :class:`Calibration`, the large-market
model adds each estimator's expected relative bias at the calibrated market, with a
band over plausible markets (:meth:`Calibration.draw`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.calibration.arrivals import fit_arrivals
from marketsim.calibration.busy import fit_busy_times
from marketsim.calibration.result import Calibration
from marketsim.calibration.tables import check_log
from marketsim.designs import CellSplit, TwoSided
from marketsim.estimators import Estimator
from marketsim.estimators.batches import check_batches
from marketsim.estimators.defaults import fitting_estimators
from marketsim.estimators.totals import GroupTotals
from marketsim.meanfield import expected_estimates
from marketsim.model import Market, Treatment
from marketsim.randomness import SeedLike

STATUS = ("control", "treated")
BIAS_TREATMENT = Treatment(utility_shift=0.1)
"""The feature the expected biases are computed for: a small utility shift, where the
relative bias hardly depends on the effect's size (linear regime)."""


@dataclass(frozen=True, eq=False)
class ExperimentAnalysis:
    """Estimates of a real experiment from its logs.

    Attributes
    ----------
    estimates : pandas.DataFrame
        One row per estimator that fits the realised design: ``estimator, estimate,
        standard_error, low, high`` (naive 95% interval), ``batch_se, batch_low,
        batch_high`` (batch-means standard error and its 95% t interval; the
        batches are in ``attrs["batches"]``) and, with a calibration,
        ``expected_relative_bias`` with ``bias_low, bias_high`` (2.5% and 97.5% over
        plausible markets) and ``corrected_estimate = estimate / (1 + relative bias)``.
    group_rates : pandas.DataFrame
        ``Q_xy`` per listing type and in total (bookings per unit time).
    customer_fraction : float
        Share of sessions treated (or the design's, if given).
    listing_fraction : ndarray, shape (n_listing_types,)
        Share of each listing type's listings treated.
    balance : pandas.DataFrame
        Sessions, listings, bookings and booking rate per arm, and the market balance
        estimated from the logs.
    notes : tuple of str
    """

    estimates: pd.DataFrame
    group_rates: pd.DataFrame
    customer_fraction: float
    listing_fraction: np.ndarray
    balance: pd.DataFrame
    notes: tuple[str, ...]

    def to_frame(self) -> pd.DataFrame:
        """The estimates table."""
        return self.estimates.copy()


def analyze(
    sessions: pd.DataFrame,
    stays: pd.DataFrame,
    listings: pd.DataFrame,
    calibration: Calibration | None = None,
    *,
    customer_fraction: float | None = None,
    window: tuple[float, float] | None = None,
    batches: int | None = None,
    draws: int = 30,
    seed: SeedLike = 0,
) -> ExperimentAnalysis:
    """Analyse an experiment that was run, from its logs.

    Parameters
    ----------
    sessions, stays, listings : pandas.DataFrame
        The log tables, with a boolean ``treated`` column in ``sessions`` and
        ``listings``.
    calibration : Calibration, optional
        Adds each estimator's expected relative bias at the calibrated market
        (large-market model, for a small utility shift) and its band over ``draws``
        plausible markets.
    customer_fraction : float, optional
        The design's probability of treating a customer; default the realised share
        of treated sessions.
    window : (float, float), optional
        As for :func:`calibrate`.
    batches : int, optional
        Consecutive batches of the window for the batch-means standard error,
        >= 2; default 20, fewer when batches would be shorter than 5 mean busy
        times (:func:`marketsim.estimators.batches.default_batches`, with the
        busy times of the calibration or fitted from the logs); a warning when a
        batch is shorter than one mean busy time.
    draws : int
        Plausible markets for the bias band (default 30).
    seed : int, SeedSequence, Generator or None
        Seed of the draws.

    Returns
    -------
    ExperimentAnalysis
    """
    for name, frame in (("sessions", sessions), ("listings", listings)):
        if isinstance(frame, pd.DataFrame) and "treated" not in frame.columns:
            raise ValueError(f"{name}: column 'treated' is missing; analyze needs the "
                             f"treatment status of every session and listing, got columns "
                             f"{[str(c) for c in frame.columns]}")
    log = check_log(sessions, stays, listings, window=window)
    n_types = len(log.listing_types)
    booked = log.session_booked >= 0
    kind = log.listing_type[log.session_booked[booked]]
    x = log.session_treated[booked].astype(int)
    y = log.listing_treated[log.session_booked[booked]].astype(int)
    totals = np.zeros((n_types, 2, 2))
    np.add.at(totals, (kind, x, y), 1.0)
    arrivals = np.bincount(log.session_treated.astype(int), minlength=2).astype(float)
    market = _log_market(log) if calibration is None else calibration.market
    k = check_batches(batches, market, log.duration)
    when = (log.session_time[booked] - log.window[0]) / log.duration * k
    batch = np.minimum(when.astype(np.int64), k - 1)
    batch_totals = np.zeros((k, n_types, 2, 2))
    np.add.at(batch_totals, (batch, kind, x, y), 1.0)
    groups = GroupTotals("bookings", totals, totals.copy(), arrivals, log.duration,
                         batch_totals, np.full(k, log.duration / k))
    realised = float(log.session_treated.mean())
    a_c = realised if customer_fraction is None else check.number(
        "customer_fraction", customer_fraction, low=0.0, high=1.0)
    treated_listings = np.bincount(log.listing_type, log.listing_treated, minlength=n_types)
    a_l = treated_listings / log.listing_counts
    split = CellSplit.from_fractions(market, customers=a_c, listings=a_l)
    estimators = fitting_estimators(split, market)
    if not estimators:
        raise ValueError(f"no built-in estimator fits this experiment (treated share of "
                         f"sessions {realised:.3g}, of listings {a_l.round(3).tolist()})")
    rows = []
    for estimator in estimators:
        estimate = groups.combine(estimator.stratum_weights(split, market))
        low, high = estimate.interval()
        batch_low, batch_high = estimate.interval(kind="batch means")
        rows.append({"estimator": estimator.name, "estimate": estimate.value,
                     "standard_error": estimate.standard_error, "low": low, "high": high,
                     "batch_se": estimate.batch_se, "batch_low": batch_low,
                     "batch_high": batch_high})
    table = pd.DataFrame(rows)
    notes = ["`standard_error` is the naive one (independent bookings): the market's "
             "memory (a booked listing is busy for a while) makes it wrong, in either "
             f"direction. `batch_se` comes from {k} consecutive batches of the window "
             "and allows for that memory; a study of the calibrated market "
             "(`batch_coverage` against `coverage`) shows which to trust. Interference "
             "between treated and control biases the estimates themselves, by amounts "
             "the calibration's model can show."]
    if calibration is not None:
        table = _with_expected_bias(table, calibration, estimators, a_c, a_l, draws, seed)
        notes.append("Expected biases are those of the large-market model at the calibrated "
                     "market for a small utility shift; they assume the model holds (see "
                     "the calibration's fit checks).")
    table.attrs["batches"] = k
    rates = totals / log.duration
    group_rates = pd.DataFrame(
        [{"listing_type": name, "customer": STATUS[cx], "listing": STATUS[ly],
          "rate": rates[j, cx, ly]}
         for j, name in enumerate(log.listing_types) for cx in (0, 1) for ly in (0, 1)])
    balance = _balance_table(log, totals, arrivals, market)
    return ExperimentAnalysis(table, group_rates, a_c, a_l, balance, tuple(notes))


def _log_market(log) -> Market:
    """A market with the log's listings, busy times and arrivals; the estimators read
    only its balance (consideration and utilities are placeholders)."""
    busy = fit_busy_times(log)
    arrivals = fit_arrivals(log)
    return Market(listing_counts=log.listing_counts, mean_busy_time=busy.mean,
                  arrival_rate=arrivals.rate, customer_shares=arrivals.shares,
                  consideration=1.0, utility=0.0, outside_utility=0.0,
                  listing_types=log.listing_types, customer_types=log.customer_types)


def _with_expected_bias(table: pd.DataFrame, calibration: Calibration,
                        estimators: tuple[Estimator, ...], a_c: float, a_l: np.ndarray,
                        draws: int, seed: SeedLike) -> pd.DataFrame:
    design = TwoSided(a_c, float(np.mean(a_l)))

    def relative_bias(market: Market) -> np.ndarray:
        frame = expected_estimates(market, BIAS_TREATMENT, design, estimators)
        return frame["relative_bias"].to_numpy()

    at_estimate = relative_bias(calibration.market)
    spread = np.array([relative_bias(m) for m in calibration.draw(draws, seed)])
    table = table.copy()
    table["expected_relative_bias"] = at_estimate
    table["bias_low"] = np.quantile(spread, 0.025, axis=0)
    table["bias_high"] = np.quantile(spread, 0.975, axis=0)
    table["corrected_estimate"] = table.estimate / (1 + at_estimate)
    return table


def _balance_table(log, totals, arrivals, market) -> pd.DataFrame:
    rows = []
    for status, flag in (("control", False), ("treated", True)):
        sessions = arrivals[int(flag)]
        rows.append({"arm": f"{status} customers", "count": int(sessions),
                     "bookings": float(totals[:, int(flag)].sum()),
                     "booking_rate": float(totals[:, int(flag)].sum() / log.duration),
                     "conversion": float(totals[:, int(flag)].sum() / max(sessions, 1))})
        listings = int((log.listing_treated == flag).sum())
        rows.append({"arm": f"{status} listings", "count": listings,
                     "bookings": float(totals[:, :, int(flag)].sum()),
                     "booking_rate": float(totals[:, :, int(flag)].sum() / log.duration),
                     "conversion": np.nan})
    frame = pd.DataFrame(rows)
    frame.attrs["market_balance"] = market.balance
    return frame
