"""The large-market (mean-field) model: steady state, paths and bias without simulation.

As the market grows with the balance held fixed (``N`` listings, arrivals
``N * lambda``), the share of listings of each cell that is available follows an
ordinary differential equation (Kurtz, 1970). Its steady state gives, in
milliseconds, the long-run booking rate of every customer cell with every
listing cell, hence the expected value of every estimator in a large market and
its bias against the global treatment effect.

The model works on the cells of :func:`marketsim.cells.build_cells`, so every
design applies unchanged. With ``N`` the number of listings, per cell:

- ``rho_l = n_l / N`` (share of the listings in listing cell ``l``),
  ``tau_l = 1 / mean_busy_time`` (release rate), ``s_l`` the available share;
- ``lambda_c = arrival_rate * share_c / N`` (arrivals of customer cell ``c``
  per listing);
- ``a_cl = consideration_cl * w_cl`` and ``w0_c = outside_weight_c / N``: the
  outside option grows with the market (its weight is ``N * exp(u_0)``), so in
  share units it is the fixed ``exp(u_0)``. The per-customer-cell scaling of the
  weights in :class:`~marketsim.MarketCells` cancels in every ratio.

The booking probability of a customer of cell ``c`` with cell ``l`` and the
flow of availability are

.. math::

    p_{cl}(s) = \\frac{a_{cl} s_l}{w_{0c} + \\sum_k a_{ck} s_k}, \\qquad
    \\frac{ds_l}{dt} = \\tau_l (\\rho_l - s_l) - \\sum_c \\lambda_c p_{cl}(s).

Every figure this module returns is in *listing units* so that it compares
directly with :func:`marketsim.simulate`: available listings per cell
(``N * s_l``) and bookings per unit time of the whole market
(``N * lambda_c * p_cl``).

References
----------
Kurtz, T. G., "Solutions of ordinary differential equations as limits of pure
jump Markov processes", Journal of Applied Probability 7(1), 1970.

Johari, Li, Liskovich and Weintraub, "Experimental design in two-sided
platforms: an analysis of bias", Management Science 68(10), 2022.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Union

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.cells import MarketCells, build_cells
from marketsim.designs import Design, GlobalControl, GlobalTreatment
from marketsim.engine.front import START_OPTIONS
from marketsim.estimators import METRICS, Estimator, default_estimators, metric_rate
from marketsim.ledger import Ledger
from marketsim.market import Market, Treatment

METHODS = ("auto", "newton", "ode")
NEWTON_TOLERANCE = 1e-12
"""Newton stops when every relative residual ``|1 - D_c / G_c(D)|`` is below this."""
NEWTON_MAX_ITERATIONS = 100
ODE_RELAXATION_TIMES = 60.0
"""The fallback integrates for at most this many slowest busy times (``exp(-60)``
of the initial gap remains: the flow contracts at least at rate ``min tau``)."""
ODE_MAX_STEPS = 2000
ODE_POLISH_EVERY = 25

DesignLike = Union[Design, Callable[[float], Design]]


# ----------------------------------------------------------------------------- the model
@dataclass(frozen=True, eq=False)
class _Model:
    """The cells of a market in share units, logs precomputed (private)."""

    n: float                 # N, number of listings
    rho: np.ndarray          # (L,) share of listings per listing cell
    tau: np.ndarray          # (L,) release rate
    lam: np.ndarray          # (C,) arrivals per listing per unit time
    w0: np.ndarray           # (C,) outside weight in share units
    a: np.ndarray            # (C, L) consideration * weight
    log_lam_a: np.ndarray    # (C, L) log(lambda_c * a_cl), -inf where a_cl = 0
    active: np.ndarray       # (C,) bool: considers some listing

    @classmethod
    def of(cls, cells: MarketCells) -> _Model:
        n = float(cells.listing_count.sum())
        lam = cells.arrival_rate * np.asarray(cells.customer_share, dtype=float) / n
        a = np.asarray(cells.consideration, dtype=float) * np.asarray(cells.weight, dtype=float)
        w0 = np.asarray(cells.outside_weight, dtype=float) / n
        active = (a > 0.0).any(axis=1) & (lam > 0.0)
        with np.errstate(divide="ignore"):
            log_lam_a = np.log(lam)[:, None] + np.log(a)
        log_lam_a[a <= 0.0] = -np.inf
        bad = active & ~(w0 > 0.0)
        if bad.any():
            c = int(np.argmax(bad))
            raise ValueError(
                "utility and outside_utility must be within about 700 of each other for "
                "the large-market model (the outside weight underflows to 0), got an "
                f"outside weight of 0 for customer cell {cells.customer_labels[c]!r}"
            )
        return cls(
            n=n,
            rho=cells.listing_count / n,
            tau=np.asarray(cells.release_rate, dtype=float),
            lam=lam,
            w0=w0,
            a=a,
            log_lam_a=log_lam_a,
            active=active,
        )

    # flows -------------------------------------------------------------------
    def pressure(self, log_d: np.ndarray) -> np.ndarray:
        """``E[c, l] = lambda_c a_cl / D_c``, booking intensity per available share."""
        return np.exp(self.log_lam_a - log_d[:, None])

    def denominators(self, s: np.ndarray) -> np.ndarray:
        """``D_c = w0_c + sum_l a_cl s_l``."""
        return self.w0 + self.a @ s

    def flow(self, s: np.ndarray) -> np.ndarray:
        """Right-hand side of the ODE, ``ds/dt``."""
        d = self.denominators(s)
        safe = np.where(d > 0.0, d, 1.0)
        bookings = (self.lam / safe)[:, None] * self.a * s[None, :]
        return self.tau * (self.rho - s) - bookings.sum(axis=0)

    def flow_jacobian(self, s: np.ndarray) -> np.ndarray:
        """``d(ds/dt)/ds``, shape (L, L)."""
        d = self.denominators(s)
        safe = np.where(d > 0.0, d, 1.0)
        e = (self.lam / safe)[:, None] * self.a                # (C, L)
        cross = (e * s[None, :]).T @ (self.a / safe[:, None])  # (L, L)
        return cross - np.diag(self.tau + e.sum(axis=0))

    def availability(self, log_d: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Available share given the denominators, and the pressure matrix."""
        e = self.pressure(log_d)
        return self.tau * self.rho / (self.tau + e.sum(axis=0)), e


