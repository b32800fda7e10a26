"""Switchback design: schedule, engine pieces, estimators, large-market carry-over.

Outside references named beside each check: the carry-over bias of switchbacks and
its decay with block length and burn-in ("Design and analysis of switchback
experiments", Management Science 2023; "Switchback experiments under geometric
mixing", 2022); the pooled two-sample t statistic (scipy.stats.ttest_ind); the
binomial band of interval coverage; the convergence of the finite market to the
ODE (Kurtz, J. Appl. Prob. 1970).
"""

from __future__ import annotations

import itertools
import math
import re
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

import marketsim as ms
from marketsim.engine import build_cells, run_cells
from marketsim.meanfield.periodic import flow_through
from marketsim.meanfield.solver import FlowModel

MARKET = ms.scenarios.rehearsal_rooms()          # mean busy times 2 and 3 hours
TREATMENT = ms.scenarios.instant_confirmation()


def grown(k: int, market: ms.Market = MARKET) -> ms.Market:
    """The market with k times the listings and arrivals (same balance)."""
    return market.replace(listing_counts=[int(n) * k for n in market.listing_counts],
                          arrival_rate=market.arrival_rate * k)


def large_market_bias(market, design):
    return float(ms.meanfield.expected_estimates(market, TREATMENT, design,
                                                 [ms.SwitchbackDifference()])["bias"][0])


# --- bad input --------------------------------------------------------------------

@pytest.mark.parametrize("kwargs, message", [
    ({"block_length": 0.0}, "block_length must be a finite number > 0, got 0.0"),
    ({"block_length": -2.0}, "block_length must be a finite number > 0, got -2.0"),
    ({"block_length": 2.0, "burn_in": 2.0},
     "burn_in must be shorter than block_length (each block keeps block_length - burn_in "
     "after its burn-in), got burn_in=2 with block_length=2"),
    ({"block_length": 2.0, "burn_in": 3.0}, "burn_in must be shorter than block_length"),
    ({"block_length": 2.0, "assignment": "daily"},
     "assignment must be one of 'random', 'alternating', got 'daily'"),
])
def test_bad_switchbacks_are_refused_with_the_rule_and_the_value(kwargs, message):
    with pytest.raises(ValueError, match=re.escape(message)):
        ms.Switchback(**kwargs)


def test_a_horizon_shorter_than_two_blocks_is_refused_everywhere():
    design = ms.Switchback(10.0)
    message = "horizon must hold at least two blocks of the switchback (2 x block_length = 20)"
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(")", r"\)")):
        ms.simulate(MARKET, TREATMENT, design, horizon=19.0, seed=1)
    with pytest.raises(ValueError, match="got horizon=15"):
        ms.Study(MARKET, TREATMENT, [design], horizon=15.0)


def test_linear_estimators_refuse_a_switchback_and_switchback_ones_refuse_the_rest():
    with pytest.raises(ValueError, match=r"customer-side .* a switchback design compares time"):
        ms.Arm(ms.Switchback(5.0), [ms.CustomerSideEstimator()]).resolve(MARKET)
    with pytest.raises(ValueError, match="switchback difference needs a switchback design"):
        ms.Arm(ms.CustomerSide(0.5), [ms.SwitchbackDifference()]).resolve(MARKET)
    with pytest.raises(ValueError, match=r"assignment='random'.*got assignment='alternating'"):
        ms.Arm(ms.Switchback(5.0, assignment="alternating"),
               [ms.SwitchbackHorvitzThompson()]).resolve(MARKET)
    assert [e.name for e in ms.Arm(ms.Switchback(5.0)).resolve(MARKET)] == [
        "switchback difference", "switchback Horvitz-Thompson"]
    with pytest.raises(ValueError, match="bins must be None for a switchback"):
        ms.simulate(MARKET, TREATMENT, ms.Switchback(5.0), horizon=20.0, bins=4, seed=1)
    with pytest.raises(ValueError, match="the ledger of a switchback design"):
        ms.SwitchbackDifference().estimate(ms.simulate(MARKET, horizon=5.0, seed=1))


