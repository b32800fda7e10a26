"""Where replications run: this process, local worker processes, or a Dask cluster.

Every replication is a task that depends only on its study's plan, the study's
root seed and its own index (replication ``r`` is seeded by the spawn key
``r``), so any subset can run anywhere, in any order and any number of times
with identical results. Tasks go out in chunks of consecutive replications,
sized so that one chunk takes about :data:`CHUNK_SECONDS`: long enough that
scheduling costs little per replication, short enough that progress moves and
an interrupted or lost chunk costs little.

A worker that dies (killed, out of memory) loses only the chunks it held:
they run again on a fresh pool (local) or another worker (Dask), at most
:data:`MAX_RETRIES` times, with a warning.
"""

from __future__ import annotations

import math
import multiprocessing
import signal
import time
import warnings
from collections.abc import Callable, Sequence
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass

from marketsim.study.dask_backend import dask_client, run_dask, workers_of
from marketsim.study.progress import progress_bar_class

BACKENDS = ("local", "dask")

CHUNK_SECONDS = 0.5
"""Target wall time of one chunk of replications."""

MAX_CHUNK = 1000
"""Most replications in one chunk, however fast they are."""

MAX_RETRIES = 3
"""Times the chunks of a dead worker are run again before the run gives up."""

MP_CONTEXT: str | None = None
"""Start method of local worker processes (None: the platform default). Tests set "spawn"."""

Chunk = tuple[int, range]
"""(study number, consecutive replication indices)."""

Deliver = Callable[[int, range, list], None]


@dataclass(frozen=True)
class Work:
    """Replications to run, for one or more studies.

    Attributes
    ----------
    replicate : callable
        Module-level function ``(plan, root, index) -> outcome`` (it must pickle
        by reference).
    plans : tuple
        One plan per study (picklable).
    roots : tuple
        One root seed per study, as ``(entropy, spawn_key, pool_size)``.
    todo : tuple of tuple of int
        Per study, the replication indices still to run (sorted).
    """

    replicate: Callable
    plans: tuple
    roots: tuple
    todo: tuple[tuple[int, ...], ...]

    @property
    def total(self) -> int:
        return sum(len(indices) for indices in self.todo)


def run(work: Work, deliver: Deliver, *, backend: str = "local", workers: int = 1,
        client: object = None, progress: bool = True, desc: str = "study",
        check: Callable[[float | None, object, int, int], None] | None = None) -> int:
    """Run every replication of ``work``, calling ``deliver(study, indices, outcomes)``
    in this process as each chunk finishes; return the number of workers used
    (Dask: the cluster's threads). ``check(seconds, outcome, total, workers)``, if
    given, may refuse the run by raising: it sees the first replication's outcome
    (run here) with ``seconds=None`` as soon as it is done, and again with the time
    of a warm replication (:func:`_timed_here`) before the others start.

    Raises
    ------
    KeyboardInterrupt
        After stopping the workers; every chunk finished before was delivered.
    RuntimeError
        If the chunks of dead workers keep failing after :data:`MAX_RETRIES` retries.
    """
    if work.total == 0:
        return workers
    seconds, outcome, todo = _timed_here(work, deliver, check)
    started = work.total - sum(len(indices) for indices in todo)
    owned = None
    try:
        if backend == "dask":
            client, owned = dask_client(client)
            workers = max(1, sum(w["nthreads"] for w in workers_of(client).values()))
        if check is not None:
            check(seconds, outcome, work.total, workers)
        chunks = make_chunks(todo, workers, seconds)
        bar = _progress_bar(work.total, progress, desc, initial=started)
        try:
            if backend == "dask":
                run_dask(work, chunks, client, bar, deliver, retries=MAX_RETRIES,
                         describe=_describe)
            elif workers == 1:
                _run_here(work, chunks, bar, deliver)
            else:
                _run_pool(work, chunks, workers, bar, deliver)
        finally:
            bar.close()
        return workers
    finally:
        if owned is not None:
            owned.close()


def _timed_here(work: Work, deliver: Deliver, check: Callable | None
                ) -> tuple[float, object, list[tuple[int, ...]]]:
    """Run the first one or two replications here, to size the chunks and judge the run.

    The first one loads and compiles the kernels (seconds in a fresh process, far
    longer than a replication), so the second one is timed: sizing chunks from the
    first made them a replication each. ``check``, if given, sees the first one's
    outcome before the second runs (``seconds=None``: not timed yet). Returns the
    time of the faster of the two, the first outcome and what is left to do.
    """
    todo = [list(indices) for indices in work.todo]
    seconds, first = math.inf, None
    for _ in range(min(2, work.total)):
        job = next(j for j, indices in enumerate(todo) if indices)
        index = todo[job].pop(0)
        began = time.perf_counter()
        outcome = work.replicate(work.plans[job], work.roots[job], index)
        seconds = min(seconds, time.perf_counter() - began)
        deliver(job, range(index, index + 1), [outcome])
        if first is None:
            first = outcome
            if check is not None:
                check(None, outcome, work.total, 1)
    return seconds, first, [tuple(indices) for indices in todo]


