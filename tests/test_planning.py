"""Planning: sweeps, horizon and sample size, power with bias, design choice."""

import math

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.power import NormalIndPower

import marketsim as ms
from marketsim.planning import choose_design, plan_horizon, power_table, sweep
from marketsim.power import detectable_standard_error, power_with_bias, sample_size_per_group


def uncongested_market() -> ms.Market:
    """One customer type, one listing type, supply far from binding (balance 0.001):
    no competition, so customers are independent units. Booking probability
    about 0.5 w / (w0 + 0.5 w) = 0.3 in control."""
    return ms.Market(listing_counts=[200], mean_busy_time=[1.0], arrival_rate=0.2,
                     customer_shares=[1.0], consideration=0.5, utility=0.0,
                     outside_utility=math.log(0.5 / 0.3 - 0.5))


# ----------------------------------------------------------------- sample size
def test_sample_size_without_competition_matches_two_sample_formula():
    """Without competition, the horizon recommended to detect an effect, in customers
    per group, matches the two-sample normal formula n = (z_{1-a/2} + z_{1-b})^2 2 s^2 / d^2,
    statsmodels' NormalIndPower (reference library) and van Belle's n ~ 16 s^2 / d^2
    (Statistical Rules of Thumb, 2nd ed., 2008) within Monte Carlo error."""
    market = uncongested_market()
    treatment = ms.Treatment(utility_shift=0.2)
    replications = 300
    plan = plan_horizon(market, treatment, ms.Arm(ms.CustomerSide(0.5),
                                                  ms.CustomerSideEstimator()),
                        pilot_horizon=10_000.0, metric="conversion", minimum_effect=0.04,
                        replications=replications, seed=5, progress=False)
    row = plan.table.iloc[0]
    assert row["scaling_holds"]
    per_group = 0.5 * row["expected_arrivals"]
    # sigma^2 of one customer's booking indicator, pooled over the two groups; the
    # conversion levels of the two worlds in the large-market limit.
    control = ms.meanfield.steady_state(market).booking_rate / market.arrival_rate
    treated = ms.meanfield.steady_state(market, treatment, ms.GlobalTreatment()).booking_rate \
        / market.arrival_rate
    sigma = math.sqrt((control * (1 - control) + treated * (1 - treated)) / 2)
    formula = sample_size_per_group(sigma, 0.04)
    reference = NormalIndPower().solve_power(effect_size=0.04 / sigma, alpha=0.05, power=0.8)
    rule_of_thumb = 16 * sigma**2 / 0.04**2
    # n is proportional to sd^2: its relative Monte Carlo error is twice that of sd.
    relative_error = 2 * row["sd_check_mc_se"] / row["sd_check"]
    for expected, slack in ((formula, 0.0), (reference, 0.0), (rule_of_thumb, 0.03)):
        assert abs(per_group / expected - 1) < 3 * relative_error + slack


def test_recommended_horizon_achieves_target_when_resimulated():
    """Re-simulating at the recommended horizon gives the target standard deviation
    within Monte Carlo error (the 1/sqrt(horizon) projection is checked, not assumed)."""
    market = ms.scenarios.rehearsal_rooms()
    treatment = ms.scenarios.instant_confirmation()
    arm = ms.Arm(ms.ListingSide(0.5))
    plan = plan_horizon(market, treatment, arm, pilot_horizon=25.0, burn_in=20.0,
                        target_se=0.1, replications=200, seed=2, progress=False)
    row = plan.table.iloc[0]
    assert row["reachable"] and row["recommended_horizon"] > 100.0
    check = ms.Study(market, treatment, [arm], horizon=row["recommended_horizon"],
                     burn_in=20.0).run(200, seed=3, progress=False)
    achieved = check.summary["sd"].iloc[0]
    # relative errors: the plan's sd estimate and the check's sd estimate.
    tolerance = 3 * math.hypot(row["sd_check_mc_se"] / row["sd_check"],
                               1 / math.sqrt(2 * 199))
    assert abs(achieved / 0.1 - 1) < tolerance


def test_bias_floor_makes_small_rmse_unreachable():
    """Bias does not shrink with time: when the target RMSE is below the bias the plan
    says so plainly and recommends no horizon."""
    market = ms.scenarios.rehearsal_rooms(balance=4.0)
    treatment = ms.scenarios.instant_confirmation()
    plan = plan_horizon(market, treatment, ms.CustomerSide(0.5), pilot_horizon=20.0,
                        burn_in=10.0, target_rmse=0.05, replications=40, seed=4,
                        progress=False)
    row = plan.table.iloc[0]
    assert abs(row["bias"]) > 0.05 + 3 * row["bias_mc_se"]
    assert not row["reachable"] and math.isnan(row["recommended_horizon"])
    assert row["verdict"] == "unreachable"
    report = plan.report()
    assert report.count("unreachable") == 1 and "cannot tell" not in report
    assert "bias floor" in report


