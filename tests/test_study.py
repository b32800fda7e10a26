"""Studies: statistical behaviour against known facts, reproducibility, interruption,
the tables and the figure.

Statistical tolerances come from the Monte Carlo standard errors the study
reports (``bias_mc_se``), never from pinned decimals of a seeded run.
"""

from __future__ import annotations

import math
import pickle
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

import marketsim as ms
from marketsim.study import SUMMARY_COLUMNS, backends, replication, result


def one_type_market(listings: int, balance: float, outside_utility: float) -> ms.Market:
    """One customer type considering every available listing of one type
    (mean busy time 1), at the given balance."""
    market = ms.Market(listing_counts=[listings], mean_busy_time=[1.0], arrival_rate=1.0,
                       customer_shares=[1.0], consideration=1.0, utility=0.0,
                       outside_utility=outside_utility)
    return market.with_balance(balance)


UTILITY_SHIFT = ms.Treatment(utility_shift=1.0)


def row(result: ms.StudyResult, arm: str, estimator: str | None = None) -> pd.Series:
    table = result.summary
    mine = table[table["arm"] == arm]
    if estimator is not None:
        mine = mine[mine["estimator"] == estimator]
    assert len(mine) == 1, (arm, estimator)
    return mine.iloc[0]


def nearly_unbiased(r: pd.Series, share: float = 0.10) -> bool:
    """|bias| within ``share`` of the effect, beyond 3 Monte Carlo standard errors."""
    return abs(r["bias"]) <= share * abs(r["truth"]) + 3.0 * r["bias_mc_se"]


def strongly_biased(r: pd.Series, share: float = 0.40) -> bool:
    """bias above ``share`` of the effect by more than 3 Monte Carlo standard errors."""
    return r["bias"] - 3.0 * r["bias_mc_se"] >= share * abs(r["truth"])


# ------------------------------------------------------------------ no competition
def test_every_estimator_is_unbiased_when_nothing_competes():
    """With supply far from binding (balance 0.001: arrivals are a thousandth of the
    release capacity, so almost every listing is always available) and a small
    booking probability (outside utility 6.5 against listing utility 0: about 0.15%
    in control), customers do not compete for listings and listings barely compete
    for a customer. Each estimator on the design it is made for must then be
    unbiased: within 3 Monte Carlo standard errors of the global treatment effect.

    (The booking probability matters too: with it near 30% the listing-side
    estimator is biased even here, because a treated listing takes bookings from
    control listings within one customer's choice; see the next test. The
    large-market model puts the remaining bias of every estimator here below 0.5%
    of the effect, while the Monte Carlo standard errors are 2.5-5% of it.)
    """
    market = one_type_market(1000, balance=0.001, outside_utility=6.5)
    arms = [
        ms.Arm(ms.CustomerSide(0.5), [ms.CustomerSideEstimator()]),
        ms.Arm(ms.ListingSide(0.5), [ms.ListingSideEstimator()]),
        ms.Arm(ms.TwoSided(0.5, 0.5), [ms.TwoSidedNaive(), ms.TwoSidedCorrected(k=1),
                                       ms.TwoSidedCorrected(k=2), ms.TwoSidedDebiased()]),
    ]
    result = ms.Study(market, UTILITY_SHIFT, arms, horizon=20_000.0).run(
        100, seed=11, workers=2, progress=False)
    summary = result.summary
    assert len(summary) == 6
    assert (summary["truth"] > 0).all()
    for _, r in summary.iterrows():
        assert abs(r["bias"]) <= 3.0 * r["bias_mc_se"], r[["arm", "estimator", "bias",
                                                           "bias_mc_se"]].to_dict()
        # the Monte Carlo error is small enough for this to mean something
        assert r["bias_mc_se"] <= 0.08 * r["truth"]


