"""A reference study on a Dask LocalCluster with 1 and 2 workers; scheduling overhead.

Run from the repository root::

    .venv/bin/python benchmarks/dask_scaling.py             # the reference study
    .venv/bin/python benchmarks/dask_scaling.py --quick     # 40 replications

Part 1: the reference study of ``study_workers.py`` (200 replications of about
10^5 events each) on a local Dask cluster of one worker and of two workers
(one thread each, separate processes): wall times, their ratio (target >= 1.7x
on 2 cores) and whether both give the summary of local processes (same seed).

Part 2: scheduling overhead. A study of tiny replications (about 200 events
each) runs in this process and on a one-worker cluster; the extra wall time on
the cluster, divided by the number of tasks (chunks of replications) sent, is
the overhead per task (target < 5 ms), and divided by the replications, the
overhead per replication. Measures and prints; asserts nothing.
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


def on_cluster(workers: int, study: ms.Study, replications: int, repeats: int):
    """Best wall time of ``repeats`` runs on a fresh local cluster of ``workers``."""
    with LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        study.run(2, seed=0, progress=False, backend="dask", client=client)  # warm up
        runs = [timed(study, replications, backend="dask", client=client)
                for _ in range(repeats)]
    return min(runs, key=lambda run: run[0])


def count_tasks() -> list[int]:
    """Record how many chunks each run sends (wraps ``backends.make_chunks``)."""
    counts: list[int] = []
    real = backends.make_chunks

    def counting(*args, **kwargs):
        chunks = real(*args, **kwargs)
        counts.append(len(chunks))
        return chunks

    backends.make_chunks = counting
    return counts


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="40 replications")
    parser.add_argument("--replications", type=int, default=200)
    parser.add_argument("--events", type=float, default=1e5,
                        help="target events per replication (default 1e5)")
    parser.add_argument("--tiny", type=int, default=4000,
                        help="replications of the overhead study (default 4000)")
    parser.add_argument("--repeats", type=int, default=2, help="runs per setting (best kept)")
    args = parser.parse_args()
    replications = 40 if args.quick else args.replications
    print(f"{os.cpu_count()} CPUs; dask workers are processes with one thread each")

    study = reference_study(args.events)
    study.run(2, seed=0, progress=False)  # warm up numba here
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
    tiny.run(2, seed=0, progress=False)
    here = min(timed(tiny, args.tiny)[0] for _ in range(args.repeats))
    tasks = count_tasks()
    there, result = on_cluster(1, tiny, args.tiny, args.repeats)
    sent = tasks[-1]
    overhead = there - here
    print(f"overhead study: {args.tiny} replications of {result.events_per_replication:,.0f} "
          f"events; {here:.2f} s in this process, {there:.2f} s on a 1-worker cluster, "
          f"{sent} tasks")
    print(f"scheduling overhead per task: {1e3 * overhead / sent:6.2f} ms (target < 5 ms); "
          f"per replication: {1e3 * overhead / args.tiny:6.3f} ms")


if __name__ == "__main__":
    main()