def test_plan_needs_exactly_one_target():
    market = ms.scenarios.rehearsal_rooms()
    with pytest.raises(ValueError, match="exactly one of target_se, target_relative_se, "
                                         "minimum_effect, relative_minimum_effect, "
                                         "target_rmse, got none"):
        plan_horizon(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                     pilot_horizon=10.0)
    with pytest.raises(ValueError, match="got target_se, target_rmse"):
        plan_horizon(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                     pilot_horizon=10.0, target_se=0.1, target_rmse=0.2)
    with pytest.raises(ValueError, match="check_factor must be a finite number > 1"):
        plan_horizon(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                     pilot_horizon=10.0, target_se=0.1, check_factor=1.0)


# ----------------------------------------------------------------- sweeps
def test_large_market_sweep_rows_and_columns():
    market = ms.scenarios.rehearsal_rooms()
    treatment = ms.scenarios.instant_confirmation()
    table = sweep(market, treatment, [ms.CustomerSide(0.5), ms.ListingSide(0.5)],
                  values=[0.1, 1.0, 10.0])
    assert list(table["value"].unique()) == [0.1, 1.0, 10.0]
    assert np.allclose(table["balance"], table["value"])
    assert table["sd"].isna().all()
    assert np.allclose(table["rmse"], table["bias"].abs())
    per_point = table.groupby("value").size()
    assert (per_point == per_point.iloc[0]).all()
    # The sweep agrees with the large-market model point by point.
    direct = ms.meanfield.expected_estimates(market.with_balance(10.0), treatment,
                                             ms.ListingSide(0.5))
    row = table[(table["value"] == 10.0) & (table["estimator"] == "listing-side")]
    assert row["bias"].iloc[0] == pytest.approx(direct["bias"].iloc[0], rel=1e-12)


def test_sweep_over_other_parameters_and_balance_following_designs():
    market = ms.scenarios.rehearsal_rooms()
    treatment = ms.scenarios.instant_confirmation()
    by_rate = sweep(market, treatment, [ms.TwoSided.for_balance],
                    values=[4.0, 16.0, 64.0], parameter="arrival_rate")
    assert by_rate["parameter"].iloc[0] == "arrival_rate"
    assert np.allclose(by_rate.groupby("value")["balance"].first().to_numpy(),
                       [4.0 / 18.333333333, 16.0 / 18.333333333, 64.0 / 18.333333333])
    assert by_rate["arm"].nunique() == 1

    def longer_sessions(m, factor):
        return m.replace(mean_busy_time=m.mean_busy_time * factor)

    custom = sweep(market, treatment, [ms.CustomerSide(0.5)], values=[0.5, 2.0],
                   parameter=longer_sessions)
    assert custom["parameter"].iloc[0] == "longer_sessions"
    assert custom["balance"].iloc[1] == pytest.approx(4 * custom["balance"].iloc[0])


def test_simulation_sweep_has_monte_carlo_columns():
    market = ms.scenarios.rehearsal_rooms()
    table = sweep(market, ms.scenarios.instant_confirmation(), [ms.CustomerSide(0.5)],
                  values=[0.5, 2.0], mode="simulation", horizon=30.0, burn_in=10.0,
                  replications=10, seed=1, progress=False)
    assert {"bias_mc_se", "coverage", "replications"} <= set(table.columns)
    assert (table["sd"] > 0).all() and (table["replications"] == 10).all()
    again = sweep(market, ms.scenarios.instant_confirmation(), [ms.CustomerSide(0.5)],
                  values=[0.5, 2.0], mode="simulation", horizon=30.0, burn_in=10.0,
                  replications=10, seed=1, progress=False)
    assert table.equals(again)


@pytest.mark.parametrize("kwargs, message", [
    ({"mode": "fast"}, "mode must be one of 'large-market', 'simulation', got 'fast'"),
    ({"parameter": "colour"}, "parameter must be one of 'balance', 'arrival_rate'"),
    ({"mode": "simulation"}, "mode 'simulation' needs horizon and replications"),
    ({"values": []}, "values must be a non-empty list, got []"),
])
def test_sweep_bad_input(kwargs, message):
    arguments = {"values": [1.0], **kwargs}
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace("[", r"\[")):
        sweep(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
              [ms.CustomerSide(0.5)], **arguments)