# ------------------------------------------------------------------ facts of the trade
@pytest.fixture(scope="module")
def balance_extremes() -> dict[str, ms.StudyResult]:
    """The same market (100 listings, outside utility 1, treatment utility +1) with
    demand scarce (balance 0.02) and supply scarce (balance 5)."""
    results = {}
    for name, balance, horizon in (("demand scarce", 0.02, 500.0), ("supply scarce", 5.0, 20.0)):
        market = one_type_market(100, balance=balance, outside_utility=1.0)
        arms = [
            ms.Arm(ms.CustomerSide(0.5), [ms.CustomerSideEstimator()], name="customer-side"),
            ms.Arm(ms.ListingSide(0.5), [ms.ListingSideEstimator()], name="listing-side"),
            ms.Arm(ms.TwoSided.for_balance(balance), [ms.TwoSidedNaive()],
                   name="two-sided for balance"),
        ]
        study = ms.Study(market, UTILITY_SHIFT, arms, horizon=horizon, burn_in=5.0)
        results[name] = study.run(100, seed=2022, workers=2, progress=False)
    return results


def test_customer_side_is_unbiased_when_demand_is_scarce_and_biased_when_supply_is(
        balance_extremes):
    """Facts of the trade (common practice, stated in papers on marketplace
    experiments, e.g. "Experimental design in two-sided platforms: an analysis of
    bias", Management Science 68(10), 2022): customer-side randomization is nearly
    unbiased when demand is scarce and strongly biased when supply is scarce, where
    treated customers take listings from control customers. The large-market model
    of this market gives relative biases of about +0.4% (balance 0.02) and +214%
    (balance 5): the bias can exceed the effect itself."""
    scarce_demand = row(balance_extremes["demand scarce"], "customer-side")
    scarce_supply = row(balance_extremes["supply scarce"], "customer-side")
    assert nearly_unbiased(scarce_demand), scarce_demand.to_dict()
    assert strongly_biased(scarce_supply), scarce_supply.to_dict()
    assert scarce_supply["relative_bias"] - 3 * scarce_supply["relative_bias_mc_se"] > 1.0


def test_listing_side_is_the_reverse(balance_extremes):
    """Facts of the trade (same source): listing-side randomization is strongly
    biased when demand is scarce, where a treated listing takes bookings from
    control listings within one customer's choice, and nearly unbiased when supply
    is scarce. Large-market model: about +62% (balance 0.02) and +4.5% (balance 5)."""
    scarce_demand = row(balance_extremes["demand scarce"], "listing-side")
    scarce_supply = row(balance_extremes["supply scarce"], "listing-side")
    assert strongly_biased(scarce_demand), scarce_demand.to_dict()
    assert nearly_unbiased(scarce_supply), scarce_supply.to_dict()


def test_two_sided_with_fractions_that_follow_balance_is_nearly_unbiased_at_both_ends(
        balance_extremes):
    """Facts of the trade (same source): two-sided randomization with
    ``a_C = (1 - beta) + beta/2`` and ``a_L = (1 - beta)/2 + beta``,
    ``beta = exp(-balance)``, is close to customer-side randomization when demand
    is scarce and to listing-side randomization when supply is scarce, and its
    naive estimator is nearly unbiased at both ends."""
    for name in ("demand scarce", "supply scarce"):
        r = row(balance_extremes[name], "two-sided for balance")
        assert nearly_unbiased(r), (name, r.to_dict())
    # and it is genuinely two-sided at balance 0.02: 99 of 100 listings treated
    assert row(balance_extremes["demand scarce"], "two-sided for balance")["design"] == \
        "two-sided (a_C=0.51, a_L=0.99)"


# ------------------------------------------------------------------ coverage
def test_naive_interval_covers_about_95_percent_without_competition():
    """Without competition (balance 0.001, so no listing is ever short; customer-side
    randomization, so no customer faces a mix of treated and control listings),
    customers book independently: the treated and control booking counts are
    independent Poisson (thinning of a Poisson process), exactly what the naive
    standard error assumes, and the normal 95% interval (hundreds of bookings per
    group) should cover the truth in about 95% of replications. Tolerance: 3
    binomial standard errors, ``3 * sqrt(0.95 * 0.05 / n)``."""
    market = one_type_market(100, balance=0.001, outside_utility=1.0)
    arms = [ms.Arm(ms.CustomerSide(0.5), [ms.CustomerSideEstimator()])]
    n = 400
    result = ms.Study(market, UTILITY_SHIFT, arms, horizon=10_000.0).run(
        n, seed=95, workers=2, progress=False)
    r = result.summary.iloc[0]
    assert abs(r["coverage"] - 0.95) <= 3 * math.sqrt(0.95 * 0.05 / n), r.to_dict()
    # the naive standard error matches the real spread of the estimates
    assert r["mean_naive_se"] == pytest.approx(r["sd"], rel=0.15)


