"""Running one or more studies together: backends, results store, interruption.

:meth:`Study.run`, :func:`marketsim.sweep` (one study per point),
:func:`marketsim.choose_design` and :func:`marketsim.plan_horizon` (two pilot
studies) all come here, so they share one pool of workers (or one Dask
cluster), one progress bar and one results store.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from marketsim import _validation as check
from marketsim.randomness import SeedLike, seed_sequence, spawn
from marketsim.study import backends, replication
from marketsim.study.guards import limits, refuse
from marketsim.study.replication import VALUE_COLUMNS, Replicated
from marketsim.study.result import StudyResult, summarize
from marketsim.study.store import MANIFEST, ResultsStore, describe, read_manifest, seed_from_record


def study_question(study) -> dict:
    """What a study asks, in canonical form: its public attributes and summary rows."""
    asked = {name: describe(value) for name, value in sorted(vars(study).items())
             if not name.startswith("_")}
    asked["rows"] = study.rows().to_numpy().tolist()
    return asked


def open_store(store: object, *, kind: str, question: dict, seed: SeedLike
               ) -> tuple[ResultsStore | None, np.random.SeedSequence]:
    """The results store (or None) and the root seed; ``seed=None`` takes the store's."""
    if store is None:
        return None, seed_sequence(seed)
    if not isinstance(store, (str, Path)) or not str(store).strip():
        raise ValueError(f"store must be a folder path (str or pathlib.Path) or None, "
                         f"got {store!r}")
    if seed is None and (Path(store) / MANIFEST).exists():
        root = seed_from_record(read_manifest(store)["seed"])
    else:
        root = seed_sequence(seed)
    return ResultsStore(store, kind=kind, question=question, seed=root), root


def run_studies(studies: Sequence, replications: int, seed: SeedLike, *, kind: str,
                split: bool, backend: str = "local", workers: int = 1, client: object = None,
                store: object = None, progress: bool = True, desc: str = "study",
                asked: dict | None = None, max_seconds: float | None = None,
                max_events: int | None = None) -> tuple[list[StudyResult | None], bool]:
    """Run ``replications`` of every study; see the module docstring.

    Parameters
    ----------
    studies : sequence of Study
    replications : int
        Replications of each study, >= 2.
    seed : int, SeedSequence, Generator or None
        Root seed. With ``split`` study ``j`` uses its child with spawn key
        ``j`` (:func:`marketsim.randomness.spawn`); without, the one study uses it.
    kind : str
        What is run (``"study"``, ``"sweep"``, ...), recorded in the store.
    backend, workers, client, store, progress
        As for :meth:`Study.run`.
    desc : str
        Label of the progress bar.
    asked : dict, optional
        More of the question (e.g. a sweep's values), recorded in the store.
    max_seconds, max_events : float, int, optional
        Refuse the run (``ValueError`` with the estimate) if, judged from its
        first replication (events) and a warm one (time; the first includes
        loading the kernels), the whole would take longer or simulate more events.

    Returns
    -------
    results : list of StudyResult or None
        Per study (None where fewer than 2 replications finished).
    interrupted : bool
        Whether Ctrl-C stopped the run (the results then hold what finished).
    """
    count = check.whole_number("replications", replications, low=2)
    workers = check.whole_number("workers", workers, low=1)
    check.choice("backend", backend, backends.BACKENDS)
    if not isinstance(progress, bool):
        raise ValueError(f"progress must be True or False, got {progress!r}")
    if backend == "local" and client is not None:
        raise ValueError("client is only for backend='dask', got backend='local' and "
                         f"client={client!r}")
    if backend == "dask" and client is None:
        backends.dask_client(client)  # the error that says what client must be
    max_seconds, max_events = limits(max_seconds, max_events)

    def check_estimate(seconds: float | None, outcome, total: int, used: int) -> None:
        if seconds is None:  # the first replication, not timed yet: its events
            refuse(f"this {kind}", outcome.events * total, None,
                   f"estimated from its first replication ({outcome.events:,} events)",
                   None, max_events)
            return
        refuse(f"this {kind}", outcome.events * total, seconds * total / used,
               f"estimated from its first replication ({outcome.events:,} events) and a "
               f"warm one ({seconds:.3g} s) on {used} worker(s)", max_seconds, max_events)

    question = {"studies": [study_question(s) for s in studies], **(asked or {})}
    opened, root = open_store(store, kind=kind, question=question, seed=seed)
    roots = spawn(root, len(studies)) if split else [root]
    rows = [study.rows() for study in studies]
    done = [opened.finished(j, len(rows[j])) if opened else set() for j in range(len(studies))]
    kept: list[dict] = [{} for _ in studies]

    def deliver(job: int, indices: range, outcomes: list) -> None:
        if opened is None:
            kept[job].update(zip(indices, outcomes))
            return
        figures = Replicated.of(dict(zip(indices, outcomes)))
        opened.write(job, indices, figures.table(rows[job], studies[job].metrics))
        done[job].update(indices)

    work = backends.Work(
        replicate=replication.replicate,  # looked up now, so tests can replace it
        plans=tuple(study.plan for study in studies),
        roots=tuple((r.entropy, tuple(r.spawn_key), r.pool_size) for r in roots),
        todo=tuple(tuple(i for i in range(count) if i not in done[j])
                   for j in range(len(studies))))
    if opened is not None:
        opened.start_run(replications=count, backend=backend)
    began = time.perf_counter()
    interrupted = False
    used = min(workers, max(1, work.total))
    try:
        used = backends.run(work, deliver, backend=backend, workers=used, client=client,
                            progress=progress, desc=desc, check=check_estimate)
    except KeyboardInterrupt:
        interrupted = True
    elapsed = time.perf_counter() - began
    results: list[StudyResult | None] = []
    for j, study in enumerate(studies):
        if opened is None:
            figures = Replicated.of(kept[j]) if len(kept[j]) >= 2 else None
        else:
            finished = sorted(i for i in done[j] if i < count)
            figures = None
            if len(finished) >= 2:
                table = opened.read(j, finished, len(rows[j]), VALUE_COLUMNS)
                figures = Replicated.from_table(table, rows[j], study.metrics)
        results.append(None if figures is None else summarize(
            study.metrics, rows[j], figures, count, figures.order.size < count, elapsed, used,
            batches=study.batches))
    if opened is not None:
        opened.end_run(workers=used, elapsed=round(elapsed, 3), interrupted=interrupted)
    return results, interrupted
