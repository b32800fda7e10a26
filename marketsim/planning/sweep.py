"""Sweeps: how bias and noise move with balance or any other market parameter."""

from __future__ import annotations

import math
import os
import warnings
from collections.abc import Callable, Sequence

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim import meanfield
from marketsim.designs import (
    Design,
    TwoSided,
)
from marketsim.estimators import METRICS
from marketsim.model import Market, Treatment
from marketsim.randomness import SeedLike
from marketsim.study import Arm, Study, StudyResult
from marketsim.study.runs import run_studies
from marketsim.study.store import describe

ArmLike = Arm | Design | Callable[[float], Design]
"""An arm, a design, or a callable ``balance -> Design`` (e.g. ``ms.TwoSided.for_balance``)."""

MODES = ("large-market", "simulation")

SWEEP_COLUMNS = [
    "parameter", "value", "balance", "arm", "design", "estimator", "metric", "truth",
    "mean_estimate", "bias", "relative_bias", "sd", "rmse", "mode",
]
SIMULATION_COLUMNS = ["truth_mc_se", "bias_mc_se", "rmse_mc_se", "mean_naive_se", "coverage",
                      "coverage_mc_se", "replications"]


def sweep(
    market: Market,
    treatment: Treatment,
    arms: Sequence[ArmLike],
    values: Sequence[float] | np.ndarray,
    *,
    parameter: str | Callable[[Market, object], Market] = "balance",
    mode: str = "large-market",
    metric: str = "bookings",
    horizon: float | None = None,
    burn_in: float = 0.0,
    replications: int | None = None,
    seed: SeedLike = None,
    workers: int = 1,
    progress: bool = True,
    backend: str = "local",
    client: object = None,
    store: str | os.PathLike | None = None,
    max_seconds: float | None = None,
    max_events: int | None = None,
) -> pd.DataFrame:
    """Bias, standard deviation and RMSE of each arm over a range of one market parameter.

    Parameters
    ----------
    market : Market
        The market at which every parameter not swept stays.
    treatment : Treatment
    arms : sequence of Arm, Design or callable
        What to score at every point. :class:`~marketsim.TwoSidedFollowingBalance`
        follows balance (put it in an ``Arm`` to choose its estimators); a
        callable ``balance -> Design`` (such as ``ms.TwoSided.for_balance``) works
        too.
    values : sequence
        The values of ``parameter`` to visit.
    parameter : str or callable
        ``"balance"`` (default: the arrival rate is rescaled,
        :meth:`Market.with_balance`), the name of any :class:`Market` parameter
        (``"arrival_rate"``, ``"mean_busy_time"``, ``"utility"``, ...; each value
        is passed to :meth:`Market.replace`), or a callable
        ``(market, value) -> Market``.
    mode : {"large-market", "simulation"}
        ``"large-market"`` is instant and exact in the limit of many listings
        (:mod:`marketsim.meanfield`) but has no noise: ``sd`` is NaN and ``rmse``
        equals ``|bias|``, the floor no horizon goes below. ``"simulation"`` runs
        a :class:`Study` at every point (needs ``horizon`` and ``replications``)
        and reports Monte Carlo standard errors.
    metric : {"bookings", "revenue", "conversion"}
    horizon, burn_in, replications, seed, workers
        Passed to the study at each point (simulation mode); point ``k`` gets
        the child of ``seed`` with spawn key ``k``.
    progress : bool
        Progress bar over the replications of every point (simulation mode).
    backend, client, store, max_seconds, max_events
        As for :meth:`Study.run` (simulation mode): every replication of every
        point is one task, so the points share the workers or the cluster, and
        a store holds every point (``StudyResult.from_store(store, study=k)``
        reads point ``k``).

    Returns
    -------
    pandas.DataFrame
        One row per point x arm x estimator, columns ``parameter, value,
        balance, arm, design, estimator, metric, truth, mean_estimate, bias,
        relative_bias, sd, rmse, mode`` (and, in simulation mode, the Monte Carlo
        columns ``truth_mc_se, bias_mc_se, rmse_mc_se, mean_naive_se, coverage,
        coverage_mc_se, replications``). Draw it with
        :func:`marketsim.planning.figures.plot_sweep`.

    Examples
    --------
    >>> import marketsim as ms
    >>> table = ms.sweep(ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3),
    ...                  arms=[ms.CustomerSide(0.5), ms.ListingSide(0.5)],
    ...                  values=[0.1, 1.0, 10.0])
    >>> table.groupby("estimator").size().to_dict()
    {'customer-side': 3, 'listing-side': 3}
    """
    require_market_and_treatment(market, treatment)
    check.choice("mode", mode, MODES)
    check.choice("metric", metric, METRICS)
    points = _points(values)
    vary, name = _variation(parameter)
    arm_likes = _arm_likes(arms)
    markets = [vary(market, value) for value in points]
    if mode == "large-market":
        if (store, client, max_seconds, max_events) != (None,) * 4 or backend != "local":
            raise ValueError(
                "mode 'large-market' simulates nothing: backend, client, store, max_seconds "
                f"and max_events are for mode 'simulation', got backend={backend!r}, "
                f"client={client!r}, store={store!r}, max_seconds={max_seconds!r}, "
                f"max_events={max_events!r}")
        frames = [_large_market_point(at, treatment, arm_likes, metric) for at in markets]
    else:
        if horizon is None or replications is None:
            raise ValueError(
                "mode 'simulation' needs horizon and replications, got "
                f"horizon={horizon!r}, replications={replications!r}"
            )
        studies = [Study(at, treatment, [_arm_at(a, at) for a in arm_likes],
                         horizon=horizon, burn_in=burn_in, metric=metric) for at in markets]
        frames = _simulate_points(studies, replications, seed, progress=progress,
                                  backend=backend, workers=workers, client=client,
                                  store=store, max_seconds=max_seconds,
                                  max_events=max_events, asked={"parameter": name,
                                                      "values": describe(points)})
    rows = []
    for value, at, frame in zip(points, markets, frames):
        if frame is None:  # interrupted before two replications of this point finished
            continue
        frame = frame.copy()
        frame.insert(0, "balance", at.balance)
        frame.insert(0, "value", value)
        frame.insert(0, "parameter", name)
        rows.append(frame)
    columns = SWEEP_COLUMNS + (SIMULATION_COLUMNS if mode == "simulation" else [])
    return pd.concat(rows, ignore_index=True)[columns]