# ------------------------------------------------------------------ reproducibility
def small_study(arms=None, metric=("bookings", "revenue", "conversion")) -> ms.Study:
    market = ms.scenarios.rehearsal_rooms()
    if arms is None:
        arms = [ms.CustomerSide(0.5), ms.ListingSide(0.5), ms.TwoSided(0.5, 0.5),
                ms.TwoSided.for_balance(market.balance)]
    return ms.Study(market, ms.scenarios.instant_confirmation(), arms, horizon=40.0,
                    burn_in=5.0, metric=list(metric))


def test_same_seed_gives_identical_results_with_one_or_two_workers():
    study = small_study()
    one = study.run(24, seed=7, workers=1, progress=False)
    two = study.run(24, seed=7, workers=2, progress=False)
    pd.testing.assert_frame_equal(one.summary, two.summary, check_exact=True)
    pd.testing.assert_frame_equal(one.replications, two.replications, check_exact=True)
    pd.testing.assert_frame_equal(one.truth, two.truth, check_exact=True)
    other = study.run(24, seed=8, workers=1, progress=False)
    assert not one.summary["mean_estimate"].equals(other.summary["mean_estimate"])


def test_replications_do_not_depend_on_the_run_length_or_the_other_arms():
    """Replication r always uses seed child r, and every arm shares it with the
    global worlds, so an arm's numbers do not depend on which arms come with it."""
    full = small_study().run(6, seed=3, progress=False)
    short = small_study().run(3, seed=3, progress=False)
    alone = small_study(arms=[ms.ListingSide(0.5)]).run(6, seed=3, progress=False)
    raw = full.replications
    pd.testing.assert_frame_equal(raw[raw["replication"] < 3].reset_index(drop=True),
                                  short.replications, check_exact=True)
    mine = raw[raw["arm"] == "listing-side (a_L=0.5)"].reset_index(drop=True)
    pd.testing.assert_frame_equal(mine, alone.replications, check_exact=True)


def test_workers_started_with_spawn_give_the_same_result(monkeypatch):
    """Everything sent to workers pickles, so the spawn start method works too."""
    study = small_study(arms=[ms.CustomerSide(0.5), ms.TwoSided(0.5, 0.5)],
                        metric=["bookings"])
    pickle.loads(pickle.dumps(study._plan))
    here = study.run(4, seed=1, workers=1, progress=False)
    monkeypatch.setattr(backends, "MP_CONTEXT", "spawn")
    spawned = study.run(4, seed=1, workers=2, progress=False)
    pd.testing.assert_frame_equal(here.summary, spawned.summary, check_exact=True)


def test_generator_and_seed_sequence_seeds():
    study = small_study(arms=[ms.CustomerSide(0.5)], metric=["bookings"])
    sequence = np.random.SeedSequence(42)
    first = study.run(3, seed=sequence, progress=False)
    again = study.run(3, seed=sequence, progress=False)  # not consumed by the first run
    pd.testing.assert_frame_equal(first.summary, again.summary, check_exact=True)
    generator = np.random.default_rng(1)
    a = study.run(3, seed=generator, progress=False)
    b = study.run(3, seed=generator, progress=False)  # a generator advances
    assert not a.replications["estimate"].equals(b.replications["estimate"])