# --- schedule and engine invariants -------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(length=st.floats(0.5, 20.0), share=st.floats(0.0, 0.95), blocks=st.floats(2.0, 9.5),
       alternating=st.booleans(), seed=st.integers(0, 2**32))
def test_kept_windows_partition_into_treated_and_control(length, share, blocks, alternating,
                                                        seed):
    """The kept parts of the blocks, treated and control together, cover the horizon minus
    the burn-ins; the pieces tile the window; both groups are present."""
    design = ms.Switchback(length, burn_in=share * length,
                           assignment="alternating" if alternating else "random")
    horizon = blocks * length
    schedule = design.schedule(horizon, np.random.default_rng(seed))
    kept = schedule.kept_lengths
    burn = np.minimum(design.burn_in, schedule.ends - schedule.starts)
    assert np.isclose(kept[schedule.treated].sum() + kept[~schedule.treated].sum(),
                      horizon - burn.sum(), rtol=1e-12, atol=1e-9)
    pieces = schedule.pieces()
    assert pieces[0][0] == 0.0 and np.isclose(pieces[-1][1], horizon)
    assert all(np.isclose(a[1], b[0]) for a, b in itertools.pairwise(pieces))
    positive = kept > 0
    assert schedule.treated[positive].any() and not schedule.treated[positive].all()


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**32), slice_events=st.integers(1, 300),
       engine=st.sampled_from(["auto", "general"]), length=st.floats(0.5, 4.0))
def test_switchback_ledger_is_the_same_for_the_same_seed_whatever_the_slice(
        seed, slice_events, engine, length):
    cells = build_cells(MARKET, TREATMENT, ms.Switchback(length, burn_in=length / 3))
    runs = [run_cells(cells, horizon=4 * length, burn_in=1.0, seed=seed, engine=engine,
                      slice_events=size) for size in (slice_events, 2**20)]
    first, second = runs
    assert np.array_equal(first.bin_bookings, second.bin_bookings)
    assert np.array_equal(first.bin_arrivals, second.bin_arrivals)
    assert np.array_equal(first.blocks.treated, second.blocks.treated)
    assert np.array_equal(first.bookings, first.bin_bookings.sum(axis=0))


def test_pieces_are_exact_the_general_engine_reproduces_an_unbroken_run():
    """With a treatment that changes nothing, a switchback run of the general engine
    (which carries the next arrival and the heap of release times across pieces and
    draws nothing at a switch) makes exactly the bookings of an unbroken run with the
    same seed, block by block."""
    market = MARKET.replace(busy_time=ms.busy_time.LogNormal(cv=2.0))
    nothing = ms.Treatment(utility_shift=0.0)
    switched = ms.simulate(market, nothing, ms.Switchback(10.0), horizon=100.0, burn_in=5.0,
                           seed=3, progress=False)
    unbroken = ms.simulate(market, nothing, horizon=100.0, burn_in=5.0, seed=3, bins=10,
                           progress=False)
    assert switched.engine == "general" and switched.bookings.sum() > 500
    assert np.array_equal(switched.bin_bookings.sum(axis=1), unbroken.bin_bookings.sum(axis=1))
    assert np.array_equal(switched.bin_arrivals.sum(axis=1), unbroken.bin_arrivals.sum(axis=1))


# --- estimators ------------------------------------------------------------------------

