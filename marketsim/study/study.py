"""Study: the Monte Carlo study of designs and estimators on one market."""

from __future__ import annotations

import os
import warnings
from collections.abc import Sequence

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.designs import Design, GlobalControl, GlobalTreatment, Switchback
from marketsim.engine import START_OPTIONS, MarketCells, build_cells
from marketsim.estimators import METRICS
from marketsim.estimators.batches import check_batches
from marketsim.model import Market, Treatment
from marketsim.randomness import SeedLike
from marketsim.study.arms import Arm, arm_list
from marketsim.study.replication import Plan
from marketsim.study.result import StudyResult
from marketsim.study.runs import run_studies
from marketsim.study.single_run import starting_availability


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
        Length of the measured window of every run, > 0: the experiment's
        horizon, which starts after the burn-in (the burn-in is simulated first
        and not measured).
    burn_in : float
        Time simulated before the window and not recorded, >= 0.
    metric : str or sequence of str
        One or more of ``"bookings"`` (per unit time), ``"revenue"`` (per unit
        time; needs prices on the market) and ``"conversion"`` (bookings per
        arrival). Default ``"bookings"``.
    start : {"empty", "steady"}
        Availability at time 0 of every run: every listing available, or the
        large-market steady state of each world rounded to whole listings (a
        warm start that shortens the burn-in needed; with busy times that are
        not exponential, busy listings start with remaining times drawn from
        the equilibrium law; see :func:`marketsim.simulate`).
    batches : int, optional
        Number of consecutive batches each experiment's window is cut into for
        its batch-means standard error (:mod:`marketsim.estimators.batches`),
        >= 2. Default: 20, fewer when batches would be shorter than 5 mean busy
        times (:func:`~marketsim.estimators.batches.default_batches`); a warning
        when a batch is shorter than one mean busy time.

    Notes
    -----
    The truth is the global treatment effect over the same window as the
    experiments (same horizon, burn-in and starting state), so a short burn-in
    affects truth and estimates alike. Everything is checked here, before any
    simulation: the arms, that each estimator fits its design, the metrics.

    Markets with any busy-time shape or a demand profile run as they are (the
    engine is chosen per market). Under a demand profile, the truth and the
    estimates describe the window simulated: give ``burn_in`` and ``horizon``
    in whole periods (for a daily profile in hours, multiples of 24) so that
    they average over whole days, as the global treatment effect does.

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
        batches: int | None = None,
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
        self.arms = arm_list(arms)
        for arm in self.arms:
            if isinstance(arm.design, Switchback):
                arm.design.check_horizon(self.horizon)
        self.start = check.choice("start", start, START_OPTIONS)
        self.batches = check_batches(batches, market, self.horizon)
        self.estimators = tuple(arm.resolve(market) for arm in self.arms)
        self._plan = self._build_plan()

    def _build_plan(self) -> Plan:
        def world(design: Design) -> tuple[MarketCells, np.ndarray]:
            cells = build_cells(self.market, self.treatment, design)
            return cells, starting_availability(cells, self.start)

        control, control_start = world(GlobalControl())
        treated, treated_start = world(GlobalTreatment())
        arm_worlds = [world(arm.design) for arm in self.arms]
        weights = tuple(
            tuple(
                estimator.stratum_weights(cells.split, self.market)
                if estimator.is_linear else None
                for estimator in estimators
            )
            for (cells, _), estimators in zip(arm_worlds, self.estimators)
        )
        return Plan(
            control=control, treated=treated, control_start=control_start,
            treated_start=treated_start,
            arm_cells=tuple(c for c, _ in arm_worlds),
            arm_starts=tuple(s for _, s in arm_worlds),
            arm_estimators=self.estimators, arm_weights=weights, metrics=self.metrics,
            horizon=self.horizon, burn_in=self.burn_in, batches=self.batches,
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

    @property
    def plan(self) -> Plan:
        """Everything one replication needs (built once; sent to workers)."""
        return self._plan

    def run(
        self,
        replications: int,
        seed: SeedLike = None,
        workers: int = 1,
        progress: bool = True,
        *,
        backend: str = "local",
        client: object = None,
        store: str | os.PathLike | None = None,
        max_seconds: float | None = None,
        max_events: int | None = None,
    ) -> StudyResult:
        """Run the replications and summarize them.

        Parameters
        ----------
        replications : int
            Number of independent replications, >= 2.
        seed : int, SeedSequence, Generator or None
            Same seed, same result, whatever ``workers`` or ``backend`` is.
            ``None``: fresh entropy, or the seed of ``store`` if it exists.
        workers : int
            Worker processes of the local backend (>= 1); 1 runs in this process.
        progress : bool
            Show a progress bar (it appears only after a second of running).
        backend : {"local", "dask"}
            Where replications run: this machine, or a Dask cluster (``client``).
        client : dask.distributed.Client or str, optional
            With ``backend="dask"``: a client, or the scheduler's address
            (``"tcp://host:8786"``). Every worker needs this version of marketsim.
        store : str or path, optional
            A results store folder: every finished chunk of replications is
            written there (Parquet, see :mod:`marketsim.study.store`), and a run
            into a store that already holds some replications of this study
            runs only the missing ones. A store made for another study or seed
            is refused.
        max_seconds, max_events : float, int, optional
            Refuse the run if, judged from its first two replications (run
            here before the others: the events of the first, the time of the
            second, as the first includes loading the kernels), the whole would
            take longer or simulate more events; the ``ValueError`` gives the
            estimate.

        Returns
        -------
        StudyResult

        Notes
        -----
        Replication ``r`` depends only on the seed and ``r``, so tables are
        identical whatever the backend, workers, chunking or interruptions.

        Ctrl-C (``KeyboardInterrupt``) stops the run: pending work is cancelled
        and the result of the replications already finished is returned with a
        warning (at least 2 must have finished; otherwise the interrupt goes on).
        With a store, they are kept there too, and the next run resumes.

        A worker process that dies (killed, out of memory) costs only the chunk
        it was running: it runs again on fresh workers (at most
        :data:`marketsim.study.backends.MAX_RETRIES` times), with a warning.

        With ``workers > 1`` or Dask the market, designs and estimators are sent
        to other processes, so they must pickle. Where workers start by "spawn"
        (macOS and Windows), a custom design or estimator must be importable from
        a module: a class defined in a notebook cell works with ``workers=1`` only.
        """
        results, interrupted = run_studies(
            [self], replications, seed, kind="study", split=False, backend=backend,
            workers=workers, client=client, store=store, progress=progress,
            max_seconds=max_seconds, max_events=max_events)
        result = results[0]
        if interrupted:
            if result is None:
                raise KeyboardInterrupt
            warnings.warn(
                f"study interrupted: {result.completed} of {result.requested} replications "
                "finished; returning the summary of those (wider Monte Carlo errors)"
                + (f"; they are kept in {str(store)!r}" if store is not None else ""),
                RuntimeWarning, stacklevel=2,
            )
        return result

    def __repr__(self) -> str:
        arms = "; ".join(repr(a) for a in self.arms)
        return (
            f"Study({self.market!r}, {self.treatment!r}, arms=[{arms}], "
            f"horizon={self.horizon:g}, burn_in={self.burn_in:g}, "
            f"metrics={list(self.metrics)}, batches={self.batches})"
        )


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


__all__ = ["Study"]