def _simulate_points(studies: list[Study], replications: int, seed: SeedLike,
                     **options) -> list[pd.DataFrame | None]:
    """One study per point, run together; Ctrl-C keeps what finished (with a warning)."""
    results, interrupted = run_studies(studies, replications, seed, kind="sweep",
                                       split=True, desc="sweep", **options)
    frames = [None if r is None else _simulation_point(r) for r in results]
    if interrupted:
        kept = sum(frame is not None for frame in frames)
        if kept == 0:
            raise KeyboardInterrupt
        warnings.warn(
            f"sweep interrupted: returning {kept} of {len(studies)} points (see the "
            "replications column: some may have fewer)", RuntimeWarning, stacklevel=3)
    return frames


def _large_market_point(market: Market, treatment: Treatment, arm_likes: list[ArmLike],
                        metric: str) -> pd.DataFrame:
    frames = []
    for arm_like in arm_likes:
        arm = _arm_at(arm_like, market)
        estimators = arm.resolve(market)
        table = meanfield.expected_estimates(market, treatment, arm.design, estimators, metric)
        table = table.rename(columns={"expected_estimate": "mean_estimate"})
        table["design"] = arm.design.label
        table.insert(0, "arm", arm.label)
        frames.append(table)
    frame = pd.concat(frames, ignore_index=True)
    frame["sd"] = math.nan
    frame["rmse"] = frame["bias"].abs()
    frame["mode"] = "large-market"
    return frame.drop(columns=["balance"])


def _simulation_point(result: StudyResult) -> pd.DataFrame:
    frame = result.summary.copy()
    frame["mode"] = "simulation"
    return frame


def _points(values: object) -> list:
    if isinstance(values, (str, bytes)):
        raise ValueError(f"values must be a non-empty list, got {values!r}")
    try:
        points = list(values)  # type: ignore[arg-type]
    except TypeError:
        raise ValueError(f"values must be a non-empty list, got {values!r}") from None
    if not points:
        raise ValueError("values must be a non-empty list, got []")
    return points


def _variation(parameter: object) -> tuple[Callable[[Market, object], Market], str]:
    if callable(parameter):
        return parameter, getattr(parameter, "__name__", "custom")
    if parameter == "balance":
        return (lambda market, value: market.with_balance(value)), "balance"
    allowed = ["balance", "arrival_rate", "listing_counts", "mean_busy_time",
               "customer_shares", "consideration", "utility", "outside_utility", "price"]
    check.choice("parameter", parameter, allowed)
    return (lambda market, value: market.replace(**{parameter: value})), str(parameter)


def _arm_likes(arms: object) -> list[ArmLike]:
    if isinstance(arms, (Arm, Design)) or callable(arms):
        return [arms]
    items = list(arms)  # type: ignore[arg-type]
    if not items:
        raise ValueError("arms must name at least one arm, got []")
    for item in items:
        if not isinstance(item, (Arm, Design)) and not callable(item):
            raise ValueError(
                "arms must contain marketsim.Arm or Design objects or callables "
                f"balance -> Design (e.g. ms.TwoSided.for_balance), got {type(item).__name__}"
            )
    return items


def _arm_at(arm_like: ArmLike, market: Market) -> Arm:
    """The concrete arm of ``arm_like`` in ``market`` (callables follow its balance)."""
    if isinstance(arm_like, Arm):
        return arm_like
    if isinstance(arm_like, Design):
        return Arm(arm_like)
    design = arm_like(market.balance)
    if not isinstance(design, Design):
        raise ValueError(
            f"arm {arm_like!r} must return a marketsim.Design for a balance, got "
            f"{type(design).__name__}"
        )
    return Arm(design, name=_follower_name(arm_like))


def _follower_name(function: Callable[[float], Design]) -> str:
    """Table name of a design that follows balance."""
    if function == TwoSided.for_balance:
        return "two-sided (follows balance)"
    name = getattr(function, "__qualname__", getattr(function, "__name__", "custom design"))
    return f"{name} (follows balance)"


def require_market_and_treatment(market: object, treatment: object) -> None:
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    if not isinstance(treatment, Treatment):
        raise ValueError(
            f"treatment must be a marketsim.Treatment, got {type(treatment).__name__}"
        )


__all__ = ["sweep", "ArmLike", "MODES", "SWEEP_COLUMNS", "SIMULATION_COLUMNS",
           "require_market_and_treatment"]
