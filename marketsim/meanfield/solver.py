"""The large-market flow in share units and the numerical methods that solve it
(Newton on the logit denominators, stiff ODE integration as the fallback)."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from marketsim.engine import MarketCells

METHODS = ("auto", "newton", "ode")
NEWTON_TOLERANCE = 1e-12
"""Newton stops when every relative residual ``|1 - D_c / G_c(D)|`` is below this."""
NEWTON_MAX_ITERATIONS = 100
ODE_RELAXATION_TIMES = 60.0
"""The fallback integrates for at most this many slowest busy times (``exp(-60)``
of the initial gap remains: the flow contracts at least at rate ``min tau``)."""
ODE_MAX_STEPS = 2000
ODE_POLISH_EVERY = 25

@dataclass(frozen=True, eq=False)
class FlowModel:
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
    def of(cls, cells: MarketCells) -> FlowModel:
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

    def bookings(self, s: np.ndarray, multiplier: float = 1.0) -> np.ndarray:
        """Booking rate per listing of each customer cell with each listing cell,
        ``m lambda_c a_cl s_l / D_c``, shape (C, L); ``multiplier`` ``m`` scales the
        arrivals (a piece of a demand profile)."""
        d = self.denominators(s)
        safe = np.where(d > 0.0, d, 1.0)
        return (self.lam * multiplier / safe)[:, None] * self.a * s[None, :]

    def flow(self, s: np.ndarray) -> np.ndarray:
        """Right-hand side of the ODE, ``ds/dt``."""
        return self.tau * (self.rho - s) - self.bookings(s).sum(axis=0)

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


def residual(model: FlowModel, x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                     np.ndarray]:
    """Relative residual ``1 - D/G(D)`` at ``x = log D`` (0 for inactive cells),
    with the available share ``s``, the pressure ``E`` and ``G``."""
    s, e = model.availability(x)
    g = model.denominators(s)
    with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
        f = np.where(model.active, -np.expm1(x - np.log(g)), 0.0)
    return f, s, e, g


def newton(model: FlowModel, x: np.ndarray, lo: np.ndarray, hi: np.ndarray,
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
    f, s, e, g = residual(model, x)
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
                f_new, s_new, e_new, g_new = residual(model, trial)
                new_merit = float(np.max(np.abs(f_new), initial=0.0))
                if not np.isfinite(new_merit):
                    return None, iteration
                break
            trial = x.copy()
            with np.errstate(divide="ignore"):
                moved = x[act] - np.log(np.maximum(1.0 + t * step, 1e-300))
            trial[act] = np.clip(moved, lo[act], hi[act])
            f_new, s_new, e_new, g_new = residual(model, trial)
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


def bounds(model: FlowModel) -> tuple[np.ndarray, np.ndarray]:
    """Bracket of ``log D``: every listing busy (``w0``) to every listing free."""
    with np.errstate(divide="ignore"):
        lo = np.log(model.w0)
        hi = np.log(model.denominators(model.rho))
    lo = np.where(model.active, lo, 0.0)
    hi = np.where(model.active, hi, 0.0)
    return lo, hi


def start_guess(model: FlowModel, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Two monotone fixed-point steps ``D <- G(D)`` down from 'every listing free'.

    ``G`` is order-preserving, so iterating it from the top of the bracket moves
    monotonically towards the solution, never leaves the bracket and keeps
    ``G(D) <= D``.
    """
    x = hi.copy()
    for _ in range(2):
        g = residual(model, x)[3]
        with np.errstate(divide="ignore"):
            x = np.where(model.active, np.clip(np.log(g), lo, hi), 0.0)
    return x


def integrate(model: FlowModel, s0: np.ndarray, t_end: float,
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


def relax(model: FlowModel, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray | None, int]:
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
                        x, iterations = newton(model, guess, lo, hi)
                        if x is None:
                            x, iterations = newton(model, guess, lo, hi, damped=True)
                        if x is not None:
                            return x, iterations
                if finished:
                    break
    return None, 0


__all__ = ["METHODS", "FlowModel", "residual", "newton", "bounds", "start_guess", "integrate",
           "relax"]