def test_difference_estimator_is_the_pooled_two_sample_t_test_on_block_rates():
    """With equal kept lengths, estimate / standard error is scipy's pooled two-sample t
    statistic on the block rates (scipy.stats.ttest_ind, equal_var=True); the
    Horvitz-Thompson value is sum((2 W - 2 (1 - W)) Y) / sum(l) by hand."""
    ledger = ms.simulate(MARKET, TREATMENT, ms.Switchback(5.0, burn_in=1.0), horizon=60.0,
                         seed=11)
    estimate = ms.SwitchbackDifference().estimate(ledger)
    rates = ledger.bin_bookings.sum(axis=(1, 2)) / 4.0
    treated = ledger.blocks.treated
    t = stats.ttest_ind(rates[treated], rates[~treated], equal_var=True).statistic
    assert estimate.value == pytest.approx(rates[treated].mean() - rates[~treated].mean())
    assert estimate.value / estimate.standard_error == pytest.approx(t, rel=1e-12)
    totals = ledger.bin_bookings.sum(axis=(1, 2))
    ht = ms.SwitchbackHorvitzThompson().estimate(ledger)
    assert ht.value == pytest.approx(np.sum(np.where(treated, 2.0, -2.0) * totals) / 48.0)
    assert ht.standard_error == pytest.approx(math.sqrt(np.sum(4.0 * totals**2)) / 48.0)


# --- bias: large-market and simulated --------------------------------------------------

def test_large_market_bias_vanishes_with_block_length_and_shrinks_with_burn_in():
    """Carry-over bias falls as blocks grow past several mean busy times and as the
    burn-in grows (both references above); here on the rehearsal rooms (mean busy
    time about 2.25 hours)."""
    effect = ms.meanfield.gte(MARKET, TREATMENT)
    for assignment in ("alternating", "random"):
        biases = [large_market_bias(MARKET, ms.Switchback(k, assignment=assignment))
                  for k in (1.0, 4.0, 16.0, 64.0)]
        assert all(b > 0 for b in biases)
        assert biases == sorted(biases, reverse=True), biases
        assert biases[0] > 0.2 * effect and biases[-1] < 0.02 * effect
        with_burn_in = [large_market_bias(MARKET, ms.Switchback(16.0, burn_in=b,
                                                                assignment=assignment))
                        for b in (0.0, 4.0, 8.0)]
        assert with_burn_in == sorted(with_burn_in, reverse=True), with_burn_in
        assert with_burn_in[-1] < 0.01 * effect


def test_simulated_bias_shrinks_with_burn_in_in_a_slowly_mixing_market():
    """Busy times of 20 and 30 hours against blocks of 40: the burn-in of half a block
    cuts the carry-over bias, measured by paired replications (same customers)."""
    slow = MARKET.replace(mean_busy_time=[20.0, 30.0], listing_counts=[1200, 400],
                          arrival_rate=MARKET.arrival_rate).with_balance(MARKET.balance)
    arms = [ms.Arm(ms.Switchback(40.0, burn_in=b, assignment="alternating"),
                   [ms.SwitchbackDifference()], name=f"b={b:g}") for b in (0.0, 20.0)]
    result = ms.Study(slow, TREATMENT, arms, horizon=320.0, burn_in=20.0,
                      start="steady").run(40, seed=4, progress=False)
    raw = result.replications.pivot(index="replication", columns="arm", values="estimate")
    gap = raw["b=0"] - raw["b=20"]
    bias = result.summary.set_index("arm")["bias"]
    assert bias["b=0"] > 0.2 * result.truth["value"].iloc[0]
    assert gap.mean() > 3.0 * gap.std(ddof=1) / math.sqrt(len(gap)), (gap.mean(), bias)


def test_no_carry_over_means_no_bias():
    """Busy times 500 times shorter than the blocks: nothing is carried across a
    switch, and the switchback is unbiased within Monte Carlo error."""
    fast = MARKET.replace(mean_busy_time=[0.02, 0.03]).with_balance(MARKET.balance)
    result = ms.Study(fast, TREATMENT, [ms.Switchback(10.0, assignment="alternating")],
                      horizon=40.0, burn_in=1.0, start="steady").run(60, seed=2,
                                                                     progress=False)
    row = result.summary.iloc[0]
    assert abs(row["bias"]) < 3.0 * row["bias_mc_se"], row.to_dict()
    assert row["bias_mc_se"] < 0.02 * row["truth"]


