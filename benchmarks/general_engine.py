"""Speed of the general engine (busy times of any shape, demand over the day).

Run from the repository root::

    .venv/bin/python benchmarks/general_engine.py            # full run (~2 minutes)
    .venv/bin/python benchmarks/general_engine.py --quick    # smaller, noisier

Targets (issue 10), all ratios of CPU time per event measured in this one run:

- general engine, lognormal busy times (cv 2), at most 3x the chain's cost per
  event (exponential busy times) on the same 1,000-listing market;
- at least 100x faster per event than the plain SimPy model of the same market
  (:mod:`marketsim.engine.simpy_reference`, lognormal busy times too);
- cost per event at 1,000,000 listings within 2x of 1,000 (the heap of release
  times costs ``log N`` per operation, and its memory grows with ``N``);
- a run under a daily demand profile at most 1.3x the cost per event of a
  flat-demand run (chain and general engine).

This script measures and prints; it asserts nothing. Conventions as in
``engine_vs_simpy.py``: an event is an arrival or a release; CPU time of this
process; best of a few interleaved repeats; numba warmed up first; the market
is that script's ``benchmark_market()`` (2 customer x 4 listing types, balance 1).
Runs at 1,000 and 1,000,000 listings are timed in their steady state (each starts
from the end of an untimed run five of the longest mean busy times long).
"""

from __future__ import annotations

import argparse
import math

from engine_vs_simpy import benchmark_market, best_of, engine_run, ns_per_event, simpy_run

import marketsim as ms

LOGNORMAL = ms.busy_time.LogNormal(cv=2.0)
DAILY = ms.DemandProfile([0.2, 0.1, 0.1, 0.1, 0.2, 0.4, 0.8, 1.2, 1.4, 1.5, 1.5, 1.4,
                          1.3, 1.3, 1.4, 1.5, 1.6, 1.8, 1.9, 1.7, 1.4, 1.0, 0.6, 0.4],
                         period=24.0)
"""Invented hourly shape of a day (quiet nights, evening peak), time unit the hour."""


def steady_runs(market: ms.Market, events: float, whole_days: bool = False) -> tuple:
    """``(engine_run, keyword arguments)`` for about ``events`` events from a steady start."""
    warm = ms.simulate(market, horizon=5.0 * float(market.mean_busy_time.max()), seed=1)
    per_time = market.arrival_rate + warm.bookings.sum() / warm.window
    horizon = events / per_time
    if whole_days:
        horizon = DAILY.period * max(1, math.ceil(horizon / DAILY.period))
    return engine_run, dict(market=market, horizon=horizon, burn_in=0.0,
                            start=warm.final_available)


def show(label: str, result: dict) -> None:
    print(f"  {label:44s} {ns_per_event(result):9.1f} ns/event "
          f"({result['events']:,} events in {result['seconds']:.2f} s)")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller runs (noisier)")
    parser.add_argument("--events", type=float, default=None,
                        help="events per timed engine run (default 5e6, quick 1e6)")
    parser.add_argument("--large", type=int, default=1000,
                        help="growth factor of the large market (default 1000: 1,000,000 "
                             "listings)")
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args(argv)
    events = args.events or (1e6 if args.quick else 5e6)
    simpy_events = max(2e4, events / 25)

    chain_market = benchmark_market()
    market = chain_market.replace(busy_time=LOGNORMAL)
    print(f"market: {market!r}")
    for m in (chain_market, market, market.replace(demand=DAILY)):  # warm up numba
        ms.simulate(m, horizon=1.0, seed=0)

    print()
    print("Part 1: general engine (lognormal, cv 2) vs the chain (exponential), "
          "and vs SimPy, 1,000 listings")
    per_time = market.arrival_rate * 2.0
    best = best_of(args.repeats, {
        "chain": steady_runs(chain_market, events),
        "general": steady_runs(market, events),
        "simpy": (simpy_run, dict(market=market, horizon=simpy_events / per_time,
                                  burn_in=5.0)),
    })
    show("chain, exponential busy times", best["chain"])
    show("general engine, lognormal busy times", best["general"])
    show("SimPy, lognormal busy times", best["simpy"])
    print(f"  general / chain cost per event: "
          f"{ns_per_event(best['general']) / ns_per_event(best['chain']):.2f}x (target <= 3x)")
    print(f"  speed-up of the general engine vs SimPy: "
          f"{ns_per_event(best['simpy']) / ns_per_event(best['general']):.0f}x "
          "(target >= 100x)")

    print()
    large = market.scaled(args.large)
    print(f"Part 2: general engine cost per event, {market.n_listings:,} vs "
          f"{large.n_listings:,} listings (same balance)")
    sizes = best_of(args.repeats, {"small": steady_runs(market, events),
                                   "large": steady_runs(large, events)})
    show(f"{market.n_listings:,} listings", sizes["small"])
    show(f"{large.n_listings:,} listings", sizes["large"])
    print(f"  cost per event at {large.n_listings:,} / at {market.n_listings:,} listings: "
          f"{ns_per_event(sizes['large']) / ns_per_event(sizes['small']):.2f}x "
          "(target within 2x)")

    print()
    print("Part 3: a daily demand profile vs flat demand, whole days, 1,000 listings")
    days = best_of(args.repeats, {
        "chain flat": steady_runs(chain_market, events, whole_days=True),
        "chain daily": steady_runs(chain_market.replace(demand=DAILY), events, True),
        "general flat": steady_runs(market, events, whole_days=True),
        "general daily": steady_runs(market.replace(demand=DAILY), events, True),
    })
    for name, result in days.items():
        show(name, result)
    for engine in ("chain", "general"):
        ratio = ns_per_event(days[f"{engine} daily"]) / ns_per_event(days[f"{engine} flat"])
        print(f"  {engine}: daily profile / flat demand cost per event: {ratio:.2f}x "
              "(target <= 1.3x)")


if __name__ == "__main__":
    main()
