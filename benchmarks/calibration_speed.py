"""Speed and memory of calibrating a large platform log.

Run from the repository root::

    .venv/bin/python benchmarks/calibration_speed.py              # 1,000,000 sessions
    .venv/bin/python benchmarks/calibration_speed.py --sessions 2e4

Target (issue "Your own market"): a log of 1,000,000 sessions, about 400,000 stays
and 3,000,000 impressions calibrates in under 15 s and under 4 GiB on 2 cores.

The log is simulated from the rehearsal-room market with consideration and outside
utilities changed so that a session shows about 3 listings and books with
probability about 0.4 (simulation not timed). Time is wall clock
(``time.perf_counter``) of one ``ms.calibrate`` call on the four DataFrames, from
checking the tables to the fit checks; memory is the peak of numpy and Python
allocations during that call (``tracemalloc``) and the process's peak resident set.

Last measured (2-core development container, Python 3.11, numpy 2.4, scipy 1.17)::

    log: 999,058 sessions, 420,455 stays, 2,969,575 impressions, 40 listings
    calibrate: 2.87 s (target 15 s, ratio 0.19); peak allocations 0.22 GiB (target 4 GiB,
    ratio 0.06); process peak resident 0.72 GiB (simulation included)
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc

import marketsim as ms

ARRIVAL_RATE = 16.0


def benchmark_market() -> ms.Market:
    """The rehearsal-room market, tuned to about 3 impressions and 0.4 stays a session."""
    return ms.scenarios.rehearsal_rooms().replace(
        consideration=[[0.16, 0.06], [0.06, 0.2]], outside_utility=[-2.2, -2.0])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--sessions", type=float, default=1e6)
    args = parser.parse_args()
    market = benchmark_market()
    log = ms.simulate_log(market, horizon=args.sessions / ARRIVAL_RATE, burn_in=10.0, seed=1)
    print(f"log: {len(log.sessions):,} sessions, {len(log.stays):,} stays, "
          f"{len(log.impressions):,} impressions, {len(log.listings):,} listings")
    tracemalloc.start()
    start = time.perf_counter()
    fit = ms.calibrate(log.sessions, log.stays, log.listings, log.impressions)
    seconds = time.perf_counter() - start
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    resident = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20  # KiB -> GiB
    print(f"calibrate: {seconds:.2f} s (target 15 s, ratio {seconds / 15:.2f}); "
          f"peak allocations {peak / 2**30:.2f} GiB (target 4 GiB, ratio "
          f"{peak / 2**30 / 4:.2f}); process peak resident {resident:.2f} GiB "
          "(simulation included)")
    print(fit)


if __name__ == "__main__":
    main()
