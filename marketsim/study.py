"""Monte Carlo studies: score experiment designs and estimators against the truth.

A :class:`Study` runs, in each replication, the two global worlds (nobody
treated, everybody treated) and one simulated experiment per :class:`Arm`, all
over the same window. The difference of the two worlds is the global treatment
effect (the truth); each arm's estimators are scored against it: bias, standard
deviation, RMSE, coverage of the nominal 95% interval, each with its Monte Carlo
standard error.

Randomness
----------
``seed`` gives a root :class:`numpy.random.SeedSequence`; replication ``r``
uses the child with spawn key ``r`` (the same whatever the number of
replications or workers), so the same seed gives identical tables for any
``workers``. Within a replication the two global worlds *and every arm* start
from the same seed. The engine draws arrivals, choices and releases from three
separate streams (:func:`marketsim.randomness.engine_streams`), so the two
global worlds see the same customers arriving at the same times (common random
numbers): on the rehearsal-room scenario this cuts the variance of the
per-replication global effect about eight-fold (standard deviation 0.078
against 0.218 bookings per hour with independent seeds, 400 replications).
Sharing the seed with the arms as well neither helps nor hurts the Monte Carlo
error of the biases (measured: standard deviation of ``estimate_r - truth_r``
0.379 against 0.394 for customer-side, 0.288 against 0.289 for listing-side,
1,000 replications; correlation of estimate and truth about 0), but it makes
an arm's figures independent of which other arms are in the study: the same
seed gives the same numbers for an arm however the list of arms changes. The
Monte Carlo error of each bias is computed from the paired differences
``estimate_r - truth_r``, which is valid in either case.
"""

from __future__ import annotations

import math
import multiprocessing
import os
import signal
import time
import warnings
from collections.abc import Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.cells import MarketCells, build_cells
from marketsim.designs import Design, GlobalControl, GlobalTreatment
from marketsim.engine.front import START_OPTIONS, run_cells, starting_availability
from marketsim.estimators import (
    METRICS,
    Estimator,
    GroupTotals,
    default_estimators,
    metric_rate,
)
from marketsim.market import Market, Treatment
from marketsim.power import critical_value
from marketsim.randomness import SeedLike, seed_sequence

Z_95 = critical_value(0.05)
"""Two-sided 95% quantile of the standard normal, ``scipy.stats.norm.ppf(0.975)``."""

CAVEAT = (
    "Every figure is a Monte Carlo estimate from a model: read it with its Monte Carlo "
    "standard error (differences smaller than about two of them are noise), and only "
    "as far as the model's assumptions hold (Poisson arrivals, logit choice, "
    "exponential busy times, a stationary market)."
)

_MP_CONTEXT: str | None = None
"""Start method of worker processes (None: the platform default). Tests set "spawn"."""