# ----------------------------------------------------------------------------- solvers
def _residual(model: _Model, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                     np.ndarray]:
    """Relative residual ``1 - D/G(D)`` at ``x = log D`` (0 for inactive cells),
    with the available share ``s``, the pressure ``E`` and ``G``."""
    s, e = model.availability(x)
    g = model.denominators(s)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        f = np.where(model.active, -np.expm1(x - np.log(g)), 0.0)
    return f, s, e, g


def _newton(model: _Model, x: np.ndarray, lo: np.ndarray, hi: np.ndarray,
            damped: bool = False) -> tuple[np.ndarray | None, int]:
    """Projected Newton for ``y = 1/D``; ``None`` if it does not converge.

    The equations ``y_c G_c(y) - 1 = 0`` are nearly linear in ``y`` both when
    listings are plentiful (``s ~ rho``) and when they are scarce
    (``a s y ~ tau rho / lambda``). In relative steps ``r = dy / y`` the Newton
    system is ``(I - q pi^T) r = -(1 - D/G)`` with ``q_cl = a_cl s_l / G_c`` (booking
    probabilities) and ``pi_dl = E_dl / (tau_l + B_l)`` (shares of a listing's
    outflow): a nonsingular M-matrix, so the step always exists, and from a
    point with ``G <= D`` it points towards the solution.

    Full steps (``damped=False``) cross the plateaus of the residual between
    regimes in a few iterations, where a line search would stall; ``damped=True``
    adds a backtracking line search for the rare cases where full steps cycle.
    """
    act = model.active
    f, s, e, g = _residual(model, x)
    merit = float(np.max(np.abs(f), initial=0.0))
    for iteration in range(1, NEWTON_MAX_ITERATIONS + 1):
        if merit <= NEWTON_TOLERANCE:
            return x, iteration - 1
        q = model.a[act] * s[None, :] / g[act, None]
        outflow = model.tau + e.sum(axis=0)
        pi = e[act] / outflow[None, :]
        # Row sums of I - M, computed without cancellation: the chance of
        # leaving plus the chance of booking a listing that is not busy.
        slack = model.w0[act] / g[act] + q @ (model.tau / outflow)
        step = _solve_m_matrix(q @ pi.T, slack, -f[act])
        if not np.all(np.isfinite(step)):
            return None, iteration
        t = 1.0
        while True:
            if not damped:
                trial = x.copy()
                trial[act] = np.clip(x[act] - np.log(np.maximum(1.0 + step, 1e-300)),
                                     lo[act], hi[act])
                f_new, s_new, e_new, g_new = _residual(model, trial)
                new_merit = float(np.max(np.abs(f_new), initial=0.0))
                if not np.isfinite(new_merit):
                    return None, iteration
                break
            trial = x.copy()
            with np.errstate(divide="ignore"):
                moved = x[act] - np.log(np.maximum(1.0 + t * step, 1e-300))
            trial[act] = np.clip(moved, lo[act], hi[act])
            f_new, s_new, e_new, g_new = _residual(model, trial)
            new_merit = float(np.max(np.abs(f_new), initial=0.0))
            # Accept a step that lowers the residual, or one that stays above the
            # solution (G <= D) while moving down towards it: such iterates
            # decrease monotonically to the solution even where the residual is
            # flat (plateaus between the demand- and supply-limited regimes).
            above = bool(np.all(f <= 0.0) and np.all(f_new <= 0.0))
            if np.isfinite(new_merit) and (new_merit < merit * (1.0 - 1e-4 * t) or above
                                           or new_merit <= NEWTON_TOLERANCE):
                break
            t *= 0.5
            if t < 1e-12:
                return None, iteration
        x, f, s, e, g, merit = trial, f_new, s_new, e_new, g_new, new_merit
    if merit <= NEWTON_TOLERANCE:
        return x, NEWTON_MAX_ITERATIONS
    return None, NEWTON_MAX_ITERATIONS


