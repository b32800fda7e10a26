"""The Dask backend of :mod:`marketsim.study.backends`: a client, one task per chunk,
workers that leave the cluster.

Every worker needs the same version of marketsim as this process (checked
before anything runs: results would differ otherwise).
"""

from __future__ import annotations

import time
import warnings
from collections.abc import Callable
from typing import TYPE_CHECKING

from marketsim.study.store import package_version

if TYPE_CHECKING:
    from marketsim.study.backends import Chunk, Deliver, Work

WORKER_CHECK_SECONDS = 1.0
"""Least time between two questions to the scheduler about which workers are alive."""


def dask_client(client: object) -> tuple[object, object]:
    """``(client, owned)``: a ``dask.distributed.Client`` for ``client`` (a Client or
    a scheduler address); ``owned`` is the client made here (to close), or None."""
    try:
        from distributed import Client
    except ImportError:
        raise ValueError("backend 'dask' needs dask.distributed: pip install "
                         "'marketsim[dask]'") from None
    if isinstance(client, Client):
        return client, None
    if isinstance(client, str) and client.strip():
        try:
            made = Client(client, timeout=30)
        except OSError as error:
            raise ValueError(f"client must be a dask.distributed Client or the address of a "
                             f"running scheduler, got {client!r}: {error}") from None
        return made, made
    raise ValueError("backend 'dask' needs client= a dask.distributed Client or a scheduler "
                     f"address such as 'tcp://10.0.0.5:8786', got {client!r}")


def workers_of(client) -> dict:
    return client.scheduler_info(n_workers=-1)["workers"]


def _dask_chunk(replicate: Callable, plan: object, root: tuple, indices: range) -> list:
    return [replicate(plan, root, r) for r in indices]


def run_dask(work: Work, chunks: list[Chunk], client, bar, deliver: Deliver, *, retries: int,
             describe: Callable[[Chunk], str]) -> None:
    """Run on a Dask cluster: one task per chunk, results gathered as they complete.

    The plans go to every worker once (scattered); a task carries only its root
    seed and indices. A chunk whose workers died (``KilledWorker``) is submitted
    again at most ``retries`` times; ``describe`` names a chunk in messages.
    """
    from distributed import KilledWorker, as_completed

    _check_versions(client)
    plans = [client.scatter(plan, broadcast=True, hash=False) for plan in work.plans]
    watch = _WorkerWatch(client)

    def submit(batch: list[Chunk]) -> list:
        """One message to the scheduler for the whole batch (``client.map``)."""
        return client.map(_dask_chunk, [work.replicate] * len(batch),
                          [plans[job] for job, _ in batch], [work.roots[job] for job, _ in batch],
                          [indices for _, indices in batch], pure=False)

    pending = {future: (chunk, 0) for future, chunk in zip(submit(chunks), chunks)}
    # results come with their futures, fetched by the client's event loop as tasks
    # finish, rather than one round trip per .result() call here
    finished = as_completed(list(pending), with_results=True, raise_errors=False)
    try:
        for future, outcomes in finished:
            chunk, attempt = pending.pop(future)
            if future.status == "error":
                _, error, traceback = outcomes
                if not isinstance(error, KilledWorker):
                    raise error.with_traceback(traceback)
                if attempt == retries:
                    raise RuntimeError(f"{describe(chunk)} killed its Dask workers "
                                       f"{retries + 1} times; gave up: {error}") from None
                warnings.warn(f"{describe(chunk)} was on Dask workers that died; it runs "
                              f"again (retry {attempt + 1} of {retries}); results are "
                              "unaffected", RuntimeWarning, stacklevel=4)
                again = submit([chunk])[0]
                pending[again] = (chunk, attempt + 1)
                finished.add(again)
                continue
            deliver(*chunk, outcomes)
            bar.update(len(chunk[1]))
            watch.look(every=WORKER_CHECK_SECONDS)
        watch.look()
    finally:
        if pending:
            client.cancel(list(pending))
        for plan in plans:
            plan.release()


class _WorkerWatch:
    """Warns when Dask workers leave the cluster during a run. Asking the scheduler
    costs a round trip, so it asks at most every ``every`` seconds (and at the end):
    asking after every chunk cost more than the chunk's scheduling itself."""

    def __init__(self, client) -> None:
        self.client = client
        self.known = set(workers_of(client))
        self.gone: set[str] = set()
        self.last = time.monotonic()

    def look(self, every: float = 0.0) -> None:
        if time.monotonic() - self.last < every:
            return
        try:
            now = set(workers_of(self.client))
        except (AssertionError, OSError) as error:
            # advisory only: the results are in hand, so a failed question about the
            # workers must not fail the run (a rare AssertionError inside tornado's
            # write buffer was seen here with a second client in the same process)
            warnings.warn(f"could not ask the Dask scheduler which workers are alive "
                          f"({type(error).__name__}); results are unaffected",
                          RuntimeWarning, stacklevel=5)
            return
        self.last = time.monotonic()
        left = self.known - now - self.gone
        if left:
            self.gone |= left
            warnings.warn(
                f"Dask worker(s) {', '.join(sorted(left))} left the cluster during the run "
                "(killed, out of memory or stopped); the scheduler runs their unfinished "
                "chunks elsewhere; results are unaffected", RuntimeWarning, stacklevel=5)
        self.known |= now


def _check_versions(client) -> None:
    """Refuse workers whose marketsim differs from this process's (results would too)."""
    mine = package_version()
    versions = client.run(package_version)
    other = {address: v for address, v in versions.items() if v != mine}
    if other:
        shown = ", ".join(f"{a}: {v}" for a, v in sorted(other.items())[:3])
        raise ValueError(f"client: every Dask worker needs marketsim {mine} (this process), "
                         f"found {shown}")