# --------------------------------------------------------------------------- arms
@dataclass(frozen=True, init=False)
class Arm:
    """One design of a study, with the estimators to score on it.

    Parameters
    ----------
    design : Design
        How the experiment is randomized, e.g. ``ms.TwoSided(0.5, 0.5)``.
    estimators : Estimator or sequence of Estimator, optional
        Estimators to apply to the design's ledgers. Default: the design's own
        estimators that fit it (:func:`marketsim.estimators.default_estimators`:
        customer-side for customer-side randomization, listing-side for
        listing-side, the two-sided family for two-sided),
        leaving out any whose coefficients repeat an earlier one.
    name : str, optional
        Name of the arm in tables and plots (default: the design's label).

    Examples
    --------
    >>> import marketsim as ms
    >>> ms.Arm(ms.TwoSided(0.5, 0.5), [ms.TwoSidedNaive(), ms.TwoSidedCorrected(k=1)])
    Arm(two-sided (a_C=0.5, a_L=0.5): two-sided naive, two-sided corrected (k=1))
    """

    design: Design
    estimators: tuple[Estimator, ...] | None = None
    name: str | None = None

    def __init__(
        self,
        design: Design,
        estimators: Estimator | Sequence[Estimator] | None = None,
        name: str | None = None,
    ) -> None:
        if not isinstance(design, Design):
            raise ValueError(
                "design must be a marketsim.Design (e.g. ms.CustomerSide(0.5)), "
                f"got {type(design).__name__}"
            )
        if isinstance(estimators, Estimator):
            estimators = (estimators,)
        if estimators is not None:
            if isinstance(estimators, (str, bytes)) or not isinstance(estimators, Sequence):
                raise ValueError(
                    "estimators must be a marketsim.Estimator, a list of them or None, "
                    f"got {type(estimators).__name__}"
                )
            estimators = tuple(estimators)
            if not estimators:
                raise ValueError("estimators must not be empty (use None for every "
                                 "estimator that fits the design), got []")
            for item in estimators:
                if not isinstance(item, Estimator):
                    raise ValueError(
                        "estimators must contain marketsim.Estimator objects "
                        f"(e.g. ms.CustomerSideEstimator()), got {type(item).__name__}"
                    )
            names = [item.name for item in estimators]
            for item_name in names:
                if names.count(item_name) > 1:
                    raise ValueError(
                        f"estimators must have distinct names, got {item_name!r} twice"
                    )
        if name is not None and (not isinstance(name, str) or not name.strip()):
            raise ValueError(f"name must be a non-empty string or None, got {name!r}")
        object.__setattr__(self, "design", design)
        object.__setattr__(self, "estimators", estimators)
        object.__setattr__(self, "name", name)

    @property
    def label(self) -> str:
        """Name of the arm in tables: ``name``, or the design's label."""
        return self.name if self.name is not None else self.design.label

    def resolve(self, market: Market) -> tuple[Estimator, ...]:
        """The estimators this arm scores on ``market``, checked against the design.

        Raises
        ------
        ValueError
            If an estimator does not fit the design, or no built-in one does.
        """
        if self.estimators is None:
            chosen = default_estimators(self.design, market)
            if not chosen:
                raise ValueError(
                    f"arm {self.label!r} has no built-in estimator that fits its design "
                    f"{self.design!r} (it must randomize customers or listings); "
                    "pass estimators=[...] or use another design"
                )
            return chosen
        split = self.design.split(market)
        for estimator in self.estimators:
            try:
                estimator.weights(split, market)
            except ValueError as error:
                raise ValueError(
                    f"arm {self.label!r}: estimator {estimator.name!r} does not fit the "
                    f"design {self.design!r}: {error}"
                ) from None
        return self.estimators

    def __repr__(self) -> str:
        shown = "the design's own estimators" if self.estimators is None else ", ".join(
            e.name for e in self.estimators)
        return f"Arm({self.label}: {shown})"


# --------------------------------------------------------------------------- plan
@dataclass(frozen=True, eq=False)
class _Plan:
    """Everything one replication needs; built once, pickled to worker processes."""

    control: MarketCells
    treated: MarketCells
    control_start: np.ndarray
    treated_start: np.ndarray
    arm_cells: tuple[MarketCells, ...]
    arm_starts: tuple[np.ndarray, ...]
    arm_estimators: tuple[tuple[Estimator, ...], ...]
    arm_weights: tuple[tuple[np.ndarray | None, ...], ...]
    metrics: tuple[str, ...]
    horizon: float
    burn_in: float

    @property
    def n_rows(self) -> int:
        return sum(len(e) for e in self.arm_estimators) * len(self.metrics)


@dataclass(frozen=True, eq=False)
class _Outcome:
    """What one replication returns (small arrays, cheap to pickle)."""

    levels: np.ndarray      # (n_metrics, 2): global control, global treatment
    estimates: np.ndarray   # (n_rows,)
    errors: np.ndarray      # (n_rows,) naive standard errors
    events: int


