"""The large-market path of availability over time (the ODE solved by scipy)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.designs import Design
from marketsim.engine import START_OPTIONS, MarketCells, build_cells
from marketsim.meanfield.solver import FlowModel, integrate
from marketsim.meanfield.steady import solve_cells
from marketsim.model import Market, Treatment


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

    Notes
    -----
    The path follows the market's mean arrival rate; under a demand profile use
    :func:`marketsim.meanfield.periodic_path`, which follows the profile piece by
    piece to its periodic path.

    Examples
    --------
    >>> import marketsim as ms
    >>> path = ms.meanfield.trajectory(ms.scenarios.rehearsal_rooms(), t=[0.0, 1.0, 50.0])
    >>> path.available.shape
    (3, 2)
    """
    cells = build_cells(market, treatment, design)
    model = FlowModel.of(cells)
    times = _times(t)
    s0 = _start_share(cells, model, start)
    if times[-1] <= 0.0:
        path = np.repeat(s0[None, :], times.size, axis=0)
    else:
        # the solver wants strictly increasing times; repeated times share a state
        distinct, where = np.unique(times, return_inverse=True)
        sol = integrate(model, s0, float(times[-1]), t_eval=distinct)
        if sol is None or not sol.success:
            raise RuntimeError(
                f"trajectory: the ODE solver failed ({getattr(sol, 'message', 'no result')}) "
                f"for {market!r}; please report this market"
            )
        path = np.clip(sol.y.T[where], 0.0, model.rho[None, :])
    rates = np.empty((times.size, cells.n_customer_cells, cells.n_listing_cells))
    for k, s in enumerate(path):
        rates[k] = model.bookings(s) * model.n
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


def _start_share(cells: MarketCells, model: FlowModel, start: object) -> np.ndarray:
    if isinstance(start, str):
        check.choice("start", start, START_OPTIONS)
        if start == "empty":
            return model.rho.astype(float).copy()
        return solve_cells(cells).available / model.n
    return cells.check_availability(start, whole=False) / model.n


__all__ = ["Trajectory", "trajectory"]
