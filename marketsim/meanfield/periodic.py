"""The large-market model under demand that follows the clock: the periodic ODE.

With a demand profile the arrival rate per listing is ``lambda_c * m(t)``, with
``m`` the profile's piecewise-constant multiplier, and the flow of
availability (:mod:`marketsim.meanfield`) no longer settles to a steady state:
it settles to a *periodic* path, the same every period. This module integrates
the ODE piece by piece (within a piece of the profile the flow is the usual one
with scaled arrivals), together with the bookings it makes, and finds the
periodic path by following the period map until it stops moving (the flow
contracts at rate at least ``min tau``, so the gap shrinks by ``exp(-min tau *
period)`` or more each period).

The global treatment effect under a profile is the difference of the metric
*averaged over whole periods* (:func:`marketsim.meanfield.steady.long_run_ledger`
of the two global worlds), which is what a simulation whose window covers whole periods measures.
"""

from __future__ import annotations

import itertools
import math
import warnings
from dataclasses import dataclass

import numpy as np

from marketsim.designs import Design
from marketsim.engine import Ledger, MarketCells, build_cells
from marketsim.meanfield.solver import FlowModel
from marketsim.model import DemandProfile, Market, Treatment

PERIOD_TOLERANCE = 1e-10
"""The periodic path is found when one more period moves the state at the start of the
period by less than this share of the listings."""
MAX_PERIODS = 10_000
"""Most periods followed to reach the periodic path."""


