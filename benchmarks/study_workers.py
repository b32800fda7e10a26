"""Wall time of a reference study with 1 and with 2 worker processes.

Run from the repository root::

    .venv/bin/python benchmarks/study_workers.py            # the reference study
    .venv/bin/python benchmarks/study_workers.py --quick    # 40 replications

The reference study (issue "Study"): the rehearsal-room scenario scaled to 1,000
listings, 4 arms (customer-side, listing-side, two-sided 0.5/0.5, two-sided with
fractions that follow balance), every built-in estimator that fits each arm,
all three metrics, 200 replications, and a window chosen so that one
replication (both global worlds and the four arms) simulates about 10^5 events.

Target: a speed-up of at least 1.7x with 2 workers on 2 cores. The script also
checks that both runs give identical summaries (same seed), measures and
prints; it asserts nothing. numba is warmed up before timing; times are
wall-clock, best of ``--repeats`` runs each, with the CPU time of that run
(parent and worker processes): on a shared machine the wall-time speed-up
suffers from other load, the CPU time shows the parallel overhead itself.
"""

from __future__ import annotations

import argparse
import os
import platform
import resource
import time

import pandas as pd

import marketsim as ms
from marketsim.study import default_workers

EVENTS_PER_HOUR = 580.0
"""Events per hour of one run of the 1,000-listing market (measured), for sizing."""


def reference_study(events_per_replication: float = 1e5) -> ms.Study:
    """The reference study; the window is sized to ``events_per_replication``."""
    market = ms.scenarios.rehearsal_rooms().scaled(25)  # 750 small rooms, 250 studios
    treatment = ms.scenarios.instant_confirmation()
    burn_in = 5.0
    hours = events_per_replication / (6 * EVENTS_PER_HOUR)  # 2 global worlds + 4 arms
    arms = [
        ms.CustomerSide(0.5),
        ms.ListingSide(0.5),
        ms.TwoSided(0.5, 0.5),
        ms.Arm(ms.TwoSided.for_balance(market.balance), name="two-sided for balance"),
    ]
    return ms.Study(market, treatment, arms, horizon=hours - burn_in, burn_in=burn_in,
                    metric=["bookings", "revenue", "conversion"])


def cpu_seconds() -> float:
    """CPU time of this process and of its finished children (the workers)."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


def best_time(study: ms.Study, replications: int, workers: int, repeats: int):
    """Best wall time of ``repeats`` runs, the CPU time of that run, the result."""
    best, cpu, result = float("inf"), float("nan"), None
    for _ in range(repeats):
        began, began_cpu = time.perf_counter(), cpu_seconds()
        result = study.run(replications, seed=2026, workers=workers, progress=False)
        wall = time.perf_counter() - began
        if wall < best:
            best, cpu = wall, cpu_seconds() - began_cpu
    return best, cpu, result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="40 replications")
    parser.add_argument("--replications", type=int, default=200)
    parser.add_argument("--events", type=float, default=1e5,
                        help="target events per replication (default 1e5)")
    parser.add_argument("--repeats", type=int, default=2, help="runs per setting (best kept)")
    args = parser.parse_args()
    replications = 40 if args.quick else args.replications

    study = reference_study(args.events)
    study.run(2, seed=0, progress=False)  # warm up numba
    print(f"python {platform.python_version()} on {platform.machine()}, "
          f"{os.cpu_count()} CPUs ({default_workers()} usable)")
    print(f"study: {len(study.arms)} arms, {len(study.rows())} summary rows, "
          f"{replications} replications, horizon {study.horizon:.3g} h after a "
          f"{study.burn_in:g} h burn-in, {study.market.n_listings} listings")
    one, cpu_one, result_one = best_time(study, replications, 1, args.repeats)
    two, cpu_two, result_two = best_time(study, replications, 2, args.repeats)
    same = result_one.summary.equals(result_two.summary) and \
        result_one.replications.equals(result_two.replications)
    events = result_one.events_per_replication
    print(f"events per replication: {events:,.0f} (all 6 runs), "
          f"{events * replications / one / 1e6:.1f} million events per second on 1 worker")
    print(f"workers=1: {one:6.2f} s wall, {cpu_one:6.2f} s CPU")
    print(f"workers=2: {two:6.2f} s wall, {cpu_two:6.2f} s CPU (parent and workers)")
    print(f"speed-up:  {one / two:6.2f}x (target >= 1.7x on 2 cores)")
    print(f"identical summaries with 1 and 2 workers: {same}")
    if not same:
        pd.testing.assert_frame_equal(result_one.summary, result_two.summary)


if __name__ == "__main__":
    main()