# ------------------------------------------------------------------ interruption
def test_ctrl_c_returns_the_finished_replications_with_a_warning(monkeypatch):
    calls = {"n": 0}
    real = replication.replicate

    def interrupted_after_three(*args):
        if calls["n"] == 3:
            raise KeyboardInterrupt
        calls["n"] += 1
        return real(*args)

    monkeypatch.setattr(replication, "replicate", interrupted_after_three)
    study = small_study(arms=[ms.CustomerSide(0.5)], metric=["bookings"])
    with pytest.warns(RuntimeWarning, match="study interrupted: 3 of 10 replications finished"):
        result = study.run(10, seed=1, progress=False)
    assert result.interrupted and result.completed == 3 and result.requested == 10
    assert (result.summary["replications"] == 3).all()
    assert "interrupted" in result.caveats
    monkeypatch.setattr(replication, "replicate", real)
    full = study.run(3, seed=1, progress=False)
    pd.testing.assert_frame_equal(result.summary, full.summary, check_exact=True)


def test_ctrl_c_before_two_replications_finish_goes_on(monkeypatch):
    def interrupted(*args):
        raise KeyboardInterrupt

    monkeypatch.setattr(replication, "replicate", interrupted)
    study = small_study(arms=[ms.CustomerSide(0.5)], metric=["bookings"])
    with pytest.raises(KeyboardInterrupt):
        study.run(10, seed=1, progress=False)


def test_ctrl_c_with_workers_cancels_the_rest(monkeypatch):
    """Ctrl-C reaches the parent process while it waits for workers (simulated by
    a progress bar that raises on its first update); the replications finished by
    then are returned and the worker processes are ended."""

    class Bar:
        def __init__(self, *args, **kwargs):
            pass

        def update(self, count):
            raise KeyboardInterrupt

        def close(self):
            pass

    monkeypatch.setattr(backends, "_progress_bar", Bar)
    study = small_study(arms=[ms.CustomerSide(0.5)], metric=["bookings"])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        result = study.run(40, seed=1, workers=2, progress=False)
    assert result.interrupted and 2 <= result.completed < 40
    assert any("study interrupted" in str(w.message) for w in caught)
    done = sorted(result.replications["replication"].unique())
    monkeypatch.undo()
    full = study.run(40, seed=1, progress=False).replications
    pd.testing.assert_frame_equal(
        full[full["replication"].isin(done)].reset_index(drop=True), result.replications,
        check_exact=True)


# ------------------------------------------------------------------ tables and figure
def test_summary_has_one_row_per_arm_estimator_metric_and_documented_columns():
    study = small_study(arms=[ms.CustomerSide(0.5), ms.Arm(ms.TwoSided(0.5, 0.5), name="tsr")])
    result = study.run(5, seed=2, progress=False)
    summary = result.summary
    assert tuple(summary.columns) == SUMMARY_COLUMNS
    # customer-side arm: only the customer-side estimator (the naive one repeats it)
    # two-sided arm: the four two-sided estimators; three metrics each
    assert len(summary) == (1 + 4) * 3
    assert summary[["arm", "estimator", "metric"]].duplicated().sum() == 0
    assert set(summary["arm"]) == {"customer-side (a_C=0.5)", "tsr"}
    for column in SUMMARY_COLUMNS:
        assert column in ms.StudyResult.__doc__
    # definitions
    r = summary.iloc[0]
    raw = result.replications
    mine = raw[(raw["arm"] == r["arm"]) & (raw["estimator"] == r["estimator"])
               & (raw["metric"] == r["metric"])]
    assert r["mean_estimate"] == pytest.approx(mine["estimate"].mean())
    assert r["truth"] == pytest.approx(mine["replication_truth"].mean())
    assert r["bias"] == pytest.approx(r["mean_estimate"] - r["truth"])
    assert r["relative_bias"] == pytest.approx(r["bias"] / r["truth"])
    assert r["sd"] == pytest.approx(mine["estimate"].std(ddof=1))
    assert r["rmse"] == pytest.approx(math.sqrt(((mine["estimate"] - r["truth"]) ** 2).mean()))
    assert r["bias_mc_se"] == pytest.approx(
        (mine["estimate"] - mine["replication_truth"]).std(ddof=1) / math.sqrt(5))
    covered = (mine["estimate"] - r["truth"]).abs() <= 1.959963984540054 * mine["naive_se"]
    assert r["coverage"] == pytest.approx(covered.mean())
    assert len(raw) == 5 * len(summary)
    assert list(result.truth.columns) == ["metric", "value", "mc_se", "global_control",
                                          "global_treatment", "replications"]
    assert list(result.truth["metric"]) == ["bookings", "revenue", "conversion"]
    assert "Monte Carlo" in result.caveats
    overview = result.overview()
    assert list(overview.columns) == ["arm", "estimator", "metric", "truth", "mean", "bias",
                                      "relative bias", "sd", "rmse", "coverage"]


