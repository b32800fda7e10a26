"""Speed of the large-market (mean-field) model.

Run from the repository root::

    .venv/bin/python benchmarks/meanfield_speed.py
    .venv/bin/python benchmarks/meanfield_speed.py --repeats 501

Targets (issue "Large-market model"):

- steady state of a market with 10 customer types x 10 listing types: under 10 ms;
- a 60-point balance sweep of 6 estimators (two-sided design, so that all six
  built-in estimators fit; each point solves global control, global treatment
  and the experiment): under 1 s.

Times are wall-clock (``time.perf_counter``), median of ``--repeats`` runs after
one untimed warm-up; the script measures and prints, it asserts nothing.

Last measured (2-core development container, Python 3.11, numpy 2.4, scipy 1.17)::

    global control                   10 x 10 cells:   1.15 ms per call
    two-sided (a_C=0.5, a_L=0.5)     20 x 20 cells:   1.80 ms per call
    rehearsal rooms (2 x 2 types)      218.2 ms for 360 rows (180 steady states)
    10 x 10 types                      239.6 ms for 360 rows (180 steady states)
"""

from __future__ import annotations

import argparse
import platform
import statistics
import time

import numpy as np
import scipy

import marketsim as ms
from marketsim.engine.cells import build_cells
from marketsim.estimators import all_estimators
from marketsim.meanfield.steady import solve_cells


def ten_by_ten() -> ms.Market:
    """10 customer types x 10 listing types, 1,000 listings, balance 1 (invented)."""
    rng = np.random.default_rng(10)
    market = ms.Market(
        listing_counts=rng.integers(50, 150, 10),
        mean_busy_time=rng.uniform(1.0, 5.0, 10),
        arrival_rate=1.0,
        customer_shares=rng.dirichlet(np.ones(10)),
        consideration=rng.uniform(0.01, 0.2, (10, 10)),
        utility=rng.normal(0.0, 1.0, (10, 10)),
        outside_utility=rng.normal(0.0, 1.0, 10),
    )
    return market.with_balance(1.0)


def median_time(function, repeats: int) -> float:
    function()
    times = []
    for _ in range(repeats):
        began = time.perf_counter()
        function()
        times.append(time.perf_counter() - began)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=201,
                        help="repeats of each steady-state timing (sweeps: a tenth)")
    args = parser.parse_args()
    print(f"Python {platform.python_version()}, numpy {np.__version__}, "
          f"scipy {scipy.__version__}, {platform.machine()}")

    market = ten_by_ten()
    treatment = ms.Treatment(utility_shift=0.3)
    print("Steady state, 10 customer types x 10 listing types (target < 10 ms):")
    for design in (ms.GlobalControl(), ms.TwoSided(0.5, 0.5)):
        cells = build_cells(market, treatment, design)
        state = ms.meanfield.steady_state(market, treatment, design)
        whole = median_time(lambda d=design: ms.meanfield.steady_state(market, treatment, d),
                            args.repeats)
        solver = median_time(lambda c=cells: solve_cells(c), args.repeats)
        print(f"  {design.label:32s} {cells.n_customer_cells:2d} x {cells.n_listing_cells:2d}"
              f" cells: {whole * 1e3:6.2f} ms per call ({solver * 1e3:5.2f} ms in the solver, "
              f"{state.iterations} Newton iterations)")

    balances = np.logspace(-2, 2, 60)
    every = all_estimators()  # the two one-sided contrasts and the four two-sided estimators
    sweep_repeats = max(3, args.repeats // 10)
    print("Balance sweep, 60 points, two-sided (0.5, 0.5), 6 estimators (target < 1 s):")
    for name, swept in (("rehearsal rooms (2 x 2 types)", ms.scenarios.rehearsal_rooms()),
                        ("10 x 10 types", market)):
        table = ms.meanfield.sweep_balance(swept, treatment, ms.TwoSided(0.5, 0.5), balances,
                                           estimators=every)
        assert table["estimator"].nunique() == 6 and len(table) == 360
        elapsed = median_time(
            lambda s=swept: ms.meanfield.sweep_balance(s, treatment, ms.TwoSided(0.5, 0.5),
                                                        balances, estimators=every),
            sweep_repeats)
        print(f"  {name:32s} {elapsed * 1e3:7.1f} ms for 360 rows (180 steady states)")


if __name__ == "__main__":
    main()