def test_sweep_plot_panels():
    """Large-market sweeps have no noise: bias and relative bias only."""
    from marketsim.planning.figures import plot_sweep

    table = sweep(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
                  [ms.CustomerSide(0.5)], values=[0.1, 1.0, 10.0])
    figure = plot_sweep(table)
    assert [axis.get_title()[:13] for axis in figure.axes] == ["bias", "relative bias"]
    assert figure.axes[0].get_xscale() == "log"
    simulated = sweep(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
                      [ms.CustomerSide(0.5)], values=[0.5, 2.0], mode="simulation",
                      horizon=20.0, replications=4, seed=1, progress=False)
    figure = plot_sweep(simulated)
    assert [axis.get_title() for axis in figure.axes] == ["bias", "standard deviation", "RMSE"]


# ----------------------------------------------------------------- power and design
def test_power_table_is_for_the_test_the_analyst_runs():
    """power_table's power is that of |estimate| > 1.96 naive_se (the reported standard
    error), checked against the rejection rate counted directly over the study's
    replications (tolerance: 4 binomial Monte Carlo s.e. plus 0.03 for the normal model and
    the spread of the reported standard error); the ideal test (dividing by the real sd)
    differs from it by far more for the listing-side estimator, whose reported standard
    error is larger than its spread."""
    market = ms.scenarios.rehearsal_rooms()
    result = ms.Study(market, ms.scenarios.instant_confirmation(),
                      [ms.CustomerSide(0.5), ms.ListingSide(0.5)], horizon=60.0,
                      burn_in=20.0).run(160, seed=9, workers=2, progress=False)
    table = power_table(result)
    assert len(table) == len(result.summary)
    assert "false_positive_rate" not in table.columns
    raw = result.replications
    for row, summary in zip(table.itertuples(), result.summary.itertuples()):
        mine = raw[(raw["arm"] == summary.arm) & (raw["estimator"] == summary.estimator)]
        rejected = (mine["estimate"].abs() > 1.959964 * mine["naive_se"]).mean()
        assert row.observed_power == pytest.approx(rejected)
        tolerance = 4 * math.sqrt(rejected * (1 - rejected) / len(mine)) + 0.03
        assert abs(row.power - rejected) < tolerance
        expected = power_with_bias(summary.truth, summary.bias, summary.sd,
                                   test_standard_error=summary.mean_naive_se)
        assert row.power == pytest.approx(expected.power)
        assert row.wrong_sign == pytest.approx(expected.power * expected.type_s)
        assert row.ideal_test_power == pytest.approx(
            power_with_bias(summary.truth, summary.bias, summary.sd).power)
    listing = table[table["estimator"] == "listing-side"].iloc[0]
    assert listing.mean_naive_se > 1.15 * listing.sd
    assert listing.ideal_test_power - listing.observed_power > \
        4 * listing.observed_power_mc_se + 0.03
    with_effect = power_table(result, effect=0.5)
    assert with_effect["observed_power"].isna().all()


def test_design_choice_recommends_smallest_rmse():
    market = ms.scenarios.rehearsal_rooms()
    choice = choose_design(market, ms.scenarios.instant_confirmation(), horizon=30.0,
                           burn_in=10.0, candidates=[ms.CustomerSide(0.5), ms.ListingSide(0.5),
                                                     ms.TwoSided(0.5, 0.5)],
                           replications=12, seed=3, progress=False)
    table = choice.table
    assert list(table["rank"]) == list(range(1, len(table) + 1))
    # the smallest RMSE is always among the practically tied, which come first
    assert table.loc[table["rmse"].idxmin(), "tied"]
    assert table["tied"].tolist() == sorted(table["tied"].tolist(), reverse=True)
    tied = table[table["tied"]]
    untied = table[~table["tied"]]
    assert untied["rmse"].is_monotonic_increasing
    if len(tied) > 1:  # the tie rule: smallest |bias| among the tied
        assert choice.recommended["bias"] == tied.loc[tied["bias"].abs().idxmin(), "bias"]
        assert any("Practically tied" in note and "smallest absolute bias" in note
                   for note in choice.notes)
    else:
        assert choice.recommended["rmse"] == table["rmse"].min()
    assert ((choice.table["bias_share"] >= 0) & (choice.table["bias_share"] <= 1)).all()
    assert "Recommended:" in choice.report()
    figure = choice.plot()
    assert figure.axes