def test_null_treatment_has_zero_truth_and_no_relative_bias():
    """With common random numbers the two global worlds of a null treatment are the
    same run, so the truth is exactly 0 and relative bias is undefined: the run says why
    (a warning and the caveats), while bias and RMSE stay defined."""
    study = ms.Study(ms.scenarios.rehearsal_rooms(), ms.Treatment(), [ms.CustomerSide(0.5)],
                     horizon=20.0)
    with pytest.warns(RuntimeWarning, match="exactly 0 for bookings .* undefined and shown as NaN"):
        result = study.run(4, seed=1, progress=False)
    assert result.truth["value"].tolist() == [0.0]
    assert result.truth["mc_se"].tolist() == [0.0]
    assert np.isnan(result.summary["relative_bias"]).all()
    assert "undefined and shown as NaN" in result.caveats
    assert result.summary["rmse"].notna().all()


def test_custom_estimators_are_scored_too():
    class TreatedPairsOnly(ms.Estimator):
        """Linear: only the weights are given."""

        def weights(self, split, market):
            a = split.customer_fraction * split.listing_fraction
            return np.array([[0.0, 0.0], [0.0, 1.0 / a]])

    class Ratio(ms.Estimator):
        """Not linear: overrides estimate itself."""

        def weights(self, split, market):
            return ms.CustomerSideEstimator().weights(split, market)

        def estimate(self, ledger, metric="bookings"):
            base = ms.CustomerSideEstimator().estimate(ledger, metric)
            return ms.Estimate(2.0 * base.value, base.standard_error)

    arm = ms.Arm(ms.CustomerSide(0.5), [ms.CustomerSideEstimator(), TreatedPairsOnly(),
                                        Ratio()])
    result = small_study(arms=[arm], metric=["bookings"]).run(3, seed=1, progress=False)
    by_name = result.summary.set_index("estimator")["mean_estimate"]
    assert by_name["Ratio"] == pytest.approx(2.0 * by_name["customer-side"])
    assert by_name["TreatedPairsOnly"] > by_name["customer-side"]


def test_plot_returns_a_figure_with_two_panels():
    import matplotlib.pyplot as plt
    from matplotlib.figure import Figure

    result = small_study(arms=[ms.CustomerSide(0.5), ms.TwoSided(0.5, 0.5)],
                         metric=["bookings", "revenue"]).run(4, seed=1, progress=False)
    figure = result.plot()
    assert isinstance(figure, Figure)
    left, right = figure.axes
    assert "relative bias" in left.get_title() and "RMSE" in right.get_title()
    assert len(left.get_yticklabels()) == 5  # customer-side + four two-sided estimators
    assert "revenue" in result.plot(metric="revenue").axes[1].get_title()
    with pytest.raises(ValueError, match="metric must be one of 'bookings', 'revenue'"):
        result.plot(metric="conversion")
    plt.close("all")


