"""One replication of a study (both global worlds and every arm), and how
replications are shared out to worker processes."""

from __future__ import annotations

import os
import signal
from dataclasses import dataclass

import numpy as np

from marketsim.engine import MarketCells, run_cells
from marketsim.estimators import Estimator, GroupTotals, metric_rate


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

    @property
    def n_rows(self) -> int:
        return sum(len(e) for e in self.arm_estimators) * len(self.metrics)


@dataclass(frozen=True, eq=False)
class Outcome:
    """What one replication returns (small arrays, cheap to pickle)."""

    levels: np.ndarray      # (n_metrics, 2): global control, global treatment
    estimates: np.ndarray   # (n_rows,)
    errors: np.ndarray      # (n_rows,) naive standard errors
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
    return Outcome(levels, estimates, errors, int(events))


# Worker-process side ----------------------------------------------------------
_WORKER_PLAN: Plan | None = None


def init_worker(plan: Plan) -> None:
    """Keep the plan in the worker; let only the parent process handle Ctrl-C."""
    global _WORKER_PLAN
    _WORKER_PLAN = plan
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def run_chunk(root: tuple, indices: range) -> tuple[range, list[Outcome]]:
    assert _WORKER_PLAN is not None
    return indices, [replicate(_WORKER_PLAN, root, r) for r in indices]


CHUNK_SECONDS = 0.2
"""Largest wall time of one block of replications sent to a worker."""


def chunks(first: int, count: int, workers: int, seconds: float) -> list[range]:
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


def progress_bar(total: int, enabled: bool, initial: int = 0):
    """A tqdm bar that shows up only if the run lasts more than a second."""
    from tqdm import tqdm

    return tqdm(total=total, initial=initial, disable=not enabled, unit="replication",
                desc="study", delay=1.0, leave=False)


def default_workers() -> int:
    """Number of CPU cores this process may use (at least 1)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


__all__ = ["Plan", "Outcome", "replicate", "CHUNK_SECONDS", "default_workers"]