def test_standard_error_covers_at_the_nominal_rate():
    """Long blocks (little carry-over): the nominal 95% interval from the block-to-block
    standard error covers within the binomial band of 300 replications."""
    result = ms.Study(MARKET, TREATMENT, [ms.Arm(ms.Switchback(10.0, burn_in=5.0),
                                                 [ms.SwitchbackDifference()])],
                      horizon=200.0, burn_in=10.0, start="steady").run(300, seed=8,
                                                                       progress=False)
    coverage = result.summary["coverage"].iloc[0]
    assert abs(coverage - 0.95) <= 3.0 * math.sqrt(0.95 * 0.05 / 300), coverage


def test_large_market_switchback_bias_agrees_with_simulation_at_large_n():
    """4,000 listings, alternating blocks of 2 hours (strong carry-over): the simulated
    bias matches the ODE run through the schedule within Monte Carlo error."""
    big = grown(100)
    design = ms.Switchback(2.0, assignment="alternating")
    expected = large_market_bias(big, design)
    result = ms.Study(big, TREATMENT, [design], horizon=80.0, burn_in=2.0,
                      start="steady").run(40, seed=5, progress=False)
    row = result.summary.iloc[0]
    assert row["bias"] > 10 * row["bias_mc_se"]
    assert abs(row["bias"] - expected) < 3.0 * row["bias_mc_se"], (row["bias"], expected)


def test_random_large_market_value_is_stable_across_schedule_seeds():
    """The paired long random schedule: another seed moves the value by under 1% of
    the effect."""
    cells = build_cells(MARKET, TREATMENT, ms.Switchback(3.0))
    values = [ms.SwitchbackDifference().estimate(ms.meanfield.switchback_ledger(
        cells, seed=s)).value for s in (0, 1)]
    assert abs(values[0] - values[1]) < 0.01 * ms.meanfield.gte(MARKET, TREATMENT)


# --- the periodic large-market path ------------------------------------------------------

def test_periodic_path_matches_the_mean_of_simulated_paths_at_large_n():
    """4,000 listings under a daily profile: the booking rate in each 2-hour bin of a
    day, averaged over replications, matches the periodic ODE path within Monte Carlo
    error (Kurtz 1970)."""
    daily = grown(100).replace(demand=ms.DemandProfile([1, 1, 1, 2, 3, 4, 4, 2],
                                                       period=24.0))
    path = ms.meanfield.periodic_path(daily, TREATMENT)
    model = FlowModel.of(path.cells)
    s = path.available[0] / model.n
    expected = []
    for a in range(0, 24, 2):
        s, made, _ = flow_through(model, s, float(a), float(a + 2), daily.demand)
        expected.append(made.sum() / 2.0)
    runs = np.array([ms.simulate(daily, TREATMENT, horizon=24.0, burn_in=48.0, seed=r,
                                 bins=12, start="steady", progress=False)
                     .bin_bookings.sum(axis=(1, 2)) / 2.0 for r in range(6)])
    error = runs.std(axis=0, ddof=1) / math.sqrt(len(runs))
    z = (runs.mean(axis=0) - np.array(expected)) / error
    assert np.max(np.abs(z)) < 4.0, z
    assert path.periods >= 2 and max(expected) > 2.0 * min(expected)


def test_global_effect_under_a_profile_is_the_period_average():
    """gte averages over whole periods: with a flat profile it is the steady-state
    effect, and the periodic path's ledger gives the same metric as the mean rates."""
    flat = MARKET.replace(demand=ms.DemandProfile([1.0, 1.0], period=24.0))
    assert ms.meanfield.gte(flat, TREATMENT) == pytest.approx(
        ms.meanfield.gte(MARKET, TREATMENT), rel=1e-12)
    peaked = MARKET.replace(demand=ms.DemandProfile([1, 3], period=24.0))
    treated = ms.meanfield.periodic_path(peaked, TREATMENT, ms.GlobalTreatment())
    control = ms.meanfield.periodic_path(peaked, TREATMENT)
    assert ms.meanfield.gte(peaked, TREATMENT) == pytest.approx(
        treated.mean_booking_rates.sum() - control.mean_booking_rates.sum(), rel=1e-8)
    with pytest.raises(ValueError, match="market must have a demand profile"):
        ms.meanfield.periodic_path(MARKET)