# ------------------------------------------------------------------ validation
def test_arms_are_checked_before_any_simulation():
    market, treatment = ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation()

    def make(arms, **options):
        options = {"horizon": 10.0, **options}
        return ms.Study(market, treatment, arms, **options)

    with pytest.raises(ValueError, match=r"arm 'customer-side \(a_C=0.5\)': estimator "
                                         r"'listing-side' does not fit the design"):
        make([ms.Arm(ms.CustomerSide(0.5), [ms.ListingSideEstimator()])])
    with pytest.raises(ValueError, match="arm 'global treatment' has no built-in estimator"):
        make([ms.GlobalTreatment()])
    with pytest.raises(ValueError, match="arms must have distinct names, got 'x' twice"):
        make([ms.Arm(ms.CustomerSide(0.5), name="x"), ms.Arm(ms.ListingSide(0.5), name="x")])
    with pytest.raises(ValueError, match="arms must be a non-empty list"):
        make([])
    with pytest.raises(ValueError, match=r"arms must contain ms\.Arm or ms\.Design objects, "
                                         r"got str"):
        make(["customer-side"])
    with pytest.raises(ValueError, match=r"estimators must contain marketsim\.Estimator"):
        ms.Arm(ms.CustomerSide(0.5), ["customer-side"])
    with pytest.raises(ValueError, match="estimators must have distinct names"):
        ms.Arm(ms.CustomerSide(0.5), [ms.CustomerSideEstimator(), ms.CustomerSideEstimator()])
    with pytest.raises(ValueError, match=r"design must be a marketsim\.Design"):
        ms.Arm("customer-side")
    with pytest.raises(ValueError, match="horizon must be a finite number > 0, got 0"):
        make([ms.CustomerSide(0.5)], horizon=0)
    with pytest.raises(ValueError, match="burn_in must be a finite number >= 0, got -1"):
        make([ms.CustomerSide(0.5)], burn_in=-1)
    with pytest.raises(ValueError, match="metric must be one of 'bookings', 'revenue', "
                                         "'conversion', got 'clicks'"):
        make([ms.CustomerSide(0.5)], metric="clicks")
    with pytest.raises(ValueError, match="metric 'revenue' needs a market with prices"):
        ms.Study(ms.Market(listing_counts=[5], mean_busy_time=[1.0], arrival_rate=1.0,
                           customer_shares=[1.0], consideration=1.0, utility=0.0,
                           outside_utility=0.0), treatment, [ms.CustomerSide(0.5)],
                 horizon=1.0, metric=["bookings", "revenue"])
    with pytest.raises(ValueError, match="start must be one of 'empty', 'steady'"):
        make([ms.CustomerSide(0.5)], start="full")
    with pytest.raises(ValueError, match=r"treatment must be a marketsim\.Treatment"):
        ms.Study(market, None, [ms.CustomerSide(0.5)], horizon=1.0)


def test_run_arguments_are_checked():
    study = small_study(arms=[ms.CustomerSide(0.5)], metric=["bookings"])
    with pytest.raises(ValueError, match="replications must be a whole number >= 2, got 1"):
        study.run(1)
    with pytest.raises(ValueError, match="workers must be a whole number >= 1, got 0"):
        study.run(5, workers=0)
    with pytest.raises(ValueError, match="seed must be a whole number >= 0"):
        study.run(5, seed=-1)
    with pytest.raises(ValueError, match="progress must be True or False, got 'yes'"):
        study.run(5, progress="yes")


def test_the_fast_path_gives_exactly_what_the_estimators_give(monkeypatch):
    """The study applies precomputed coefficients to group totals; forcing every
    estimator through its own ``estimate`` must give identical numbers (all metrics,
    including conversion, whose coefficients use the observed split of arrivals)."""
    study = small_study()
    fast = study.run(4, seed=9, progress=False)
    plan = study._plan
    slow_plan = replication.Plan(**{
        **{name: getattr(plan, name) for name in plan.__dataclass_fields__},
        "arm_weights": tuple((None,) * len(w) for w in plan.arm_weights),
    })
    monkeypatch.setattr(study, "_plan", slow_plan)
    slow = study.run(4, seed=9, progress=False)
    pd.testing.assert_frame_equal(fast.replications, slow.replications, check_exact=True)