def _replicate(plan: _Plan, root: tuple, index: int) -> _Outcome:
    """Run replication ``index``: both global worlds and every arm."""
    entropy, key, pool = root
    # Every run of the replication shares this seed (common random numbers);
    # marketsim.randomness never advances a SeedSequence, so reusing it is safe.
    shared = np.random.SeedSequence(entropy, spawn_key=(*key, index, 0), pool_size=pool)
    runs = {"horizon": plan.horizon, "burn_in": plan.burn_in, "seed": shared}
    control = run_cells(plan.control, start=plan.control_start, **runs)
    treated = run_cells(plan.treated, start=plan.treated_start, **runs)
    levels = np.empty((len(plan.metrics), 2))
    for m, metric in enumerate(plan.metrics):
        levels[m, 0] = metric_rate(control, metric)
        levels[m, 1] = metric_rate(treated, metric)
    estimates = np.empty(plan.n_rows)
    errors = np.empty(plan.n_rows)
    events = control.events + treated.events
    row = 0
    for a, cells in enumerate(plan.arm_cells):
        ledger = run_cells(cells, start=plan.arm_starts[a], **runs)
        events += ledger.events
        groups = [GroupTotals.of(ledger, metric) for metric in plan.metrics]
        splits = [g.analysis_split(cells.split) for g in groups]
        for e, estimator in enumerate(plan.arm_estimators[a]):
            weights = plan.arm_weights[a][e]
            for m, metric in enumerate(plan.metrics):
                if weights is None:  # the estimator computes its own estimate
                    result = estimator.estimate(ledger, metric)
                elif splits[m] is cells.split:
                    result = groups[m].combine(weights)
                else:  # conversion: coefficients at the observed split of arrivals
                    result = groups[m].combine(
                        estimator.stratum_weights(splits[m], cells.market))
                estimates[row], errors[row] = result.value, result.standard_error
                row += 1
    return _Outcome(levels, estimates, errors, int(events))


# Worker-process side ----------------------------------------------------------
_WORKER_PLAN: _Plan | None = None


def _init_worker(plan: _Plan) -> None:
    """Keep the plan in the worker; let only the parent process handle Ctrl-C."""
    global _WORKER_PLAN
    _WORKER_PLAN = plan
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _run_chunk(root: tuple, indices: range) -> tuple[range, list[_Outcome]]:
    assert _WORKER_PLAN is not None
    return indices, [_replicate(_WORKER_PLAN, root, r) for r in indices]


CHUNK_SECONDS = 0.2
"""Largest wall time of one block of replications sent to a worker."""


