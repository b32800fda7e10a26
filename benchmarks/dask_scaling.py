"""A reference study on a Dask LocalCluster with 1 and 2 workers; scheduling overhead.

Run from the repository root::

    .venv/bin/python benchmarks/dask_scaling.py             # the reference study
    .venv/bin/python benchmarks/dask_scaling.py --quick     # 40 replications

Part 1: the reference study of ``study_workers.py`` (200 replications of about
10^5 events each) on a local Dask cluster of one worker and of two workers
(one thread each, separate processes): wall times, their ratio (target >= 1.7x
on 2 cores) and whether both give the summary of local processes (same seed).

Part 2: scheduling overhead per task. A study of tiny replications (about 200
events each) runs with one replication per task (``CHUNK_SECONDS = 0``), ``N`` and
``2N`` replications, in this process and on a one-worker cluster. The overhead
per task is the slope: the extra wall time of the cluster at ``2N`` minus that
at ``N``, over the extra tasks. The fixed costs of a run (checking the workers'
version, sending the study, gathering the last result) cancel out, and the
workers are warmed up first (numba loads its kernels once per process), so the
slope is what every task costs: the target is under 5 ms. The fixed cost of a
run is measured apart (a run of 4 replications on the cluster against here).
Real runs group replications into chunks of about half a second
(``backends.make_chunks``), so the overhead per replication is far smaller.
Measures and prints; asserts nothing.
"""

from __future__ import annotations

import argparse
import os
import time

import pandas as pd
from distributed import Client, LocalCluster
from study_workers import reference_study

import marketsim as ms
from marketsim.study import backends


def timed(study: ms.Study, replications: int, **options) -> tuple[float, ms.StudyResult]:
    began = time.perf_counter()
    result = study.run(replications, seed=2026, progress=False, **options)
    return time.perf_counter() - began, result


def warm(study: ms.Study) -> None:
    """Run two replications here (loads the numba kernels of this process)."""
    study.run(2, seed=0, progress=False)


def cluster(workers: int) -> tuple[LocalCluster, Client]:
    made = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                        dashboard_address=None)
    return made, Client(made)


def on_cluster(workers: int, study: ms.Study, replications: int, repeats: int):
    """Best wall time of ``repeats`` runs on a fresh local cluster of ``workers``."""
    made, client = cluster(workers)
    with made, client:
        client.run(warm, study)  # every worker loads its kernels before the timing
        runs = [timed(study, replications, backend="dask", client=client)
                for _ in range(repeats)]
    return min(runs, key=lambda run: run[0])


def tasks_sent(study: ms.Study, replications: int, **options) -> tuple[float, int]:
    """Wall time of a run and the number of tasks (chunks) it sent."""
    counts: list[int] = []
    real = backends.make_chunks

    def counting(*args, **kwargs):
        chunks = real(*args, **kwargs)
        counts.append(len(chunks))
        return chunks

    backends.make_chunks = counting
    try:
        seconds, _ = timed(study, replications, **options)
    finally:
        backends.make_chunks = real
    return seconds, counts[-1]


def overhead(tiny: ms.Study, n: int, repeats: int) -> None:
    """Part 2 (see the module docstring)."""
    warm(tiny)
    made, client = cluster(1)
    chunk_seconds = backends.CHUNK_SECONDS
    with made, client:
        client.run(warm, tiny)
        here, there, tasks = {}, {}, {}
        backends.CHUNK_SECONDS = 0.0  # one replication per task
        try:
            for count in (n, 2 * n):
                here[count] = min(timed(tiny, count)[0] for _ in range(repeats))
                runs = [tasks_sent(tiny, count, backend="dask", client=client)
                        for _ in range(repeats)]
                there[count] = min(seconds for seconds, _ in runs)
                tasks[count] = runs[0][1]
        finally:
            backends.CHUNK_SECONDS = chunk_seconds
        chunked, sent = min(tasks_sent(tiny, 2 * n, backend="dask", client=client)
                            for _ in range(repeats))
        fixed = min(timed(tiny, 4, backend="dask", client=client)[0] - timed(tiny, 4)[0]
                    for _ in range(3 * repeats))
    extra = {count: there[count] - here[count] for count in (n, 2 * n)}
    per_task = (extra[2 * n] - extra[n]) / (tasks[2 * n] - tasks[n])
    for count in (n, 2 * n):
        print(f"  {count:5d} replications, {tasks[count]:5d} tasks: {here[count]:6.2f} s in "
              f"this process, {there[count]:6.2f} s on a 1-worker cluster")
    print(f"scheduling overhead per task (slope): {1e3 * per_task:6.2f} ms (target < 5 ms); "
          f"fixed cost of a run (4 replications, 2 tasks): {1e3 * fixed:.0f} ms")
    print(f"chunked as in real runs: {2 * n} replications in {sent} tasks, {chunked:.2f} s on "
          f"the cluster, {1e3 * (chunked - here[2 * n]) / (2 * n):.3f} ms per replication "
          "more than in this process")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="40 replications")
    parser.add_argument("--replications", type=int, default=200)
    parser.add_argument("--events", type=float, default=1e5,
                        help="target events per replication (default 1e5)")
    parser.add_argument("--tiny", type=int, default=500,
                        help="N of the overhead study: N and 2N replications (default 500)")
    parser.add_argument("--repeats", type=int, default=2, help="runs per setting (best kept)")
    args = parser.parse_args()
    replications = 40 if args.quick else args.replications
    print(f"{os.cpu_count()} CPUs; dask workers are processes with one thread each")

    study = reference_study(args.events)
    warm(study)
    _, local = timed(study, replications, workers=2)
    one, result_one = on_cluster(1, study, replications, args.repeats)
    two, result_two = on_cluster(2, study, replications, args.repeats)
    same = all(r.summary.equals(local.summary) for r in (result_one, result_two))
    print(f"reference study, {replications} replications of "
          f"{local.events_per_replication:,.0f} events")
    print(f"LocalCluster, 1 worker:  {one:6.2f} s wall")
    print(f"LocalCluster, 2 workers: {two:6.2f} s wall")
    print(f"dask speed-up: {one / two:6.2f}x (target >= 1.7x on 2 cores)")
    print(f"identical summaries on 1 and 2 dask workers and local processes: {same}")
    if not same:
        pd.testing.assert_frame_equal(local.summary, result_two.summary)

    tiny = ms.Study(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
                    arms=[ms.CustomerSide(0.5)], horizon=1.0)
    print(f"overhead study: replications of about "
          f"{timed(tiny, 4)[1].events_per_replication:,.0f} events, one per task")
    overhead(tiny, args.tiny, args.repeats)


if __name__ == "__main__":
    main()
