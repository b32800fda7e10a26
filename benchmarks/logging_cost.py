"""Cost of logging: ``ms.simulate_log`` against ``ms.simulate`` on the same run.

Run from the repository root::

    .venv/bin/python benchmarks/logging_cost.py
    .venv/bin/python benchmarks/logging_cost.py --horizon 200 --repeats 1

Logging off costs nothing by construction: ``ms.simulate`` runs the count-based
chain kernel, which logging does not touch; ``ms.simulate_log`` runs its own kernel
that keeps every listing's identity and writes the four log tables. The ratio below
is the price of logging on, for the rehearsal-room market (tables included). Times
are wall clock, median of ``--repeats`` runs after one untimed warm-up (compilation).
"""

from __future__ import annotations

import argparse
import statistics
import time

import marketsim as ms


def median_time(function, repeats: int) -> float:
    function()
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--horizon", type=float, default=20_000.0)
    parser.add_argument("--repeats", type=int, default=5)
    args = parser.parse_args()
    market = ms.scenarios.rehearsal_rooms()
    off = median_time(lambda: ms.simulate(market, horizon=args.horizon, burn_in=10.0,
                                          seed=1), args.repeats)
    on = median_time(lambda: ms.simulate_log(market, horizon=args.horizon, burn_in=10.0,
                                             seed=1), args.repeats)
    sessions = len(ms.simulate_log(market, horizon=args.horizon, burn_in=10.0,
                                   seed=1).sessions)
    print(f"rehearsal rooms, horizon {args.horizon:g} ({sessions:,} sessions)")
    print(f"logging off (ms.simulate):    {off * 1e3:9.1f} ms")
    print(f"logging on  (ms.simulate_log): {on * 1e3:9.1f} ms")
    print(f"logging on / off ratio: {on / off:.1f}")


if __name__ == "__main__":
    main()