# --- design choice, scenario files -------------------------------------------------------

def test_default_candidates_add_switchbacks_that_fit_the_horizon_and_files_name_them():
    """Blocks of 2, 5 and 10 mean busy times (2.25 hours here), each at least 8 times in
    the horizon; a scenario file's switchback spec becomes the design."""
    from marketsim.model.scenario_file import scenario_from_dict
    from marketsim.model.scenarios import rehearsal_rooms_scenario
    from marketsim.planning import default_candidates
    from marketsim.report.full_report import candidate_arms

    labels = [a.label for a in default_candidates(MARKET, 100.0)
              if isinstance(a.design, ms.Switchback)]
    assert labels == ["switchback (block 4.5, burn-in 2.25, random)",
                      "switchback (block 11.25, burn-in 2.25, random)"]
    assert not any(isinstance(a.design, ms.Switchback) for a in default_candidates())
    data = rehearsal_rooms_scenario().to_dict()
    data["experiment"]["designs"] = [{"design": "switchback", "block_length": 12,
                                      "assignment": "alternating"}]
    scenario = scenario_from_dict(data)
    assert [a.design for a in candidate_arms(scenario)] == [
        ms.Switchback(12.0, burn_in=0.0, assignment="alternating")]
    assert scenario_from_dict(scenario.to_dict()).designs == scenario.designs
    with pytest.raises(ValueError, match="candidates must not include a switchback here"):
        ms.choose_design_robustly([MARKET, MARKET], TREATMENT, horizon=50.0,
                                  candidates=[ms.Switchback(5.0)], replications=2)


def test_alternating_blocks_in_step_with_the_day_are_warned_about():
    # Two blocks of 12 hours repeat with a 24-hour profile of a quiet night (multiplier 1
    # for hours 0-12) and a busy day (3 for hours 12-24): treated blocks (hours 0-12) get
    # 12 / (12 + 36) = 25% of the demand, counted by hand.
    daily = MARKET.replace(demand=ms.DemandProfile([1, 3], period=24.0))
    with pytest.warns(RuntimeWarning, match=r"alternating blocks of 12 .* get 25% of the demand"):
        ms.Switchback(12.0, burn_in=1.0, assignment="alternating").split(daily)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ms.Switchback(24.0, burn_in=1.0, assignment="alternating").split(daily)  # whole days
        ms.Switchback(12.0, burn_in=1.0, assignment="random").split(daily)
        ms.Switchback(12.0, burn_in=1.0, assignment="alternating").split(MARKET)  # flat


def test_an_interrupted_switchback_hands_back_its_finished_blocks():
    # Same seed, same path: the blocks finished before Ctrl-C are exactly the first
    # blocks of the uninterrupted run, counts and all.
    design = ms.Switchback(2.0, burn_in=0.5, assignment="alternating")
    cells = build_cells(MARKET.scaled(20), TREATMENT, design)
    calls = []

    def interrupt_on_the_fortieth_slice(state):
        calls.append(state.time)
        if len(calls) == 40:
            raise KeyboardInterrupt

    with pytest.raises(ms.engine.SimulationInterrupted) as stopped:
        run_cells(cells, horizon=40.0, burn_in=1.0, seed=4, slice_events=2**8,
                  on_slice=interrupt_on_the_fortieth_slice)
    partial = stopped.value.ledger
    whole = run_cells(cells, horizon=40.0, burn_in=1.0, seed=4)
    done = partial.blocks.n_blocks
    assert 0 < done < whole.blocks.n_blocks
    assert whole.blocks.ends[done - 1] <= calls[-1] - 1.0 < whole.blocks.ends[done]
    np.testing.assert_array_equal(partial.bin_bookings, whole.bin_bookings[:done])
    np.testing.assert_array_equal(partial.blocks.treated, whole.blocks.treated[:done])
    np.testing.assert_array_equal(whole.bookings, whole.bin_bookings.sum(axis=0))
    assert partial.window == pytest.approx(1.5 * done)
    assert math.isfinite(ms.SwitchbackDifference().estimate(partial).value)
