"""One replication of a study (both global worlds and every arm) and the
per-replication figures of many (:mod:`marketsim.study.backends` shares the
replications out to workers)."""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim.designs import Switchback
from marketsim.engine import MarketCells, run_cells
from marketsim.estimators import Estimator, GroupTotals, metric_rate

VALUE_COLUMNS = ["estimate", "naive_se", "batch_se", "replication_truth", "global_control",
                 "global_treatment", "events"]
"""Numbers of each row of a stored chunk (besides its replication and labels)."""


@dataclass(frozen=True, eq=False)
class Plan:
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
    batches: int

    @property
    def n_rows(self) -> int:
        return sum(len(e) for e in self.arm_estimators) * len(self.metrics)


@dataclass(frozen=True, eq=False)
class Outcome:
    """What one replication returns (small arrays, cheap to pickle)."""

    levels: np.ndarray      # (n_metrics, 2): global control, global treatment
    estimates: np.ndarray   # (n_rows,)
    errors: np.ndarray      # (n_rows,) naive standard errors
    batch_errors: np.ndarray  # (n_rows,) batch-means standard errors
    events: int


def replicate(plan: Plan, root: tuple, index: int) -> Outcome:
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
    batch_errors = np.empty(plan.n_rows)
    events = control.events + treated.events
    row = 0
    for a, cells in enumerate(plan.arm_cells):
        # a switchback's ledger is by blocks (its standard error is block-to-block);
        # every other arm gets the batches of the batch-means standard error
        bins = None if isinstance(cells.design, Switchback) else plan.batches
        ledger = run_cells(cells, start=plan.arm_starts[a], bins=bins, **runs)
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
                batch_errors[row] = result.batch_se
                row += 1
    return Outcome(levels, estimates, errors, batch_errors, int(events))


@dataclass(frozen=True, eq=False)
class Replicated:
    """Per-replication figures of one study, in replication order.

    Attributes
    ----------
    order : ndarray of int, shape (n,)
        Replication indices.
    levels : ndarray, shape (n, n_metrics, 2)
        Metric in the global control and global treatment worlds.
    estimates, errors, batch_errors : ndarray, shape (n, n_rows)
        Estimate, naive and batch-means standard error of each summary row.
    events : ndarray of int, shape (n,)
        Simulated events of the replication (all worlds and arms).
    """

    order: np.ndarray
    levels: np.ndarray
    estimates: np.ndarray
    errors: np.ndarray
    batch_errors: np.ndarray
    events: np.ndarray

    @classmethod
    def of(cls, outcomes: dict) -> Replicated:
        """From a dict ``index -> outcome`` (outcomes have levels, estimates, errors,
        batch_errors, events)."""
        order = sorted(outcomes)
        return cls(
            order=np.array(order, dtype=np.int64),
            levels=np.stack([outcomes[r].levels for r in order]),
            estimates=np.stack([outcomes[r].estimates for r in order]),
            errors=np.stack([outcomes[r].errors for r in order]),
            batch_errors=np.stack([outcomes[r].batch_errors for r in order]),
            events=np.array([outcomes[r].events for r in order], dtype=np.int64),
        )

    @classmethod
    def from_table(cls, table: pd.DataFrame, rows: pd.DataFrame,
                   metrics: Sequence[str]) -> Replicated:
        """From stored rows (``n * len(rows)`` of them, replication by replication)."""
        k_rows = len(rows)
        n = len(table) // k_rows
        shaped = {name: table[name].to_numpy().reshape(n, k_rows) for name in VALUE_COLUMNS}
        first = [int(np.flatnonzero(rows["metric"].to_numpy() == m)[0]) for m in metrics]
        levels = np.stack([shaped["global_control"][:, first],
                           shaped["global_treatment"][:, first]], axis=2)
        return cls(order=_order_of(table, n, k_rows), levels=levels,
                   estimates=shaped["estimate"], errors=shaped["naive_se"],
                   batch_errors=shaped["batch_se"],
                   events=shaped["events"][:, 0].astype(np.int64))

    def table(self, rows: pd.DataFrame, metrics: Sequence[str]) -> pd.DataFrame:
        """The tidy per-replication table: one row per replication x summary row."""
        n, k_rows = self.estimates.shape
        index = {metric: m for m, metric in enumerate(metrics)}
        by_row = [index[x] for x in rows["metric"]]
        effects = self.levels[:, :, 1] - self.levels[:, :, 0]
        return pd.DataFrame({
            "replication": np.repeat(self.order, k_rows),
            **{name: np.tile(rows[name].to_numpy(object), n)
               for name in ("arm", "design", "estimator", "metric")},
            "estimate": self.estimates.reshape(-1),
            "naive_se": self.errors.reshape(-1),
            "batch_se": self.batch_errors.reshape(-1),
            "replication_truth": effects[:, by_row].reshape(-1),
            "global_control": self.levels[:, by_row, 0].reshape(-1),
            "global_treatment": self.levels[:, by_row, 1].reshape(-1),
            "events": np.repeat(self.events, k_rows),
        })


def _order_of(table: pd.DataFrame, n: int, k_rows: int) -> np.ndarray:
    return table["replication"].to_numpy().reshape(n, k_rows)[:, 0].astype(np.int64)


def default_workers() -> int:
    """Number of CPU cores this process may use (at least 1)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


__all__ = ["Plan", "Outcome", "Replicated", "replicate", "default_workers"]