def _solve_m_matrix(m: np.ndarray, slack: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve ``(I - m) r = b`` for ``m >= 0`` whose row sums ``1 - slack`` may be 1 to
    within rounding.

    Gaussian elimination that carries the row sums of the remaining matrix
    (Grassmann, Taksar and Heyman, Operations Research 33(5), 1985): every
    update adds numbers of one sign, so the tiny diagonal margins (e.g. an
    outside option of relative weight 1e-40) survive.
    """
    n = b.size
    off = -np.array(m, dtype=float)
    np.fill_diagonal(off, 0.0)
    rows = np.array(slack, dtype=float)
    rhs = np.array(b, dtype=float)
    diag = rows - off.sum(axis=1)
    for k in range(n - 1):
        factor = off[k + 1:, k] / diag[k]                  # <= 0
        rows[k + 1:] -= factor * rows[k]
        off[k + 1:, k + 1:] -= factor[:, None] * off[k, k + 1:][None, :]
        rhs[k + 1:] -= factor * rhs[k]
        off[k + 1:, k] = 0.0
        sub = off[k + 1:, k + 1:]
        inner = sub.sum(axis=1) - np.diagonal(sub)
        diag[k + 1:] = rows[k + 1:] - inner
        np.fill_diagonal(sub, 0.0)
    r = np.empty(n)
    for k in range(n - 1, -1, -1):
        r[k] = (rhs[k] - off[k, k + 1:] @ r[k + 1:]) / diag[k]
    return r


def _bounds(model: _Model) -> tuple[np.ndarray, np.ndarray]:
    """Bracket of ``log D``: every listing busy (``w0``) to every listing free."""
    with np.errstate(divide="ignore"):
        lo = np.log(model.w0)
        hi = np.log(model.denominators(model.rho))
    lo = np.where(model.active, lo, 0.0)
    hi = np.where(model.active, hi, 0.0)
    return lo, hi


def _start_guess(model: _Model, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Two monotone fixed-point steps ``D <- G(D)`` down from 'every listing free'.

    ``G`` is order-preserving, so iterating it from the top of the bracket moves
    monotonically towards the solution, never leaves the bracket and keeps
    ``G(D) <= D``.
    """
    x = hi.copy()
    for _ in range(2):
        g = _residual(model, x)[3]
        with np.errstate(divide="ignore"):
            x = np.where(model.active, np.clip(np.log(g), lo, hi), 0.0)
    return x


def _integrate(model: _Model, s0: np.ndarray, t_end: float,
               t_eval: np.ndarray | None = None):
    """Integrate the ODE with a stiff solver (Radau if BDF fails)."""
    from scipy.integrate import solve_ivp

    last = None
    for method in ("BDF", "Radau"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            with np.errstate(all="ignore"):
                sol = solve_ivp(
                    lambda _t, s: model.flow(s), (0.0, t_end), s0, method=method,
                    t_eval=t_eval, jac=lambda _t, s: model.flow_jacobian(s),
                    rtol=1e-9, atol=1e-13 * max(float(model.rho.max()), 1e-300),
                )
        if sol.success and np.all(np.isfinite(sol.y)):
            return sol
        last = sol
    return last


def _relax(model: _Model, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray | None, int]:
    """Fallback: follow the ODE from 'every listing available' with a stiff solver
    and try to finish with Newton every few steps; ``None`` if nothing converges.

    The work is capped (:data:`ODE_MAX_STEPS` solver steps), so a market that
    defeats every method fails in well under a second instead of running on.
    """
    from scipy.integrate import BDF

    t_end = ODE_RELAXATION_TIMES / float(model.tau.min())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with np.errstate(all="ignore"):
            solver = BDF(lambda _t, s: model.flow(s), 0.0, model.rho.astype(float), t_end,
                         jac=lambda _t, s: model.flow_jacobian(s), rtol=1e-6,
                         atol=1e-12 * float(model.rho.max()))
            for step in range(1, ODE_MAX_STEPS + 1):
                solver.step()
                finished = solver.status != "running"
                if step % ODE_POLISH_EVERY == 0 or finished:
                    state = np.clip(solver.y, 0.0, model.rho)
                    if np.all(np.isfinite(state)):
                        guess = np.where(model.active, np.clip(
                            np.log(model.denominators(state)), lo, hi), 0.0)
                        x, iterations = _newton(model, guess, lo, hi)
                        if x is None:
                            x, iterations = _newton(model, guess, lo, hi, damped=True)
                        if x is not None:
                            return x, iterations
                if finished:
                    break
    return None, 0


def _solve(cells: MarketCells, method: str = "auto") -> SteadyState:
    model = _Model.of(cells)
    lo, hi = _bounds(model)
    x, iterations, used = None, 0, method
    if method in ("auto", "newton"):
        guess = _start_guess(model, lo, hi)
        x, iterations = _newton(model, guess, lo, hi)
        if x is None:
            x, iterations = _newton(model, guess, lo, hi, damped=True)
        used = "newton"
    if x is None and method in ("auto", "ode"):
        x, iterations = _relax(model, lo, hi)
        used = "ode"
    if x is None:
        raise RuntimeError(
            f"steady_state did not converge (method {method!r}) for {cells.market!r} with "
            f"{cells.treatment!r} under {cells.design!r}; please report this market"
        )
    f, s, e, _ = _residual(model, x)
    booking = np.where(model.active[:, None], e * s[None, :], 0.0) * model.n
    available = np.clip(s * model.n, 0.0, cells.listing_count.astype(float))
    return SteadyState(
        cells=cells,
        available=available,
        booking_rates=booking,
        booking_rate=float(booking.sum()),
        method=used,
        iterations=int(iterations),
        residual=float(np.max(np.abs(f), initial=0.0)),
    )


# ----------------------------------------------------------------------------- results
@dataclass(frozen=True, eq=False)
class SteadyState:
    """The large-market steady state of a market under a design, in listing units.

    Attributes
    ----------
    cells : MarketCells
        The cells the state describes (labels, counts, treatment status).
    available : ndarray, shape (n_listing_cells,)
        Expected number of available listings per listing cell, ``N * s_l``.
    booking_rates : ndarray, shape (n_customer_cells, n_listing_cells)
        Bookings per unit time of the whole market by customers of each
        customer cell with listings of each listing cell.
    booking_rate : float
        Total bookings per unit time.
    method : {"newton", "ode"}
        How the state was found (``"ode"``: the fallback integration was used).
    iterations : int
        Newton iterations of the final solve.
    residual : float
        Largest relative residual ``|1 - D_c / G_c(D)|`` at the solution (see
        :func:`steady_state`).
    """

    cells: MarketCells
    available: np.ndarray
    booking_rates: np.ndarray
    booking_rate: float
    method: str
    iterations: int
    residual: float

    @property
    def available_share(self) -> np.ndarray:
        """Share of each listing cell's listings that is available, shape (n_listing_cells,)."""
        return self.available / self.cells.listing_count

    @property
    def arrival_rates(self) -> np.ndarray:
        """Customer arrivals per unit time per customer cell, shape (n_customer_cells,)."""
        return self.cells.arrival_rate * np.asarray(self.cells.customer_share, dtype=float)

    @property
    def booking_probability(self) -> np.ndarray:
        """Probability that an arriving customer of each cell books a listing of each
        cell, shape (n_customer_cells, n_listing_cells)."""
        return self.booking_rates / self.arrival_rates[:, None]

    def ledger(self, window: float | None = None) -> Ledger:
        """The expected ledger: what a run of length ``window`` records on average.

        Every :class:`~marketsim.Estimator` applies to it unchanged (its naive
        standard error is that of a run of length ``window``).

        Parameters
        ----------
        window : float, optional
            Length of the window, > 0. Default 1, or ``1 / arrival_rate`` if that is
            longer, so that at least one arrival is expected (the conversion metric
            divides by ``max(arrivals, 1)``).

        Returns
        -------
        Ledger
            ``bookings = booking_rates * window`` (floats),
            ``arrivals = arrival_rates * window``, ``mean_available = available``,
            ``final_available`` rounded to whole listings, ``events = 0``, no bins.
        """
        return expected_ledger(self, window)

    def to_frame(self) -> pd.DataFrame:
        """Tidy table, one row per customer cell x listing cell.

        Columns: ``customer_cell, listing_cell, booking_rate, booking_probability,
        arrival_rate`` (of the customer cell), ``available, listing_count`` (of the
        listing cell).
        """
        cells = self.cells
        rows = []
        prob = self.booking_probability
        arrivals = self.arrival_rates
        for c, customer in enumerate(cells.customer_labels):
            for ell, listing in enumerate(cells.listing_labels):
                rows.append({
                    "customer_cell": customer,
                    "listing_cell": listing,
                    "booking_rate": float(self.booking_rates[c, ell]),
                    "booking_probability": float(prob[c, ell]),
                    "arrival_rate": float(arrivals[c]),
                    "available": float(self.available[ell]),
                    "listing_count": int(cells.listing_count[ell]),
                })
        return pd.DataFrame(rows)

    def __repr__(self) -> str:
        return (
            f"SteadyState(booking_rate={self.booking_rate:.6g}, available="
            f"{np.round(self.available, 4).tolist()}, cells={self.cells.n_customer_cells}x"
            f"{self.cells.n_listing_cells}, design={self.cells.design!r})"
        )


def expected_ledger(state: SteadyState, window: float | None = None) -> Ledger:
    """The expected ledger of a steady state (see :meth:`SteadyState.ledger`)."""
    if not isinstance(state, SteadyState):
        raise ValueError(
            f"state must be a marketsim.meanfield.SteadyState, got {type(state).__name__}"
        )
    if window is None:
        window = max(1.0, 1.0 / state.cells.arrival_rate)
    window = check.number("window", window, low=0.0, low_open=True)
    cells = state.cells
    n_c, n_l = cells.n_customer_cells, cells.n_listing_cells
    final = np.clip(np.rint(state.available).astype(np.int64), 0, cells.listing_count)
    return Ledger(
        cells=cells,
        bookings=state.booking_rates * window,
        arrivals=state.arrival_rates * window,
        window=window,
        mean_available=state.available.copy(),
        final_available=final,
        events=0,
        bin_edges=np.empty(0),
        bin_bookings=np.zeros((0, n_c, n_l)),
        bin_arrivals=np.zeros((0, n_c)),
    )


# ----------------------------------------------------------------------------- public API
def steady_state(
    market: Market,
    treatment: Treatment | None = None,
    design: Design | None = None,
    *,
    method: str = "auto",
) -> SteadyState:
    """Large-market steady state: availability and booking rates of every cell.

    Parameters
    ----------
    market : Market
    treatment : Treatment, optional
        The feature under test (default: none).
    design : Design, optional
        Who is treated (default :class:`~marketsim.GlobalControl`).
    method : {"auto", "newton", "ode"}
        ``"newton"``: Newton's method on the customer cells' logit denominators;
        ``"ode"``: integrate the ODE with a stiff solver, then polish with Newton;
        ``"auto"`` (default): Newton, and the ODE if Newton fails.

    Returns
    -------
    SteadyState
        Availability in listings per listing cell and bookings per unit time per
        customer cell x listing cell, for the whole market (compare with
        :func:`marketsim.simulate`).

    Raises
    ------
    ValueError
        For invalid inputs (named in the message).
    RuntimeError
        If no method converges (not seen for balances 1e-4 to 1e4 and utilities
        -50 to 50; please report the market).

    Notes
    -----
    For fixed denominators ``D_c = w0_c + sum_k a_ck s_k`` the steady state of
    the ODE is explicit,

    .. math:: s_l = \\frac{\\tau_l \\rho_l}{\\tau_l + \\sum_c \\lambda_c a_{cl} / D_c},

    so the state solves ``D = G(D) = w0 + a s(D)``, one unknown per customer cell.
    ``G`` is order-preserving, so two fixed-point steps down from "every listing
    available" give a start above the solution. Newton's method then runs on
    ``y = 1/D`` in relative steps (scale-free: weights of any size, balances of any
    size), where the equations ``y G(y) = 1`` are nearly linear both when listings
    are plentiful and when they are scarce. Its matrix ``I - q pi^T`` (``q`` the
    booking probabilities, ``pi`` each customer cell's share of a listing's outflow)
    is a nonsingular M-matrix, solved by elimination that carries row sums
    (Grassmann, Taksar and Heyman 1985) so that outside options of relative weight
    ``1e-40`` are not lost to rounding. Iterates stay in the bracket
    ``w0 <= D <= w0 + a rho``; the answer satisfies ``|1 - D/G(D)| <= 1e-12``. If
    full Newton steps fail, a damped Newton runs; if that fails too, the ODE is
    followed with a stiff solver (BDF, exact Jacobian, at most 2,000 steps) and
    Newton restarted from where it got to. On 4,000 random markets (balance 1e-4
    to 1e4, utilities -50 to 50, 1 to 10 types per side) full Newton steps
    converged every time, in at most 21 iterations. Checked against long
    ``scipy.integrate.solve_ivp`` runs and against simulation
    (``tests/test_meanfield.py``).

    References
    ----------
    Kurtz, J. Appl. Prob. 7(1), 1970; Johari et al., Management Science 68(10), 2022.

    Examples
    --------
    >>> import marketsim as ms
    >>> state = ms.meanfield.steady_state(ms.scenarios.rehearsal_rooms())
    >>> state.available.shape, state.booking_rates.shape
    ((2,), (2, 2))
    >>> round(state.booking_rate, 2)
    6.75
    """
    check.choice("method", method, METHODS)
    return _solve(build_cells(market, treatment, design), method)


def gte(market: Market, treatment: Treatment, metric: str = "bookings") -> float:
    """Large-market global treatment effect: the metric under global treatment minus
    under global control, in steady state.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    metric : {"bookings", "revenue", "conversion"}
        As in :mod:`marketsim.estimators` (bookings per unit time, revenue per unit
        time, bookings per arrival).

    Returns
    -------
    float

    Examples
    --------
    >>> import marketsim as ms
    >>> effect = ms.meanfield.gte(ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3))
    >>> effect > 0
    True
    """
    check.choice("metric", metric, METRICS)
    _require_treatment(treatment)
    return _gte(market, treatment, metric)


def _gte(market: Market, treatment: Treatment, metric: str) -> float:
    treated = _solve(build_cells(market, treatment, GlobalTreatment()))
    control = _solve(build_cells(market, treatment, GlobalControl()))
    return metric_rate(treated.ledger(), metric) - metric_rate(control.ledger(), metric)


def expected_estimates(
    market: Market,
    treatment: Treatment,
    design: Design,
    estimators: Iterable[Estimator] | None = None,
    metric: str = "bookings",
) -> pd.DataFrame:
    """Large-market value of each estimator under ``design``, with its bias.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    design : Design
        The experiment (e.g. ``ms.TwoSided(0.5, 0.5)``).
    estimators : iterable of Estimator, optional
        Default: the design's own estimators that fit it, without repeats
        (:func:`marketsim.estimators.default_estimators`).
    metric : {"bookings", "revenue", "conversion"}

    Returns
    -------
    pandas.DataFrame
        One row per estimator with columns ``design, estimator, metric, balance,
        customer_fraction, listing_fraction, truth, expected_estimate, bias,
        relative_bias``; ``truth`` is the large-market global treatment effect
        (:func:`gte`), ``bias = expected_estimate - truth`` and
        ``relative_bias = bias / truth`` (NaN when the truth is exactly 0).

    Raises
    ------
    ValueError
        If a given estimator does not fit the design (message from the estimator),
        or, with ``estimators=None``, none of the design's own estimators fits (for
        example ``ListingSide(0.5)`` on a market whose every type has one listing:
        rounding treats them all).

    Examples
    --------
    >>> import marketsim as ms
    >>> table = ms.meanfield.expected_estimates(
    ...     ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3),
    ...     ms.CustomerSide(0.5))
    >>> table[["estimator", "relative_bias"]].round(3).values.tolist()
    [['customer-side', 0.397]]
    """
    check.choice("metric", metric, METRICS)
    _require_treatment(treatment)
    if not isinstance(design, Design):
        raise ValueError(
            f"design must be a marketsim.Design (e.g. ms.TwoSided(0.5, 0.5)), "
            f"got {type(design).__name__}"
        )
    chosen = None if estimators is None else _estimator_list(estimators)
    truth = _gte(market, treatment, metric)
    rows = _estimate_rows(market, treatment, design, design.label, chosen, metric, truth,
                          strict=True)
    return pd.DataFrame(rows, columns=ESTIMATE_COLUMNS)


ESTIMATE_COLUMNS = [
    "design", "estimator", "metric", "balance", "customer_fraction", "listing_fraction",
    "truth", "expected_estimate", "bias", "relative_bias",
]


def sweep_balance(
    market: Market,
    treatment: Treatment,
    designs: DesignLike | Sequence[DesignLike] | Mapping[str, DesignLike],
    balances: ArrayLike,
    estimators: Iterable[Estimator] | None = None,
    metric: str = "bookings",
) -> pd.DataFrame:
    """Large-market bias of several designs and estimators over a range of balances.

    The arrival rate is rescaled to each balance (:meth:`Market.with_balance`);
    everything else stays as in ``market``.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    designs : Design, callable, or a list or dict of them
        A :class:`~marketsim.Design` (:class:`~marketsim.TwoSidedFollowingBalance`
        follows balance by itself), or a callable ``balance -> Design``
        (``ms.TwoSided.for_balance`` can be passed as it is). A dict gives each
        design its label in the table; otherwise the label is the design's
        :attr:`~marketsim.Design.label` or the callable's name.
    balances : array_like of float
        Balances to visit, each > 0.
    estimators : iterable of Estimator, optional
        Default: the design's own estimators that fit it at that balance
        (:func:`marketsim.estimators.default_estimators`).
        A given estimator is left out at balances where it does not fit the design
        (e.g. a listing-side estimator once ``for_balance`` treats every listing).
    metric : {"bookings", "revenue", "conversion"}

    Returns
    -------
    pandas.DataFrame
        Columns as :func:`expected_estimates`, one row per balance x design x
        estimator; ``balance`` holds the values of ``balances`` as given;
        ``customer_fraction`` and ``listing_fraction`` are the treated
        shares the design realised at that balance.

    Examples
    --------
    >>> import marketsim as ms
    >>> table = ms.meanfield.sweep_balance(
    ...     ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3),
    ...     [ms.CustomerSide(0.5), ms.ListingSide(0.5)], balances=[0.1, 1.0, 10.0])
    >>> table.pivot(index="balance", columns="design",
    ...             values="relative_bias").round(2)  # doctest: +NORMALIZE_WHITESPACE
    design   customer-side (a_C=0.5)  listing-side (a_L=0.5)
    balance
    0.1                         0.03                    1.29
    1.0                         0.47                    0.52
    10.0                       11.30                    0.01
    """
    check.choice("metric", metric, METRICS)
    _require_treatment(treatment)
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    labelled = _labelled_designs(designs)
    grid = np.atleast_1d(np.asarray(balances, dtype=object))
    if grid.ndim != 1 or grid.size == 0:
        raise ValueError(f"balances must be a non-empty list of numbers > 0, got {balances!r}")
    values = [check.number(f"balances[{k}]", b, low=0.0, low_open=True)
              for k, b in enumerate(grid)]
    chosen = None if estimators is None else _estimator_list(estimators)
    rows: list[dict] = []
    for balance in values:
        at = market.with_balance(balance)
        truth = _gte(at, treatment, metric)
        for label, design in labelled:
            concrete = design(balance) if not isinstance(design, Design) else design
            if not isinstance(concrete, Design):
                raise ValueError(
                    f"design {label!r} must return a marketsim.Design for a balance, got "
                    f"{type(concrete).__name__} at balance {balance:g}"
                )
            rows.extend(_estimate_rows(at, treatment, concrete, label, chosen, metric,
                                       truth, strict=False, balance=balance))
    return pd.DataFrame(rows, columns=ESTIMATE_COLUMNS)


def trajectory(
    market: Market,
    treatment: Treatment | None = None,
    design: Design | None = None,
    *,
    t: ArrayLike,
    start: str | ArrayLike = "empty",
) -> Trajectory:
    """The large-market path of availability over time (the ODE solved by
    ``scipy.integrate.solve_ivp``).

    Parameters
    ----------
    market : Market
    treatment : Treatment, optional
    design : Design, optional
        Default :class:`~marketsim.GlobalControl`.
    t : array_like of float, shape (n_times,)
        Times (from 0) at which to report the state; non-decreasing, >= 0.
    start : {"empty", "steady"} or array_like, shape (n_listing_cells,)
        State at time 0: ``"empty"`` (every listing available, like
        :func:`marketsim.simulate`), ``"steady"`` or available listings per listing
        cell (numbers between 0 and the cell's size; need not be whole).

    Returns
    -------
    Trajectory

    Examples
    --------
    >>> import marketsim as ms
    >>> path = ms.meanfield.trajectory(ms.scenarios.rehearsal_rooms(), t=[0.0, 1.0, 50.0])
    >>> path.available.shape
    (3, 2)
    """
    cells = build_cells(market, treatment, design)
    model = _Model.of(cells)
    times = _times(t)
    s0 = _start_share(cells, model, start)
    if times[-1] <= 0.0:
        path = np.repeat(s0[None, :], times.size, axis=0)
    else:
        # the solver wants strictly increasing times; repeated times share a state
        distinct, where = np.unique(times, return_inverse=True)
        sol = _integrate(model, s0, float(times[-1]), t_eval=distinct)
        if sol is None or not sol.success:
            raise RuntimeError(
                f"trajectory: the ODE solver failed ({getattr(sol, 'message', 'no result')}) "
                f"for {market!r}; please report this market"
            )
        path = np.clip(sol.y.T[where], 0.0, model.rho[None, :])
    rates = np.empty((times.size, cells.n_customer_cells, cells.n_listing_cells))
    for k, s in enumerate(path):
        d = model.denominators(s)
        safe = np.where(d > 0.0, d, 1.0)
        rates[k] = (model.lam / safe)[:, None] * model.a * s[None, :] * model.n
    return Trajectory(cells=cells, times=times, available=path * model.n, booking_rates=rates)


@dataclass(frozen=True, eq=False)
class Trajectory:
    """A large-market path, in listing units.

    Attributes
    ----------
    cells : MarketCells
    times : ndarray, shape (n_times,)
    available : ndarray, shape (n_times, n_listing_cells)
        Expected available listings per listing cell at each time.
    booking_rates : ndarray, shape (n_times, n_customer_cells, n_listing_cells)
        Instantaneous bookings per unit time at each time.
    """

    cells: MarketCells
    times: np.ndarray
    available: np.ndarray
    booking_rates: np.ndarray

    @property
    def booking_rate(self) -> np.ndarray:
        """Total bookings per unit time at each time, shape (n_times,)."""
        return self.booking_rates.sum(axis=(1, 2))

    def to_frame(self) -> pd.DataFrame:
        """Tidy table, one row per time x listing cell: ``time, listing_cell,
        available, booking_rate`` (bookings per unit time of that listing cell)."""
        n_t, n_l = self.available.shape
        return pd.DataFrame({
            "time": np.repeat(self.times, n_l),
            "listing_cell": np.tile(np.array(self.cells.listing_labels, dtype=object), n_t),
            "available": self.available.ravel(),
            "booking_rate": self.booking_rates.sum(axis=1).ravel(),
        })

    def __repr__(self) -> str:
        return (f"Trajectory(times={self.times.size} from {self.times[0]:g} to "
                f"{self.times[-1]:g}, listing cells={self.cells.n_listing_cells})")


# ----------------------------------------------------------------------------- helpers
def _require_treatment(treatment: object) -> None:
    if not isinstance(treatment, Treatment):
        raise ValueError(
            "treatment must be a marketsim.Treatment (e.g. ms.Treatment(utility_shift=0.2)), "
            f"got {type(treatment).__name__}"
        )


def _estimator_list(estimators: Iterable[Estimator]) -> list[Estimator]:
    if isinstance(estimators, Estimator):
        return [estimators]
    chosen = list(estimators)
    for item in chosen:
        if not isinstance(item, Estimator):
            raise ValueError(
                "estimators must be marketsim.Estimator objects (e.g. ms.TwoSidedNaive()), "
                f"got {type(item).__name__}"
            )
    if not chosen:
        raise ValueError("estimators must name at least one estimator, got an empty list")
    return chosen


def _labelled_designs(designs: object) -> list[tuple[str, DesignLike]]:
    if isinstance(designs, Mapping):
        items = [(str(k), v) for k, v in designs.items()]
    elif isinstance(designs, Design) or callable(designs):
        items = [(None, designs)]
    elif isinstance(designs, (str, bytes)) or not isinstance(designs, Iterable):
        raise ValueError(
            "designs must be a marketsim.Design, a callable balance -> Design, or a list or "
            f"dict of them, got {type(designs).__name__}"
        )
    else:
        items = [(None, d) for d in designs]
    if not items:
        raise ValueError("designs must name at least one design, got none")
    labelled = []
    for label, design in items:
        if not isinstance(design, Design) and not callable(design):
            raise ValueError(
                "designs must be marketsim.Design objects or callables balance -> Design "
                f"(e.g. ms.TwoSided.for_balance), got {type(design).__name__}"
            )
        if label is None:
            label = design.label if isinstance(design, Design) else _callable_name(design)
        labelled.append((label, design))
    names = [label for label, _ in labelled]
    if len(set(names)) != len(names):
        raise ValueError(f"designs must have distinct labels (pass a dict), got {names}")
    return labelled


def _callable_name(function: Callable) -> str:
    return getattr(function, "__qualname__", None) or getattr(function, "__name__", None) \
        or repr(function)


def _estimate_rows(market: Market, treatment: Treatment, design: Design, label: str,
                   estimators: list[Estimator] | None, metric: str, truth: float,
                   *, strict: bool, balance: float | None = None) -> list[dict]:
    cells = build_cells(market, treatment, design)
    ledger = _solve(cells).ledger()
    split = cells.split
    if estimators is None:
        estimators = list(default_estimators(design, market))
        if not estimators and strict:
            reasons = []
            for estimator in design.default_estimators():
                try:
                    estimator.weights(split, market)
                except ValueError as error:
                    reasons.append(str(error))
            raise ValueError(
                f"design {label!r} has no estimator that fits it in this market "
                f"({'; '.join(reasons) or 'it names none'}); pass estimators=[...] or use "
                "another design"
            )
    rows = []
    for estimator in estimators:
        try:
            value = estimator.estimate(ledger, metric).value
        except ValueError:
            if strict:
                raise
            continue
        bias = value - truth
        rows.append({
            "design": label,
            "estimator": estimator.name,
            "metric": metric,
            "balance": market.balance if balance is None else balance,
            "customer_fraction": split.customer_fraction,
            "listing_fraction": split.listing_fraction,
            "truth": truth,
            "expected_estimate": value,
            "bias": bias,
            "relative_bias": bias / truth if truth != 0.0 else math.nan,
        })
    return rows


def _times(t: ArrayLike) -> np.ndarray:
    try:
        if check.first_non_number(t) is not check.ALL_NUMBERS:
            raise ValueError
        times = np.asarray(t, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"t must be an array of times >= 0, got {t!r}") from None
    times = np.atleast_1d(times)
    if times.ndim != 1 or times.size == 0:
        raise ValueError(f"t must be a non-empty 1-d array of times, got shape {times.shape}")
    if not np.all(np.isfinite(times)) or (times < 0.0).any():
        raise ValueError(f"t must contain finite times >= 0, got {times.tolist()[:8]}")
    if (np.diff(times) < 0.0).any():
        raise ValueError("t must be non-decreasing, got times that go back")
    return times


def _start_share(cells: MarketCells, model: _Model, start: object) -> np.ndarray:
    if isinstance(start, str):
        check.choice("start", start, START_OPTIONS)
        if start == "empty":
            return model.rho.astype(float).copy()
        return _solve(cells).available / model.n
    return cells.check_availability(start, whole=False) / model.n


__all__ = [
    "SteadyState",
    "Trajectory",
    "steady_state",
    "expected_ledger",
    "gte",
    "expected_estimates",
    "sweep_balance",
    "trajectory",
]