def make_chunks(todo: Sequence[Sequence[int]], workers: int, seconds: float) -> list[Chunk]:
    """Chunks of consecutive indices covering ``todo``.

    Guided sizes: a chunk is at most a quarter of the work left per worker, so
    chunks shrink towards the end and the workers finish together, at most
    :data:`CHUNK_SECONDS` long (judged from ``seconds``, the time of one warm
    replication) and at most :data:`MAX_CHUNK` replications. Chunks never change
    what a replication computes.
    """
    by_time = max(1, min(MAX_CHUNK, int(CHUNK_SECONDS / max(seconds, 1e-9))))
    left = sum(len(indices) for indices in todo)
    chunks = []
    for job, indices in enumerate(todo):
        for run_start, run_stop in _runs(indices):
            start = run_start
            while start < run_stop:
                size = max(1, min(by_time, run_stop - start, left // (4 * workers)))
                chunks.append((job, range(start, start + size)))
                start += size
                left -= size
    return chunks


def _runs(indices: Sequence[int]) -> list[tuple[int, int]]:
    """Maximal runs ``[start, stop)`` of consecutive values of sorted ``indices``."""
    runs: list[tuple[int, int]] = []
    for index in indices:
        if runs and runs[-1][1] == index:
            runs[-1] = (runs[-1][0], index + 1)
        else:
            runs.append((index, index + 1))
    return runs


def _progress_bar(total: int, enabled: bool, desc: str, initial: int = 0):
    """A bar that shows up only if the run lasts more than a second, and only where it can
    redraw itself (:func:`progress_bar_class`)."""
    from tqdm import tqdm

    bar = progress_bar_class() if enabled else None
    if bar is None:
        return tqdm(total=total, initial=initial, disable=True)
    return bar(total=total, initial=initial, unit="replication", desc=desc, delay=1.0,
               leave=False)


# --------------------------------------------------------------------------- this process
def _run_here(work: Work, chunks: list[Chunk], bar, deliver: Deliver) -> None:
    for job, indices in chunks:
        outcomes = []
        try:
            for index in indices:
                outcomes.append(work.replicate(work.plans[job], work.roots[job], index))
                bar.update(1)
        finally:  # on Ctrl-C too: keep the replications of this chunk that finished
            if outcomes:
                deliver(job, range(indices.start, indices.start + len(outcomes)), outcomes)


# --------------------------------------------------------------------------- local processes
_WORKER_WORK: Work | None = None


def _init_worker(work: Work) -> None:
    """Keep the work in the worker; let only the parent process handle Ctrl-C."""
    global _WORKER_WORK
    _WORKER_WORK = work
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _pool_chunk(job: int, indices: range) -> list:
    work = _WORKER_WORK
    assert work is not None
    return [work.replicate(work.plans[job], work.roots[job], r) for r in indices]


def _run_pool(work: Work, chunks: list[Chunk], workers: int, bar, deliver: Deliver) -> None:
    """Run on local worker processes; a broken pool is replaced and its chunks rerun."""
    context = multiprocessing.get_context(MP_CONTEXT)
    slim = Work(work.replicate, work.plans, work.roots, ())
    left = list(chunks)
    for attempt in range(MAX_RETRIES + 1):
        executor = ProcessPoolExecutor(max_workers=workers, mp_context=context,
                                       initializer=_init_worker, initargs=(slim,))
        pending = {executor.submit(_pool_chunk, *chunk): chunk for chunk in left}
        broken = False
        clean = False
        try:
            while pending:
                done, _ = wait(pending, return_when=FIRST_COMPLETED)
                for future in done:
                    chunk = pending.pop(future)
                    try:
                        outcomes = future.result()
                    except BrokenProcessPool:
                        broken = True
                        continue
                    deliver(*chunk, outcomes)
                    left.remove(chunk)
                    bar.update(len(chunk[1]))
            clean = True
        finally:
            if clean and not broken:
                executor.shutdown(wait=True)
            else:
                _stop(executor)
        if not broken:
            return
        lost = ", ".join(_describe(chunk) for chunk in left[:4]) + (
            ", ..." if len(left) > 4 else "")
        if attempt == MAX_RETRIES:
            raise RuntimeError(
                f"worker processes kept dying ({MAX_RETRIES + 1} times; killed or out of "
                f"memory?): gave up on {len(left)} chunks ({lost}); the chunks that "
                "finished were kept")
        warnings.warn(
            f"a worker process died (killed or out of memory): {len(left)} unfinished chunks "
            f"({lost}) run again on fresh workers (retry {attempt + 1} of {MAX_RETRIES}); "
            "results are unaffected", RuntimeWarning, stacklevel=4)


def _describe(chunk: Chunk) -> str:
    job, indices = chunk
    return f"study {job} replications {indices.start}-{indices.stop - 1}"


def _stop(executor: ProcessPoolExecutor) -> None:
    """Cancel queued work and end the worker processes this run started."""
    started = dict(getattr(executor, "_processes", None) or {})
    executor.shutdown(wait=False, cancel_futures=True)
    for process in started.values():
        if process.is_alive():
            process.terminate()
    for process in started.values():
        process.join(timeout=5)
