"""The general engine (busy times of any shape) against outside references.

Insensitivity of the loss system (Erlang B for any busy-time law), agreement in
distribution with the chain for exponential times, and Little's law. Every
tolerance is a multiple (4) of a Monte Carlo standard error estimated in the
test itself (batch means of one long run, or independent replications); each
test also checks that its standard error is small compared with the quantity
tested, so that a wrong engine cannot pass by being noisy.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from test_engine_reference import ERLANG_TABLE_1_PERCENT, erlang_b, mean_and_se

import marketsim as ms
from marketsim.engine import run_cells
from marketsim.engine.simpy_reference import simpy_run

Z = 4.0  # tolerance in Monte Carlo standard errors
SHAPES = {"lognormal cv 2": ms.busy_time.LogNormal(cv=2.0), "fixed": ms.busy_time.Fixed()}


@pytest.mark.parametrize("shape", SHAPES.values(), ids=SHAPES.keys())
@pytest.mark.parametrize(("servers", "load"), ERLANG_TABLE_1_PERCENT)
def test_blocking_is_erlang_b_for_any_busy_time(servers, load, shape):
    """Insensitivity (Sevastyanov 1957; any queueing text on M/G/c/c): one listing
    type, consideration 1 and a negligible outside option make an M/G/c/c loss
    system, whose blocking is Erlang B(c, A) whatever the busy-time law of mean 1.
    Table values: 1% blocking at c = 10, A = 4.461 and c = 15, A = 8.108 (standard
    Erlang B tables)."""
    market = ms.Market(listing_counts=[servers], mean_busy_time=[1.0], arrival_rate=load,
                       customer_shares=[1.0], consideration=1.0, utility=0.0,
                       outside_utility=-30.0, busy_time=shape)
    ledger = ms.simulate(market, horizon=400_000.0, burn_in=50.0, seed=servers, bins=40)
    assert ledger.engine == "general"
    booked = ledger.bin_bookings.sum(axis=(1, 2))
    arrived = ledger.bin_arrivals.sum(axis=1)
    blocked, se = mean_and_se(1.0 - booked / arrived)
    expected = erlang_b(servers, load)
    assert se < 0.04 * expected  # sees a 16% error
    assert abs(blocked - expected) < Z * se, (blocked, expected, se)


def test_general_engine_agrees_with_the_chain_for_exponential_times():
    """With exponential busy times and flat demand both engines simulate the same
    Markov chain: booking rates per cell pair agree within Monte Carlo error, and a
    two-sample Kolmogorov-Smirnov test (scipy.stats.ks_2samp) does not tell their
    per-replication totals apart."""
    market = ms.scenarios.rehearsal_rooms()
    cells = ms.build_cells(market, ms.Treatment(utility_shift=0.5), ms.TwoSided(0.5, 0.5))
    count = 80
    seeds = np.random.SeedSequence(77).spawn(2 * count)
    runs = {engine: [run_cells(cells, horizon=300.0, burn_in=10.0, seed=seed, engine=engine)
                     for seed in seeds[k * count:(k + 1) * count]]
            for k, engine in enumerate(("chain", "general"))}
    assert {r.engine for r in runs["chain"]} == {"chain"}
    assert {r.engine for r in runs["general"]} == {"general"}
    rates = {engine: np.array([r.bookings / r.window for r in ledgers])
             for engine, ledgers in runs.items()}
    (m1, s1), (m2, s2) = (mean_and_se(rates[e]) for e in ("chain", "general"))
    se = np.hypot(s1, s2)
    assert np.all(se < 0.1 * m1)
    assert np.all(np.abs(m1 - m2) < Z * se), (m1, m2, se)
    totals = {e: rates[e].sum(axis=(1, 2)) for e in rates}
    assert stats.ks_2samp(totals["chain"], totals["general"]).pvalue > 1e-3


@pytest.mark.parametrize("busy_time", [
    ms.busy_time.Gamma(cv=0.5),
    [ms.busy_time.LogNormal(cv=3.0), ms.busy_time.Empirical([0.5, 1.0, 1.0, 4.0])],
], ids=["gamma", "lognormal and empirical"])
def test_littles_law_with_general_busy_times(busy_time):
    """Little's law (Little 1961): busy listings per cell = booking rate x mean
    busy time, for any busy-time law, from a warm start (residual busy times from
    the equilibrium law) under a daily demand profile."""
    market = ms.scenarios.rehearsal_rooms().replace(
        busy_time=busy_time, demand=ms.DemandProfile([0.5, 1.0, 1.5, 1.0], period=24.0))
    cells = ms.build_cells(market, ms.Treatment(utility_shift=0.3), ms.CustomerSide(0.5))
    busy_mean = 1.0 / cells.release_rate
    gaps = []
    for seed in np.random.SeedSequence(5).spawn(30):
        ledger = run_cells(cells, horizon=480.0, burn_in=24.0, seed=seed,
                           start=cells.listing_count // 2)
        busy = cells.listing_count - ledger.mean_available
        gaps.append(busy - ledger.bookings.sum(axis=0) / ledger.window * busy_mean)
    gap, se = mean_and_se(np.array(gaps))
    assert np.all(se < 0.02 * cells.listing_count)
    assert np.all(np.abs(gap) < Z * se), (gap, se)


@pytest.mark.slow
def test_general_engine_agrees_with_a_plain_simpy_model():
    """A plain SimPy model of the same market (marketsim.engine.simpy_reference:
    binomial consideration, thinning for the daily profile, one SimPy process per
    stay) with lognormal stays and a daily profile: booking rates per listing type,
    conversion and busy listings agree with the general engine within Monte Carlo
    error (independent replications of each)."""
    daily = ms.DemandProfile([0.1, 0.1, 0.3, 1.5, 2.0, 2.0], period=24.0)
    market = ms.scenarios.rehearsal_rooms().replace(
        busy_time=ms.busy_time.LogNormal(cv=2.0), demand=daily)
    count, days = 12, 6
    seeds = np.random.SeedSequence(2026).spawn(2 * count)

    def figures(bookings, arrivals, busy, window):
        return np.concatenate([bookings.sum(axis=0) / window,
                               [bookings.sum() / arrivals.sum()], busy / window])

    engine, reference = [], []
    for seed in seeds[:count]:
        ledger = ms.simulate(market, horizon=24.0 * days, burn_in=24.0, seed=seed)
        busy = (market.listing_counts - ledger.mean_available) * ledger.window
        engine.append(figures(ledger.bookings, ledger.arrivals, busy, ledger.window))
    for seed in seeds[count:]:
        run = simpy_run(market, horizon=24.0 * days, burn_in=24.0, seed=seed)
        reference.append(figures(run.bookings, run.arrivals, run.busy_time_integral,
                                 run.window))
    (m1, s1), (m2, s2) = mean_and_se(np.array(engine)), mean_and_se(np.array(reference))
    se = np.hypot(s1, s2)
    assert np.all(se < 0.05 * m1)
    assert np.all(np.abs(m1 - m2) < Z * se), (m1, m2, se)
    # the comparison sees the profile: flat demand books at a clearly different rate
    flat = [ms.simulate(market.replace(demand=None), horizon=24.0 * days, burn_in=24.0,
                        seed=seed).booking_rate for seed in seeds[:count]]
    flat_mean, flat_se = mean_and_se(np.array(flat))
    assert abs(flat_mean - m1[:2].sum()) > Z * np.hypot(flat_se, se[:2].sum())


def test_logged_runs_refuse_what_the_logging_kernel_cannot_simulate():
    """The logging kernel has exponential stays and flat demand only: say so."""
    from marketsim.study import simulate_log

    market = ms.scenarios.rehearsal_rooms()
    for variant in (market.replace(busy_time=ms.busy_time.Fixed()),
                    market.replace(demand=ms.DemandProfile([1.0, 2.0], period=24.0))):
        with pytest.raises(ValueError, match="market must have exponential busy times and "
                                             "a constant arrival rate for logged runs"):
            simulate_log(variant, horizon=10.0, seed=1)


@pytest.mark.slow
def test_warm_start_is_steady_with_general_busy_times():
    """From ``start="steady"`` (large-market counts, which depend on the busy times
    only through their means, and remaining busy times from the equilibrium law of
    renewal theory) the booking rate of the first half hour already equals the
    long-run rate within Monte Carlo error (which sees a 6% transient)."""
    market = ms.scenarios.rehearsal_rooms().scaled(10).replace(
        busy_time=ms.busy_time.LogNormal(cv=2.0))
    seeds = np.random.SeedSequence(8).spawn(200)
    early = np.array([ms.simulate(market, horizon=0.5, start="steady", seed=s).booking_rate
                      for s in seeds])
    long_run = ms.simulate(market, horizon=4000.0, burn_in=50.0, start="steady", seed=9,
                           bins=40)
    batches = long_run.bin_bookings.sum(axis=(1, 2)) / (4000.0 / 40)
    (rate, se_rate), (warm, se_warm) = mean_and_se(batches), mean_and_se(early)
    se = np.hypot(se_rate, se_warm)
    assert se < 0.015 * rate
    assert abs(warm - rate) < Z * se, (warm, rate, se)
