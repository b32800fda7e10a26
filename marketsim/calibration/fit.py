"""``calibrate``: platform logs in, a :class:`Calibration` out."""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.calibration.arrivals import fit_arrivals
from marketsim.calibration.availability import available_at
from marketsim.calibration.busy import complete_durations, fit_busy_times
from marketsim.calibration.checks import fit_checks
from marketsim.calibration.choice import (
    considered_counts,
    fit_consideration,
    fit_logit,
    group_choices,
)
from marketsim.calibration.choice_without_impressions import fit_logit_given_consideration
from marketsim.calibration.result import Calibration, parameter_table
from marketsim.calibration.tables import CheckedLog, check_log
from marketsim.model import Market
from marketsim.randomness import SeedLike

NOT_IDENTIFIED = (
    "The log has no impressions, so consideration and utility are not separately "
    "identified (more consideration with lower utility fits the same bookings): "
    "consideration was taken as given and only utilities were estimated. Every answer "
    "of the simulator depends on that choice; try a few plausible values."
)


def calibrate(
    sessions: pd.DataFrame,
    stays: pd.DataFrame,
    listings: pd.DataFrame,
    impressions: pd.DataFrame | None = None,
    *,
    consideration: ArrayLike | None = None,
    window: tuple[float, float] | None = None,
    seed: SeedLike = 0,
) -> Calibration:
    """Estimate a :class:`~marketsim.Market` from platform logs, with standard errors.

    Parameters
    ----------
    sessions, stays, listings : pandas.DataFrame
        The log tables (see the README's log format).
    impressions : pandas.DataFrame, optional
        The available listings each customer considered. Without it consideration
        is not identified and must be given.
    consideration : float or array_like, shape (n_customer_types, n_listing_types)
        Required when there are no impressions, refused when there are. Types are
        in sorted order of their names.
    window : (float, float), optional
        Observation window (default: first to last session time).
    seed : int, SeedSequence, Generator or None
        Seed of the simulation in the booking-rate check (default 0: the checks
        repeat exactly).

    Returns
    -------
    Calibration

    Notes
    -----
    Arrival rate ``n / T`` (Poisson) and shares ``n_i / n`` (multinomial); mean busy
    time per listing type by exponential maximum likelihood, stays cut by the window
    censored; availability at each session rebuilt from the stays; consideration
    ``alpha_ij`` = considered / available; utilities by maximum likelihood of the
    conditional logit with outside weight ``N e^{u_0i}``, standard errors from the
    observed information. Only ``u_ij - u_0i`` is identified: outside utilities are 0.

    Examples
    --------
    >>> import marketsim as ms
    >>> log = ms.simulate_log(ms.scenarios.rehearsal_rooms(), horizon=200.0, seed=1)
    >>> fit = ms.calibrate(log.sessions, log.stays, log.listings, log.impressions)
    >>> list(fit.table.columns)[:5]
    ['parameter', 'customer_type', 'listing_type', 'estimate', 'se']
    """
    log = check_log(sessions, stays, listings, impressions, window=window)
    return calibrate_checked(log, consideration, seed=seed)


def calibrate_checked(log: CheckedLog, consideration: ArrayLike | None = None, *,
                      seed: SeedLike = 0) -> Calibration:
    """:func:`calibrate` on a log already checked by :func:`check_log`."""
    n_customer, n_types = len(log.customer_types), len(log.listing_types)
    counts = log.listing_counts
    available = available_at(log.session_time, log.listing_type[log.stay_listing],
                             log.stay_start, log.stay_end, counts)
    booked = log.session_booked >= 0
    chosen = np.where(booked, log.listing_type[np.maximum(log.session_booked, 0)], -1)
    notes = [f"{count:,} {what} set aside" for what, count in log.set_aside.items() if count]
    if log.has_impressions:
        if consideration is not None:
            raise ValueError("consideration must be None when impressions are given (it is "
                             "estimated from them), got a value")
        considered = considered_counts(log)
        consideration_fit = fit_consideration(log, available, considered)
        alpha = consideration_fit.value
        groups = group_choices(log.session_customer, considered, chosen)
        utility = fit_logit(groups, int(counts.sum()), log.customer_types, log.listing_types)
    else:
        if consideration is None:
            raise ValueError(
                "consideration must be given (a number or a (n_customer_types, "
                f"n_listing_types) = {(n_customer, n_types)} array for customer types "
                f"{list(log.customer_types)} and listing types {list(log.listing_types)}) "
                "when there are no impressions: " + NOT_IDENTIFIED.split(":")[0])
        alpha = check.array("consideration", consideration, (n_customer, n_types),
                            "(n_customer_types, n_listing_types)", low=0.0, high=1.0,
                            broadcast=True)
        consideration_fit = None
        groups = group_choices(log.session_customer, available, chosen)
        utility = fit_logit_given_consideration(groups, alpha, int(counts.sum()),
                                                log.customer_types, log.listing_types)
        notes.insert(0, NOT_IDENTIFIED)
    arrivals = fit_arrivals(log)
    busy = fit_busy_times(log)
    stays = {name: complete_durations(log, j, busy.mean[j])
             for j, name in enumerate(log.listing_types)}
    market = Market(
        listing_counts=counts, mean_busy_time=busy.mean, arrival_rate=arrivals.rate,
        customer_shares=arrivals.shares, consideration=alpha, utility=utility.value,
        outside_utility=0.0, listing_types=log.listing_types,
        customer_types=log.customer_types, price=log.price,
    )
    notes.append("Busy times are modelled as exponential and arrivals as a constant-rate "
                 "Poisson process; see the fit checks for how well that holds.")
    return Calibration(
        market=market,
        table=parameter_table(market, arrivals, busy, consideration_fit, utility),
        checks=fit_checks(log, market, stays, seed),
        arrivals=arrivals, busy=busy, consideration=consideration_fit, utility=utility,
        notes=tuple(notes), complete_stays=stays,
    )