def _chunks(first: int, count: int, workers: int, seconds: float) -> list[range]:
    """Contiguous blocks of replications ``first .. count - 1`` for the workers.

    Guided sizes: a block is a quarter of the work left per worker, so blocks
    shrink towards the end and the workers finish together; and no block takes
    much more than :data:`CHUNK_SECONDS` (judged from ``seconds``, the time of
    one replication), so that Ctrl-C finds finished blocks and the progress bar
    moves. The blocks never change what a replication computes.
    """
    by_time = max(1, int(CHUNK_SECONDS / max(seconds, 1e-9)))
    blocks, start = [], first
    while start < count:
        size = max(1, min(by_time, (count - start) // (4 * workers)))
        blocks.append(range(start, min(start + size, count)))
        start += size
    return blocks


def _progress_bar(total: int, enabled: bool, initial: int = 0):
    """A tqdm bar that shows up only if the run lasts more than a second."""
    from tqdm import tqdm

    return tqdm(total=total, initial=initial, disable=not enabled, unit="replication",
                desc="study", delay=1.0, leave=False)


# --------------------------------------------------------------------------- study
class Study:
    """Monte Carlo study of experiment designs on one market and treatment.

    Parameters
    ----------
    market : Market
    treatment : Treatment
        The feature under test.
    arms : sequence of Arm or Design
        The designs to score; a bare design is ``Arm(design)`` (the design's own
        estimators that fit it). Arm names must be distinct.
    horizon : float
        Length of the measurement window of every run, > 0.
    burn_in : float
        Time simulated before the window and not recorded, >= 0.
    metric : str or sequence of str
        One or more of ``"bookings"`` (per unit time), ``"revenue"`` (per unit
        time; needs prices on the market) and ``"conversion"`` (bookings per
        arrival). Default ``"bookings"``.
    start : {"empty", "steady"}
        Availability at time 0 of every run: every listing available, or the
        large-market steady state of each world rounded to whole listings (a
        warm start that shortens the burn-in needed; see :func:`marketsim.simulate`).

    Notes
    -----
    The truth is the global treatment effect over the same window as the
    experiments (same horizon, burn-in and starting state), so a short burn-in
    affects truth and estimates alike. Everything is checked here, before any
    simulation: the arms, that each estimator fits its design, the metrics.

    Examples
    --------
    >>> import marketsim as ms
    >>> market = ms.scenarios.rehearsal_rooms()
    >>> study = ms.Study(market, ms.scenarios.instant_confirmation(),
    ...                  arms=[ms.CustomerSide(0.5), ms.ListingSide(0.5)],
    ...                  horizon=100.0, burn_in=20.0)
    >>> result = study.run(replications=10, seed=1, progress=False)
    >>> result.summary[["arm", "estimator"]].values.tolist()
    [['customer-side (a_C=0.5)', 'customer-side'], ['listing-side (a_L=0.5)', 'listing-side']]
    """

    def __init__(
        self,
        market: Market,
        treatment: Treatment,
        arms: Sequence[Arm | Design],
        *,
        horizon: float,
        burn_in: float = 0.0,
        metric: str | Sequence[str] = "bookings",
        start: str = "empty",
    ) -> None:
        if not isinstance(market, Market):
            raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
        if not isinstance(treatment, Treatment):
            raise ValueError(
                "treatment must be a marketsim.Treatment (e.g. ms.Treatment(utility_shift="
                f"0.2)), got {type(treatment).__name__}"
            )
        self.market = market
        self.treatment = treatment
        self.horizon = check.number("horizon", horizon, low=0.0, low_open=True)
        self.burn_in = check.number("burn_in", burn_in, low=0.0)
        self.metrics = _metrics(metric, market)
        self.arms = _arms(arms)
        self.start = check.choice("start", start, START_OPTIONS)
        self.estimators = tuple(arm.resolve(market) for arm in self.arms)
        self._plan = self._build_plan()

    def _build_plan(self) -> _Plan:
        def world(design: Design) -> tuple[MarketCells, np.ndarray]:
            cells = build_cells(self.market, self.treatment, design)
            return cells, starting_availability(cells, self.start)

        control, control_start = world(GlobalControl())
        treated, treated_start = world(GlobalTreatment())
        arm_worlds = [world(arm.design) for arm in self.arms]
        weights = tuple(
            tuple(
                estimator.stratum_weights(cells.split, self.market)
                if type(estimator).estimate is Estimator.estimate else None
                for estimator in estimators
            )
            for (cells, _), estimators in zip(arm_worlds, self.estimators)
        )
        return _Plan(
            control=control, treated=treated, control_start=control_start,
            treated_start=treated_start,
            arm_cells=tuple(c for c, _ in arm_worlds),
            arm_starts=tuple(s for _, s in arm_worlds),
            arm_estimators=self.estimators, arm_weights=weights, metrics=self.metrics,
            horizon=self.horizon, burn_in=self.burn_in,
        )

    def rows(self) -> pd.DataFrame:
        """The rows the summary will have: arm x estimator x metric, in order."""
        return pd.DataFrame(
            [
                {"arm": arm.label, "design": arm.design.label, "estimator": e.name,
                 "metric": metric}
                for arm, estimators in zip(self.arms, self.estimators)
                for e in estimators
                for metric in self.metrics
            ],
            columns=["arm", "design", "estimator", "metric"],
        )

    def run(
        self,
        replications: int,
        seed: SeedLike = None,
        workers: int = 1,
        progress: bool = True,
    ) -> StudyResult:
        """Run the replications and summarize them.

        Parameters
        ----------
        replications : int
            Number of independent replications, >= 2.
        seed : int, SeedSequence, Generator or None
            Same seed, same result, whatever ``workers`` is.
        workers : int
            Worker processes (>= 1); 1 runs in this process.
        progress : bool
            Show a progress bar (it appears only after a second of running).

        Returns
        -------
        StudyResult

        Notes
        -----
        Ctrl-C (``KeyboardInterrupt``) stops the run: pending work is cancelled
        and the result of the replications already finished is returned with a
        warning (at least 2 must have finished; otherwise the interrupt goes on).

        With ``workers > 1`` the market, designs and estimators are sent to worker
        processes, so they must pickle. Where workers start by "spawn" (macOS and
        Windows), a custom design or estimator must be importable from a module:
        a class defined in a notebook cell works with ``workers=1`` only.
        """
        count = check.whole_number("replications", replications, low=2)
        workers = check.whole_number("workers", workers, low=1)
        if not isinstance(progress, bool):
            raise ValueError(f"progress must be True or False, got {progress!r}")
        root_seed = seed_sequence(seed)
        root = (root_seed.entropy, tuple(root_seed.spawn_key), root_seed.pool_size)
        outcomes: dict[int, _Outcome] = {}
        began = time.perf_counter()
        interrupted = False
        workers = min(workers, count)
        try:
            if workers == 1:
                self._run_here(root, count, outcomes, progress)
            else:
                self._run_workers(root, count, workers, outcomes, progress)
        except KeyboardInterrupt:
            interrupted = True
            if len(outcomes) < 2:
                raise
            warnings.warn(
                f"study interrupted: {len(outcomes)} of {count} replications finished; "
                "returning the summary of those (wider Monte Carlo errors)",
                RuntimeWarning, stacklevel=2,
            )
        elapsed = time.perf_counter() - began
        return _result(self, outcomes, count, interrupted, elapsed, workers)

    def _run_here(self, root: tuple, count: int, outcomes: dict, progress: bool) -> None:
        bar = _progress_bar(count, progress)
        try:
            for index in range(count):
                outcomes[index] = _replicate(self._plan, root, index)
                bar.update(1)
        finally:
            bar.close()

    def _run_workers(self, root: tuple, count: int, workers: int, outcomes: dict,
                     progress: bool) -> None:
        context = multiprocessing.get_context(_MP_CONTEXT)
        executor = ProcessPoolExecutor(max_workers=workers, mp_context=context,
                                       initializer=_init_worker, initargs=(self._plan,))
        pending: set = set()
        bar = None
        clean = False
        try:
            began = time.perf_counter()  # one replication here, to size the blocks
            outcomes[0] = _replicate(self._plan, root, 0)
            blocks = _chunks(1, count, workers, time.perf_counter() - began)
            pending = {executor.submit(_run_chunk, root, block) for block in blocks}
            bar = _progress_bar(count, progress, initial=1)  # after the workers start
            while pending:
                done, pending = wait(pending, return_when=FIRST_COMPLETED)
                for future in done:
                    indices, results = future.result()
                    outcomes.update(zip(indices, results))
                    bar.update(len(indices))
            clean = True
        finally:
            if bar is not None:
                bar.close()
            if clean:
                executor.shutdown(wait=True)
            else:
                for future in pending:
                    future.cancel()
                for future in pending:  # finished while we were being interrupted
                    if future.done() and not future.cancelled() and not future.exception():
                        indices, results = future.result()
                        outcomes.update(zip(indices, results))
                _stop(executor)

    def __repr__(self) -> str:
        arms = "; ".join(repr(a) for a in self.arms)
        return (
            f"Study({self.market!r}, {self.treatment!r}, arms=[{arms}], "
            f"horizon={self.horizon:g}, burn_in={self.burn_in:g}, "
            f"metrics={list(self.metrics)})"
        )


def _stop(executor: ProcessPoolExecutor) -> None:
    """Cancel queued work and end the worker processes this study started."""
    started = dict(getattr(executor, "_processes", None) or {})
    executor.shutdown(wait=False, cancel_futures=True)
    for process in started.values():
        if process.is_alive():
            process.terminate()
    for process in started.values():
        process.join(timeout=5)


def _metrics(metric: object, market: Market) -> tuple[str, ...]:
    items = [metric] if isinstance(metric, str) else metric
    if not isinstance(items, Sequence) or len(items) == 0:
        listed = ", ".join(repr(m) for m in METRICS)
        raise ValueError(f"metric must be one of {listed} or a non-empty list of them, "
                         f"got {metric!r}")
    result = []
    for item in items:
        check.choice("metric", item, METRICS)
        if item in result:
            raise ValueError(f"metric must not repeat a name, got {item!r} twice")
        result.append(item)
    if "revenue" in result and market.price is None:
        raise ValueError(
            "metric 'revenue' needs a market with prices: pass price=[...] to ms.Market, "
            "got a market without prices"
        )
    return tuple(result)


def _arms(arms: object) -> tuple[Arm, ...]:
    if isinstance(arms, (Arm, Design)):
        arms = [arms]
    if isinstance(arms, (str, bytes)) or not isinstance(arms, Sequence) or len(arms) == 0:
        raise ValueError(
            "arms must be a non-empty list of ms.Arm or ms.Design "
            f"(e.g. [ms.CustomerSide(0.5), ms.ListingSide(0.5)]), got {arms!r}"
        )
    result = []
    for item in arms:
        if isinstance(item, Design):
            item = Arm(item)
        if not isinstance(item, Arm):
            raise ValueError(
                f"arms must contain ms.Arm or ms.Design objects, got {type(item).__name__}"
            )
        result.append(item)
    labels = [arm.label for arm in result]
    for label in labels:
        if labels.count(label) > 1:
            raise ValueError(
                f"arms must have distinct names, got {label!r} twice "
                "(name them: ms.Arm(design, name='...'))"
            )
    return tuple(result)


# --------------------------------------------------------------------------- result
SUMMARY_COLUMNS = (
    "arm", "design", "estimator", "metric", "truth", "truth_mc_se", "mean_estimate",
    "bias", "bias_mc_se", "relative_bias", "relative_bias_mc_se", "sd", "rmse",
    "rmse_mc_se", "mean_naive_se", "coverage", "coverage_mc_se", "replications",
)


@dataclass(frozen=True, eq=False)
class StudyResult:
    """What a :meth:`Study.run` found.

    Attributes
    ----------
    truth : pandas.DataFrame
        One row per metric: ``metric``; ``value``, the global treatment effect
        (mean over replications of global treatment minus global control, both
        worlds sharing their random numbers); ``mc_se``, its Monte Carlo
        standard error; ``global_control`` and ``global_treatment``, the mean
        level of the metric in each world; ``replications``.
    summary : pandas.DataFrame
        One row per arm x estimator x metric (columns below); ``n`` is the
        number of replications, ``e_r`` the estimate, ``s_r`` its naive standard
        error and ``t_r`` the global effect of replication ``r``, ``T`` their
        mean (the truth).

        - ``arm``, ``design``, ``estimator``, ``metric``: what the row scores.
        - ``truth``, ``truth_mc_se``: ``T`` and its Monte Carlo standard error.
        - ``mean_estimate``: mean of ``e_r``.
        - ``bias``: ``mean_estimate - T``; ``bias_mc_se``: standard deviation of
          the paired differences ``e_r - t_r`` over ``sqrt(n)``.
        - ``relative_bias``: ``bias / T`` (NaN when ``T`` is 0);
          ``relative_bias_mc_se``: its delta-method (ratio-estimator) standard
          error, which accounts for the error of ``T`` too.
        - ``sd``: standard deviation of ``e_r`` (the real noise of the estimator).
        - ``rmse``: ``sqrt(mean((e_r - T)**2))``; ``rmse_mc_se`` by the delta method,
          which accounts for the error of ``T`` too (:func:`rmse_influence`).
        - ``mean_naive_se``: mean of ``s_r``, the standard error an analyst who
          treats units as independent would report; compare it with ``sd``.
        - ``coverage``: share of replications whose nominal 95% interval
          ``e_r +- 1.96 s_r`` contains ``T``; ``coverage_mc_se``:
          ``sqrt(c (1 - c) / n)``.
        - ``replications``: ``n``.

        Every figure carries Monte Carlo error and rests on the model's
        assumptions; see :attr:`caveats`.
    replications : pandas.DataFrame
        The raw figures, one row per replication x arm x estimator x metric:
        ``replication`` (index ``r``), ``arm``, ``design``, ``estimator``,
        ``metric``, ``estimate``, ``naive_se`` and ``replication_truth`` (the
        global effect ``t_r`` of that replication).
    completed : int
        Replications that finished.
    requested : int
        Replications asked for.
    interrupted : bool
        Whether the run was stopped early (Ctrl-C).
    events_per_replication : float
        Mean number of simulated events per replication (all worlds and arms).
    elapsed : float
        Wall time of the run in seconds.
    workers : int
        Worker processes used.
    """

    truth: pd.DataFrame
    summary: pd.DataFrame
    replications: pd.DataFrame
    completed: int
    requested: int
    interrupted: bool
    events_per_replication: float
    elapsed: float
    workers: int

    @property
    def caveats(self) -> str:
        """What the figures are worth, in words (printed by the demo)."""
        notes = [CAVEAT]
        if self.interrupted:
            notes.append(f"The run was interrupted: only {self.completed} of "
                         f"{self.requested} replications are summarized.")
        zero = self.truth.loc[self.truth["value"] == 0.0, "metric"].tolist()
        if zero:
            notes.append(f"The global effect is exactly 0 for {', '.join(zero)}: relative "
                         "bias is undefined (NaN) there.")
        return " ".join(notes)

    def to_frame(self) -> pd.DataFrame:
        """The summary table (a copy)."""
        return self.summary.copy()

    def overview(self, digits: int = 3) -> pd.DataFrame:
        """A compact, rounded view of the summary for printing.

        Columns: ``arm, estimator, metric`` (only when several), ``truth, mean,
        bias, relative bias, sd, rmse, coverage``; numbers to ``digits``
        significant digits.
        """
        digits = check.whole_number("digits", digits, low=1)
        table = self.summary
        columns = {"arm": "arm", "estimator": "estimator"}
        if table["metric"].nunique() > 1:
            columns["metric"] = "metric"
        columns.update({"truth": "truth", "mean_estimate": "mean", "bias": "bias",
                        "relative_bias": "relative bias", "sd": "sd", "rmse": "rmse",
                        "coverage": "coverage"})
        view = table[list(columns)].rename(columns=columns).copy()
        for name in view.columns:
            if pd.api.types.is_float_dtype(view[name]):
                view[name] = [float(f"{x:.{digits}g}") if np.isfinite(x) else x
                              for x in view[name]]
        return view

    def plot(self, metric: str | None = None):
        """Relative bias and RMSE per arm and estimator, with +-2 Monte Carlo s.e.

        Parameters
        ----------
        metric : str, optional
            Which metric to draw (default: the first of the study).

        Returns
        -------
        matplotlib.figure.Figure
        """
        from marketsim.plotting.study import plot_study

        return plot_study(self, metric=metric)

    def __repr__(self) -> str:
        state = ", interrupted" if self.interrupted else ""
        return (
            f"StudyResult({self.completed} of {self.requested} replications{state}, "
            f"{len(self.summary)} rows, {self.elapsed:.3g} s on {self.workers} worker(s))"
        )


def _result(study: Study, outcomes: dict[int, _Outcome], requested: int,
            interrupted: bool, elapsed: float, workers: int) -> StudyResult:
    order = sorted(outcomes)
    n = len(order)
    levels = np.stack([outcomes[r].levels for r in order])        # (n, M, 2)
    estimates = np.stack([outcomes[r].estimates for r in order])  # (n, K)
    errors = np.stack([outcomes[r].errors for r in order])
    events = float(np.mean([outcomes[r].events for r in order]))
    effects = levels[:, :, 1] - levels[:, :, 0]                   # (n, M)
    root = math.sqrt(n)

    truth_rows = []
    for m, metric in enumerate(study.metrics):
        truth_rows.append({
            "metric": metric,
            "value": float(effects[:, m].mean()),
            "mc_se": float(effects[:, m].std(ddof=1) / root),
            "global_control": float(levels[:, m, 0].mean()),
            "global_treatment": float(levels[:, m, 1].mean()),
            "replications": n,
        })
    truth = pd.DataFrame(truth_rows)

    labels = study.rows()
    metric_index = {metric: m for m, metric in enumerate(study.metrics)}
    rows = []
    for k, label in enumerate(labels.itertuples(index=False)):
        m = metric_index[label.metric]
        e, s, t = estimates[:, k], errors[:, k], effects[:, m]
        rows.append({**label._asdict(), **_score(e, s, t)})
    summary = pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))

    k_rows = len(labels)
    raw = pd.DataFrame({
        "replication": np.repeat(np.array(order, dtype=np.int64), k_rows),
        "arm": np.tile(labels["arm"].to_numpy(object), n),
        "design": np.tile(labels["design"].to_numpy(object), n),
        "estimator": np.tile(labels["estimator"].to_numpy(object), n),
        "metric": np.tile(labels["metric"].to_numpy(object), n),
        "estimate": estimates.reshape(-1),
        "naive_se": errors.reshape(-1),
        "replication_truth": effects[:, [metric_index[x] for x in labels["metric"]]].reshape(-1),
    })
    return StudyResult(truth=truth, summary=summary, replications=raw, completed=n,
                       requested=requested, interrupted=interrupted,
                       events_per_replication=events, elapsed=elapsed, workers=workers)