def test_sweep_of_a_design_that_follows_balance_with_chosen_estimators():
    """An Arm of TwoSidedFollowingBalance carries its own estimators through a sweep,
    and agrees with the large-market model of TwoSided.for_balance at each point."""
    market = ms.scenarios.rehearsal_rooms().scaled(25)
    treatment = ms.scenarios.instant_confirmation()
    arm = ms.Arm(ms.TwoSidedFollowingBalance(), [ms.CustomerSideEstimator()])
    table = sweep(market, treatment, [arm], values=[0.3, 1.0, 3.0])
    assert table["arm"].unique().tolist() == ["two-sided (follows balance)"]
    assert table["estimator"].unique().tolist() == ["customer-side"]
    reference = ms.meanfield.sweep_balance(market, treatment, ms.TwoSided.for_balance,
                                           [0.3, 1.0, 3.0],
                                           estimators=[ms.CustomerSideEstimator()])
    assert np.allclose(table["bias"], reference["bias"], rtol=1e-12, atol=0.0)


@pytest.mark.filterwarnings("ignore:study interrupted")
def test_ctrl_c_during_a_simulation_sweep_keeps_the_points_finished(monkeypatch):
    """Ctrl-C stops the whole sweep (not just the current point) and returns what
    finished, with a warning."""
    from marketsim.study import replication

    calls = {"n": 0}
    real = replication.replicate

    def interrupted_in_second_point(*args):
        if calls["n"] == 7:  # 4 replications of the first point, 3 of the second
            raise KeyboardInterrupt
        calls["n"] += 1
        return real(*args)

    monkeypatch.setattr(replication, "replicate", interrupted_in_second_point)
    with pytest.warns(RuntimeWarning, match="sweep interrupted: returning 2 of 3 points"):
        table = sweep(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
                      [ms.CustomerSide(0.5)], values=[0.5, 1.0, 2.0], mode="simulation",
                      horizon=10.0, replications=4, seed=1, progress=False)
    assert table["value"].tolist() == [0.5, 1.0]
    assert table["replications"].tolist() == [4, 3]


@pytest.mark.filterwarnings("ignore:The global treatment effect is exactly 0")
def test_runner_up_note_uses_the_paired_monte_carlo_error():
    """Two estimators on the same ledgers, one the other times 1.1, under a null
    treatment (the global worlds share their random numbers, so every replication's
    truth is exactly 0): the second RMSE is exactly 1.1 times the first, so the gap is
    real however few the replications, and the runner-up must not be called "within
    Monte Carlo error". Treating the two rows as independent (the hypotenuse of their
    standard errors, about 1.5 s.e.) would call a gap of 0.1 RMSE ~ 0.1 sqrt(2 n) s.e.
    noise; the paired error is 0.1 s.e."""

    class Inflated(ms.Estimator):
        def weights(self, split, market):
            return 1.1 * ms.CustomerSideEstimator().weights(split, market)

    arm = ms.Arm(ms.CustomerSide(0.5), [ms.CustomerSideEstimator(), Inflated()])
    choice = choose_design(ms.scenarios.rehearsal_rooms(), ms.Treatment(), horizon=20.0,
                           candidates=[arm], replications=20, seed=4, progress=False)
    table = choice.table
    assert (choice.result.replications["replication_truth"] == 0.0).all()
    assert table["rmse"].iloc[1] == pytest.approx(1.1 * table["rmse"].iloc[0], rel=1e-9)
    assert not any("runner-up" in note for note in choice.notes), choice.notes


def test_undecided_target_gets_one_verdict():
    """When the bias floor is within two Monte Carlo standard errors of the target RMSE
    (above it or below it), the plan gives one verdict, that the pilots cannot tell,
    and never also calls the target unreachable (same seed, same pilots)."""
    market = ms.scenarios.rehearsal_rooms(balance=4.0)
    arguments = {"pilot_horizon": 10.0, "burn_in": 5.0, "replications": 20, "seed": 4,
                 "progress": False}
    first = plan_horizon(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                         target_se=1.0, **arguments).table.iloc[0]
    for shift in (-0.5, 0.5):
        near = abs(first["bias"]) + shift * first["bias_mc_se"]
        plan = plan_horizon(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                            target_rmse=near, **arguments)
        row = plan.table.iloc[0]
        assert row["verdict"] == "undecided"
        assert row["reachable"] == (shift > 0)
        report = plan.report()
        assert report.count("cannot tell") == 1 and "unreachable" not in report
        assert math.isnan(row["power"])
    clear = plan_horizon(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                         target_rmse=abs(first["bias"]) - 3 * first["bias_mc_se"], **arguments)
    assert clear.table["verdict"].iloc[0] == "unreachable"
    assert "cannot tell" not in clear.report()