# ------------------------------------------------------------------ Monte Carlo errors
def test_monte_carlo_errors_match_the_spread_over_repeated_studies():
    """The Monte Carlo standard errors of a summary row must equal the spread of its
    figure over many independent studies (a direct simulation with numpy normal draws
    standing in for estimates e_r and replication truths t_r). The truth T is itself
    a Monte Carlo mean, so its error enters the RMSE too: with the truth as noisy as
    the estimate and a bias of 1, ignoring it understates the RMSE's error by about
    30%. Tolerance: 4 Monte Carlo standard errors of the spread (a sample standard
    deviation over S studies has relative error about 1/sqrt(2 (S - 1)))."""
    rng = np.random.default_rng(20)
    studies, n = 2000, 200
    truths = 1.0 + 0.3 * rng.standard_normal((studies, n))
    estimates = 2.0 + 0.3 * rng.standard_normal((studies, n))
    scores = [result._score(e, t) for e, t in zip(estimates, truths)]
    tolerance = 4.0 / math.sqrt(2.0 * (studies - 1))
    for figure in ("bias", "relative_bias", "rmse"):
        spread = np.std([s[figure] for s in scores], ddof=1)
        reported = np.mean([s[f"{figure}_mc_se"] for s in scores])
        assert abs(reported / spread - 1.0) < tolerance, (figure, reported, spread)


def test_study_runs_markets_with_general_busy_times_and_a_profile():
    """A study on a market with lognormal stays and a daily profile runs on the
    general engine from the warm start, with identical results for the same seed."""
    market = ms.scenarios.rehearsal_rooms().replace(
        busy_time=ms.busy_time.LogNormal(cv=1.5),
        demand=ms.DemandProfile([0.5, 1.0, 1.5, 1.0], period=24.0))
    study = ms.Study(market, ms.Treatment(utility_shift=0.3), arms=[ms.CustomerSide(0.5)],
                     horizon=48.0, burn_in=24.0, start="steady")
    first, second = (study.run(replications=4, seed=2, progress=False) for _ in range(2))
    pd.testing.assert_frame_equal(first.summary, second.summary)
    assert np.isfinite(first.summary["bias"]).all()


def test_too_few_treated_listings_are_explained():
    """ListingSide(0.01) on the 40-listing market (30 rooms, 10 studios): round(0.01 x 30)
    = round(0.01 x 10) = 0, so no listing is treated. Study says that rounding did it and
    which share gives one treated listing (0.5 / 30 = 0.0167); simulate warns; a share that
    treats one listing runs quietly."""
    market = ms.scenarios.rehearsal_rooms()
    feature = ms.scenarios.instant_confirmation()
    with pytest.raises(ValueError, match=r"rounding left no treated listing.*at least 0\.0167"):
        ms.Study(market, feature, [ms.ListingSide(0.01)], horizon=10.0).run(
            2, seed=1, progress=False)
    with pytest.raises(ValueError, match="rounding left no treated listing"):
        ms.Study(market, feature, [ms.Arm(ms.ListingSide(0.01), ms.ListingSideEstimator())],
                 horizon=10.0).run(2, seed=1, progress=False)
    with pytest.warns(RuntimeWarning, match="rounding left no treated listing"):
        ms.simulate(market, feature, ms.ListingSide(0.01), horizon=5.0, seed=1)
    with pytest.warns(RuntimeWarning, match=r"rounding treated every listing.*below 0\.983"):
        ms.simulate(market, feature, ms.ListingSide(0.99), horizon=5.0, seed=1)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ms.simulate(market, feature, ms.ListingSide(0.0167), horizon=5.0, seed=1)


def test_progress_bars_only_where_they_can_redraw(monkeypatch):
    """No text bar when stderr is not a terminal (a notebook without widgets, a log, CI),
    where it would print line after line; the text bar in a terminal; tqdm's widget bar
    in a notebook when ipywidgets is installed, none without it."""
    import io

    from tqdm import tqdm

    from marketsim.study import progress

    monkeypatch.setattr(progress.sys, "stderr", io.StringIO())
    assert progress.progress_bar_class() is None
    assert backends._progress_bar(10, True, "x").disable

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    monkeypatch.setattr(progress.sys, "stderr", Terminal())
    assert progress.progress_bar_class() is tqdm
    monkeypatch.setattr(progress, "_in_notebook", lambda: True)
    monkeypatch.setitem(sys.modules, "ipywidgets", None)  # not installed
    assert progress.progress_bar_class() is None