def integrate_piece(model: FlowModel, s0: np.ndarray, duration: float, multiplier: float,
                    count_from: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Follow the flow for ``duration`` with arrivals scaled by ``multiplier``.

    Parameters
    ----------
    model : FlowModel
    s0 : ndarray, shape (n_listing_cells,)
        Available share of each listing cell at the start.
    duration : float
        > 0.
    multiplier : float
        Arrival-rate multiplier of the piece, >= 0.
    count_from : float
        Count the bookings from this time of the piece on (0: all of them).

    Returns
    -------
    s1 : ndarray, shape (n_listing_cells,)
        Available share at the end.
    bookings : ndarray, shape (n_customer_cells, n_listing_cells)
        Bookings from ``count_from`` to the end, in listing units (whole market).
    """
    from scipy.integrate import solve_ivp

    n_c, n_l = model.a.shape
    lam = model.lam * multiplier

    def rhs(_t: float, y: np.ndarray) -> np.ndarray:
        s = y[:n_l]
        book = model.bookings(s, multiplier)
        return np.concatenate([model.tau * (model.rho - s) - book.sum(axis=0), book.ravel()])

    def jacobian(_t: float, y: np.ndarray) -> np.ndarray:
        s = y[:n_l]
        d = model.w0 + model.a @ s
        safe = np.where(d > 0.0, d, 1.0)
        e = (lam / safe)[:, None] * model.a                       # (C, L)
        # d book[c, l] / d s[k] = e[c, l] (l == k) - e[c, l] s[l] a[c, k] / D[c]
        dbook = (np.eye(n_l)[None, :, :] * e[:, :, None]
                 - (e * s[None, :])[:, :, None] * (model.a / safe[:, None])[:, None, :])
        top = -np.diag(model.tau) - dbook.sum(axis=0)
        full = np.zeros((n_l + n_c * n_l, n_l + n_c * n_l))
        full[:n_l, :n_l] = top
        full[n_l:, :n_l] = dbook.reshape(n_c * n_l, n_l)
        return full

    y0 = np.concatenate([s0, np.zeros(n_c * n_l)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with np.errstate(all="ignore"):
            sol = solve_ivp(rhs, (0.0, duration), y0, method="LSODA", jac=jacobian,
                            t_eval=[min(max(count_from, 0.0), duration), duration],
                            rtol=1e-9, atol=1e-13 * max(float(model.rho.max()), 1e-300))
    if not sol.success or not np.all(np.isfinite(sol.y[:, -1])):
        raise RuntimeError(f"the large-market ODE solver failed ({sol.message}); please "
                           "report this market")
    end = sol.y[:, -1]
    made = end[n_l:] - sol.y[n_l:, 0]
    return (np.clip(end[:n_l], 0.0, model.rho),
            np.maximum(made, 0.0).reshape(n_c, n_l) * model.n)


def flow_through(model: FlowModel, s0: np.ndarray, start: float, end: float,
                 profile: DemandProfile | None, count_from: float | None = None
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Follow the flow from time ``start`` to ``end`` under ``profile`` (pieces cut at
    its breakpoints; time 0 is the start of a period).

    Parameters
    ----------
    model : FlowModel
    s0 : ndarray, shape (n_listing_cells,)
    start, end : float
    profile : DemandProfile or None
    count_from : float, optional
        Count bookings and arrivals from this time on (default ``start``).

    Returns
    -------
    s1 : ndarray, shape (n_listing_cells,)
    bookings : ndarray, shape (n_customer_cells, n_listing_cells)
        Bookings over ``[count_from, end)`` in listing units.
    arrivals : ndarray, shape (n_customer_cells,)
        Expected arrivals over ``[count_from, end)``.
    """
    counted = start if count_from is None else max(start, min(count_from, end))
    bookings = np.zeros(model.a.shape)
    s = np.asarray(s0, dtype=float)
    if profile is None or profile.is_flat:
        if end > start:
            s, bookings = integrate_piece(model, s, end - start, 1.0, counted - start)
        return s, bookings, model.lam * model.n * max(end - counted, 0.0)
    t = start
    while end - t > 1e-12 * max(1.0, abs(end)):
        cycle = math.floor(t / profile.period + 1e-12)
        phase = t - cycle * profile.period
        piece = max(0, int(np.searchsorted(profile.starts, phase + 1e-12, side="right")) - 1)
        stop = min(end, cycle * profile.period + profile.ends[piece])
        if stop - t > 0.0:
            s, made = integrate_piece(model, s, stop - t, float(profile.multipliers[piece]),
                                      counted - t)
            bookings += made
        t = stop
    arrivals = model.lam * model.n * (profile.cumulative(end) - profile.cumulative(counted))
    return s, bookings, arrivals


@dataclass(frozen=True, eq=False)
class PeriodicPath:
    """The large-market periodic path under a demand profile, in listing units.

    Attributes
    ----------
    cells : MarketCells
    times : ndarray, shape (n_times,)
        Times within one period (0 = start of the period).
    available : ndarray, shape (n_times, n_listing_cells)
        Expected available listings per listing cell at each time.
    booking_rate : ndarray, shape (n_times,)
        Total bookings per unit time at each time (just after it, where the
        profile jumps).
    mean_booking_rates : ndarray, shape (n_customer_cells, n_listing_cells)
        Bookings per unit time averaged over the period.
    mean_arrival_rates : ndarray, shape (n_customer_cells,)
        Arrivals per unit time averaged over the period.
    period : float
    periods : int
        Periods followed before the path repeated (within :data:`PERIOD_TOLERANCE`).
    """

    cells: MarketCells
    times: np.ndarray
    available: np.ndarray
    booking_rate: np.ndarray
    mean_booking_rates: np.ndarray
    mean_arrival_rates: np.ndarray
    period: float
    periods: int

    def ledger(self) -> Ledger:
        """The expected ledger of one whole period (every estimator applies to it)."""
        return _rates_ledger(self.cells, self.mean_booking_rates, self.mean_arrival_rates,
                             self.period, self.available.mean(axis=0))


def periodic_path(market: Market, treatment: Treatment | None = None,
                  design: Design | None = None, *, points: int = 97) -> PeriodicPath:
    """The large-market periodic path of a market with a demand profile.

    Parameters
    ----------
    market : Market
        With a demand profile (``Market(demand=...)``).
    treatment : Treatment, optional
    design : Design, optional
        Default :class:`~marketsim.GlobalControl`.
    points : int
        Evenly spaced report times over the period (>= 2); the profile's
        breakpoints are added.

    Returns
    -------
    PeriodicPath

    Examples
    --------
    >>> import marketsim as ms
    >>> daily = ms.scenarios.rehearsal_rooms().replace(
    ...     demand=ms.DemandProfile([1, 1, 2, 4], period=24.0))
    >>> path = ms.meanfield.periodic_path(daily, points=5)
    >>> bool(path.booking_rate[-1] > path.booking_rate[0])   # the evening is busier
    True
    """
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    profile = market.demand
    if profile is None:
        raise ValueError("market must have a demand profile (Market(demand=ms.DemandProfile"
                         "(...))) for a periodic path, got a market with flat demand")
    if isinstance(points, bool) or not isinstance(points, int) or points < 2:
        raise ValueError(f"points must be a whole number >= 2, got {points!r}")
    cells = build_cells(market, treatment, design)
    return periodic_of_cells(cells, points)


def periodic_of_cells(cells: MarketCells, points: int = 2) -> PeriodicPath:
    """:func:`periodic_path` on cells already built (their market has a profile)."""
    model = FlowModel.of(cells)
    profile = cells.market.demand
    period = profile.period
    s = model.rho.astype(float).copy()
    periods = 0
    while periods < MAX_PERIODS:
        following, _, _ = flow_through(model, s, 0.0, period, profile)
        periods += 1
        moved = float(np.max(np.abs(following - s)))
        s = following
        if moved <= PERIOD_TOLERANCE * float(model.rho.max()):
            break
    times = np.unique(np.concatenate([np.linspace(0.0, period, points), profile.starts]))
    states = [s]
    total = np.zeros(model.a.shape)
    for a, b in itertools.pairwise(times):
        s, made, _ = flow_through(model, s, a, b, profile)
        total += made
        states.append(s)
    available = np.array(states)
    multiplier = profile.multiplier_at(times)
    rates = np.array([model.bookings(x).sum() * model.n for x in available]) * multiplier
    arrivals = model.lam * model.n
    return PeriodicPath(cells=cells, times=times, available=available * model.n,
                        booking_rate=rates, mean_booking_rates=total / period,
                        mean_arrival_rates=arrivals, period=period, periods=periods)


def _rates_ledger(cells: MarketCells, booking_rates: np.ndarray, arrival_rates: np.ndarray,
                  window: float, available: np.ndarray) -> Ledger:
    n_c, n_l = cells.n_customer_cells, cells.n_listing_cells
    return Ledger(
        cells=cells, bookings=booking_rates * window, arrivals=arrival_rates * window,
        window=window, mean_available=available,
        final_available=np.clip(np.rint(available).astype(np.int64), 0, cells.listing_count),
        events=0, bin_edges=np.empty(0), bin_bookings=np.zeros((0, n_c, n_l)),
        bin_arrivals=np.zeros((0, n_c)), engine="large-market")


__all__ = ["PERIOD_TOLERANCE", "MAX_PERIODS", "PeriodicPath", "integrate_piece", "flow_through",
           "periodic_path", "periodic_of_cells"]