def test_relative_targets_use_the_pilots_own_truth():
    """target_relative_se=r plans exactly as target_se=r*truth, and
    relative_minimum_effect=r as minimum_effect=r*truth, with the truth of the same
    pilots (same seed); the minimum effect is sized for the analyst's test, whose
    reported standard error is se_ratio times the real spread."""
    market = ms.scenarios.rehearsal_rooms()
    feature = ms.scenarios.instant_confirmation()
    arguments = {"pilot_horizon": 15.0, "burn_in": 5.0, "replications": 20, "seed": 6,
                 "progress": False}
    relative = plan_horizon(market, feature, ms.ListingSide(0.5), target_relative_se=0.05,
                            **arguments).table.iloc[0]
    truth = relative["truth"]
    absolute = plan_horizon(market, feature, ms.ListingSide(0.5), target_se=0.05 * truth,
                            **arguments).table.iloc[0]
    assert relative["recommended_horizon"] == pytest.approx(absolute["recommended_horizon"])
    assert relative["target_sd"] == pytest.approx(0.05 * truth)
    effect = plan_horizon(market, feature, ms.ListingSide(0.5), relative_minimum_effect=0.5,
                          **arguments)
    row = effect.table.iloc[0]
    assert row["target_sd"] == pytest.approx(
        detectable_standard_error(0.5 * truth, se_ratio=row["se_ratio"]))
    assert "the pilots' global treatment effect" in effect.target
    with pytest.raises(ValueError, match="target_relative_se must be a finite number > 0"):
        plan_horizon(market, feature, ms.ListingSide(0.5), target_relative_se=-0.1,
                     **arguments)


def test_plan_horizon_takes_a_design_choice():
    """The winner of choose_design is an object: plan_horizon sizes it directly, with the
    same pilots as the arm it names."""
    market = ms.scenarios.rehearsal_rooms()
    feature = ms.scenarios.instant_confirmation()
    choice = choose_design(market, feature, horizon=20.0, burn_in=5.0,
                           candidates=[ms.CustomerSide(0.5), ms.ListingSide(0.5)],
                           replications=10, seed=2, progress=False)
    assert isinstance(choice.design, ms.Design)
    assert choice.recommended_arm.label == choice.recommended["arm"]
    assert [a.label for a in choice.arms] == choice.table["arm"].tolist()
    arguments = {"pilot_horizon": 15.0, "burn_in": 5.0, "target_se": 0.2,
                 "replications": 10, "seed": 3, "progress": False}
    direct = plan_horizon(market, feature, choice, **arguments)
    by_arm = plan_horizon(market, feature, choice.recommended_arm, **arguments)
    pd.testing.assert_frame_equal(direct.table, by_arm.table)
    assert direct.table["estimator"].tolist() == [choice.recommended["estimator"]]
    with pytest.raises(ValueError, match=r"arm must be a marketsim\.Arm, a Design or a "
                                         r"DesignChoice"):
        plan_horizon(market, feature, "customer-side", **arguments)


def test_plan_report_gives_long_horizons_in_larger_units():
    """A horizon of thousands of hours is also given in weeks or years, and the report
    says what the horizon is."""
    market = ms.scenarios.rehearsal_rooms()
    plan = plan_horizon(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                        pilot_horizon=15.0, burn_in=5.0, target_se=0.01, replications=10,
                        seed=1, progress=False, time_unit="hour")
    hours = plan.table["recommended_horizon"].iloc[0]
    assert hours > 24 * 365
    report = plan.report()
    assert "years)" in report and "measured window after the burn-in" in report


@pytest.mark.filterwarnings("ignore:The global treatment effect is exactly 0")
def test_a_feature_without_effect_is_rarely_significant():
    """Why power_table has no "false-positive rate" that keeps the bias: a feature that
    changes nothing creates no interference, so every replication's truth is 0 and the
    analyst's test rejects at most about alpha = 5% of the time (binomial tolerance,
    3 Monte Carlo s.e.)."""
    market = ms.scenarios.rehearsal_rooms()
    result = ms.Study(market, ms.Treatment(utility_shift=0.0),
                      [ms.CustomerSide(0.5), ms.ListingSide(0.5), ms.TwoSided(0.5, 0.5)],
                      horizon=30.0, burn_in=10.0).run(150, seed=4, workers=2, progress=False)
    assert (result.replications["replication_truth"] == 0.0).all()
    table = power_table(result)
    for row in table.itertuples():
        assert row.observed_power < 0.05 + 3 * math.sqrt(0.05 * 0.95 / 150)
        assert math.isnan(row.wrong_sign) and math.isnan(row.type_m)