def _score(e: np.ndarray, s: np.ndarray, t: np.ndarray) -> dict[str, float]:
    """Summary figures of one estimator: estimates ``e``, naive s.e. ``s``, truths ``t``."""
    n = e.size
    root = math.sqrt(n)
    truth = float(t.mean())
    mean = float(e.mean())
    bias = mean - truth
    paired = e - t
    if truth != 0.0:
        ratio = mean / truth
        relative = ratio - 1.0
        relative_se = float(np.std(e - ratio * t, ddof=1) / (root * abs(truth)))
    else:
        relative, relative_se = math.nan, math.nan
    deviation = e - truth
    rmse = math.sqrt(float(np.mean(deviation**2)))
    rmse_se = float(np.std(rmse_influence(e, t), ddof=1) / root)
    covered = float(np.mean(np.abs(deviation) <= Z_95 * s))
    return {
        "truth": truth,
        "truth_mc_se": float(t.std(ddof=1) / root),
        "mean_estimate": mean,
        "bias": bias,
        "bias_mc_se": float(paired.std(ddof=1) / root),
        "relative_bias": relative,
        "relative_bias_mc_se": relative_se,
        "sd": float(e.std(ddof=1)),
        "rmse": rmse,
        "rmse_mc_se": rmse_se,
        "mean_naive_se": float(s.mean()),
        "coverage": covered,
        "coverage_mc_se": math.sqrt(covered * (1.0 - covered) / n),
        "replications": n,
    }


def rmse_influence(e: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Per-replication influence values of ``rmse = sqrt(mean((e_r - T)**2))``, ``T =
    mean(t_r)``: their standard deviation over ``sqrt(n)`` is the delta-method Monte
    Carlo standard error of the RMSE, and that of the difference of two rows' values
    is the paired standard error of the difference of their RMSEs.

    The truth ``T`` is itself a Monte Carlo mean, so it enters too:
    ``d(mse)/dT = -2 bias`` gives ``((e_r - T)**2 - 2 bias (t_r - T)) / (2 rmse)``
    (up to a constant). All zero when the RMSE is 0.
    """
    truth = float(t.mean())
    deviation = e - truth
    rmse = math.sqrt(float(np.mean(deviation**2)))
    if rmse == 0.0:
        return np.zeros_like(deviation)
    bias = float(deviation.mean())
    return (deviation**2 - 2.0 * bias * (t - truth)) / (2.0 * rmse)


def default_workers() -> int:
    """Number of CPU cores this process may use (at least 1)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


__all__ = ["Arm", "Study", "StudyResult", "SUMMARY_COLUMNS", "CAVEAT", "default_workers"]
