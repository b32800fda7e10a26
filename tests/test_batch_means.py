"""Batch-means standard errors: arithmetic by hand, calibration against replications,
the study's columns, the rule for the number of batches and bad input.

The calibration check runs an M/M/c/c loss system (one listing type, consideration 1,
negligible outside option) under global control, so no treatment and no interference:
its booking rate in steady state is ``arrival_rate * (1 - B(c, A))``, with B the
Erlang B blocking probability (Erlang 1917; standard recursion). Batch means over one
run must give a standard error that matches the spread over independent replications
and intervals that cover that rate 95% of the time.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy.stats import binom
from scipy.stats import t as student_t

import marketsim as ms
from marketsim.estimators import GroupTotals
from marketsim.estimators.batches import default_batches, mean_busy_time
from tests.test_engine_reference import erlang_b

# ------------------------------------------------------------------ by hand
BIN_COUNTS = np.array([[[20, 8], [10, 25]],     # bin 0: customers x listings
                       [[16, 12], [15, 15]]])   # bin 1
BIN_ARRIVALS = np.array([[60, 40], [40, 60]])   # bin 0, bin 1: control, treated customers


def binned_ledger(window: float = 10.0) -> ms.Ledger:
    """A hand-built ledger of a customer-side experiment on one listing type, two bins
    of 5 hours (no simulation)."""
    market = ms.Market(listing_counts=[10], mean_busy_time=[1.0], arrival_rate=5.0,
                       customer_shares=[1.0], consideration=1.0, utility=0.0,
                       outside_utility=0.0)
    design = ms.TwoSided(0.5, 0.4)
    cells = ms.build_cells(market, ms.Treatment(utility_shift=0.3), design)
    n_listing = cells.n_listing_cells
    return ms.Ledger(cells=cells, bookings=BIN_COUNTS.sum(axis=0),
                     arrivals=BIN_ARRIVALS.sum(axis=0), window=window,
                     mean_available=np.zeros(n_listing),
                     final_available=np.zeros(n_listing, np.int64), events=0,
                     bin_edges=np.array([0.0, 5.0, 10.0]), bin_bookings=BIN_COUNTS,
                     bin_arrivals=BIN_ARRIVALS, engine="chain")


def test_batch_se_is_the_spread_of_the_per_batch_estimates_by_hand():
    """Customer-side estimator (a_C = 0.5): Q_1. / 0.5 - Q_0. / 0.5 per bin of 5 hours.
    Bin 0: (35 - 28) / 5 / 0.5 = 2.8; bin 1: (30 - 28) / 5 / 0.5 = 0.8. Two values:
    sd = |2.8 - 0.8| / sqrt(2), s.e. = sd / sqrt(2) = 1.0; the whole run's estimate
    (65 - 56) / 10 / 0.5 = 1.8 is their mean. The interval uses Student t on 1 degree
    of freedom (12.706, scipy.stats.t)."""
    estimate = ms.CustomerSideEstimator().estimate(binned_ledger())
    assert estimate.value == pytest.approx(1.8)
    assert estimate.batch_se == pytest.approx(1.0)
    assert estimate.batches == 2
    low, high = estimate.interval(kind="batch means")
    assert high - estimate.value == pytest.approx(student_t.ppf(0.975, 1) * 1.0)
    assert estimate.value - low == pytest.approx(12.7062, abs=1e-4)  # t table, 1 d.f.
    # the naive interval is unchanged: normal quantile times the Poisson s.e.
    low, high = estimate.interval()
    assert high - estimate.value == pytest.approx(1.959964 * estimate.standard_error)


def test_conversion_batches_are_linearised_around_the_run_by_hand():
    """Conversion, customer-side: p_1 - p_0 with the observed arrival split (100 of
    200 arrivals treated, so a_C = 0.5). Whole run: 65 / 100 - 56 / 100 = 0.09, i.e.
    (65 / 0.5 - 56 / 0.5) / 200. Bin b's linearised value is 0.09 + (sum(c Q_b) -
    0.09 A_b) / 100 with c = (-2, 2) per booking and A_b = 100 arrivals: bin 0:
    0.09 + (2 (35 - 28) - 9) / 100 = 0.14; bin 1: 0.09 + (2 (30 - 28) - 9) / 100 =
    0.04; s.e. = |0.14 - 0.04| / 2 = 0.05."""
    estimate = ms.CustomerSideEstimator().estimate(binned_ledger(), "conversion")
    assert estimate.value == pytest.approx(0.09)
    assert estimate.batch_se == pytest.approx(0.05)


def test_without_bins_there_is_no_batch_se():
    """A ledger without time bins (or with one) has no batch-means s.e.: NaN, and an
    interval of NaN bounds rather than a made-up one."""
    led = binned_ledger()
    flat = ms.Ledger(**{**led.__dict__, "bin_edges": np.empty(0),
                        "bin_bookings": np.zeros((0, 2, 2), np.int64),
                        "bin_arrivals": np.zeros((0, 2), np.int64)})
    estimate = ms.CustomerSideEstimator().estimate(flat)
    assert math.isnan(estimate.batch_se) and estimate.batches == 0
    assert all(math.isnan(x) for x in estimate.interval(kind="batch means"))
    with pytest.raises(ValueError, match=r"kind must be one of 'naive', 'batch means', "
                                         r"got 'bootstrap'"):
        estimate.interval(kind="bootstrap")


# ------------------------------------------------- calibration against replications
SERVERS, LOAD = 10, 8.0          # 10 listings, arrival rate 8, mean busy time 1
HORIZON, REPLICATIONS = 320.0, 400


def loss_system() -> ms.Market:
    return ms.Market(listing_counts=[SERVERS], mean_busy_time=[1.0], arrival_rate=LOAD,
                     customer_shares=[1.0], consideration=1.0, utility=0.0,
                     outside_utility=-30.0)


def calibrated(estimates: np.ndarray, errors: np.ndarray, quantile: float,
               truth: float) -> tuple[bool, bool, str]:
    """Whether standard errors ``errors`` (i) match the spread of ``estimates`` within 3
    Monte Carlo standard errors of the ratio mean(s.e.) / sd and (ii) give intervals
    ``estimate +- quantile * s.e.`` whose coverage of ``truth`` is inside the central
    99% band of Binomial(n, 0.95) / n (scipy.stats.binom)."""
    n = estimates.size
    sd, mean_se = estimates.std(ddof=1), errors.mean()
    ratio = mean_se / sd
    # delta method on log(ratio): the mean's error, and a sample sd's, from its kurtosis
    centred = estimates - estimates.mean()
    kurtosis = np.mean(centred**4) / np.mean(centred**2) ** 2
    log_se = math.sqrt(errors.var(ddof=1) / (n * mean_se**2) + (kurtosis - 1.0) / (4.0 * n))
    matches = bool(abs(math.log(ratio)) < 3.0 * log_se)
    low, high = binom.interval(0.99, n, 0.95)
    covered = int(np.sum(np.abs(estimates - truth) <= quantile * errors))
    covers = bool(low <= covered <= high)
    return matches, covers, (f"ratio {ratio:.3f} (log s.e. {log_se:.3f}), coverage "
                             f"{covered / n:.3f}, band [{low / n:.3f}, {high / n:.3f}]")


@pytest.fixture(scope="module")
def replications() -> dict[str, np.ndarray]:
    """400 runs of the loss system: booking rate with its naive and batch-means s.e.
    at the default number of batches (20 of 16 mean busy times), and at 3,200 tiny
    batches of 0.1 mean busy time (same seeds: bins do not change the draws)."""
    market = loss_system()
    rows = []
    for child in np.random.SeedSequence(20261203).spawn(REPLICATIONS):
        runs = {"horizon": HORIZON, "burn_in": 10.0, "seed": child, "start": "steady"}
        good = GroupTotals.of(ms.simulate(market, bins=default_batches(market, HORIZON),
                                          **runs)).combine(np.ones((1, 2, 2)))
        tiny = GroupTotals.of(ms.simulate(market, bins=3200, **runs)).combine(
            np.ones((1, 2, 2)))
        assert tiny.value == good.value
        rows.append((good.value, good.standard_error, good.batch_se, tiny.batch_se))
    table = np.array(rows)
    return {"estimate": table[:, 0], "naive": table[:, 1], "batch": table[:, 2],
            "tiny": table[:, 3]}


def test_batch_means_match_replications_and_cover_in_a_market_without_interference(
        replications):
    """Loss system under global control: the batch-means s.e. of the booking rate
    matches the standard deviation over 400 replications within Monte Carlo error, and
    its t intervals (19 d.f.) cover the Erlang B booking rate within the binomial band.
    The naive Poisson s.e. does not (bookings of a full market are more regular than
    Poisson: it is about 35% too large), nor does batch means broken in two ways:
    without the division by sqrt(k), or with batches of a tenth of a busy time."""
    truth = LOAD * (1.0 - erlang_b(SERVERS, LOAD))
    e = replications["estimate"]
    assert default_batches(loss_system(), HORIZON) == 20
    assert abs(e.mean() - truth) < 4.0 * e.std(ddof=1) / math.sqrt(e.size)
    t19 = student_t.ppf(0.975, 19)
    matches, covers, note = calibrated(e, replications["batch"], t19, truth)
    assert matches and covers, note
    # the same check has teeth: it rejects standard errors known to be wrong
    assert calibrated(e, replications["naive"], 1.959964, truth)[0] is False
    assert not any(calibrated(e, replications["batch"] * math.sqrt(20), t19, truth)[:2])
    tiny = calibrated(e, replications["tiny"], student_t.ppf(0.975, 3199), truth)
    assert not any(tiny[:2]), tiny[2]


# ------------------------------------------------------------------ in a study
def test_study_reports_each_kind_of_standard_error():
    """The summary's batch columns are the replications' batch_se scored as the naive
    ones are (coverage with the t quantile on batches - 1 d.f.); the old columns stay."""
    market = ms.scenarios.rehearsal_rooms()
    study = ms.Study(market, ms.scenarios.instant_confirmation(), [ms.CustomerSide(0.5)],
                     horizon=60.0, burn_in=10.0, start="steady")
    assert study.batches == default_batches(market, 60.0) == 5   # 60 / (5 x 2.25) = 5.3
    result = study.run(replications=30, seed=4, progress=False)
    row = result.summary.iloc[0]
    raw = result.replications
    sd = raw["estimate"].std(ddof=1)
    assert row["mean_batch_se"] == pytest.approx(raw["batch_se"].mean())
    assert row["batch_se_ratio"] == pytest.approx(raw["batch_se"].mean() / sd)
    assert row["naive_se_ratio"] == pytest.approx(raw["naive_se"].mean() / sd)
    quantile = student_t.ppf(0.975, 4)
    covered = np.mean(np.abs(raw["estimate"] - row["truth"]) <= quantile * raw["batch_se"])
    assert row["batch_coverage"] == pytest.approx(covered)
    assert row["batch_coverage_mc_se"] == pytest.approx(math.sqrt(covered * (1 - covered)
                                                                  / 30))
    assert np.isfinite(raw["batch_se"]).all() and (raw["batch_se"] > 0).all()
    assert {"mean_naive_se", "coverage", "coverage_mc_se"} <= set(result.summary.columns)
    assert "batches=5" in repr(study)


# ------------------------------------------------------------------ rule and bad input
def test_default_number_of_batches_follows_the_stated_rule():
    """min(20, floor(horizon / (5 x mean busy time))), at least 2; the rehearsal-room
    market's mean busy time is (30 x 2 + 10 x 3) / 40 = 2.25 hours."""
    market = ms.scenarios.rehearsal_rooms()
    assert mean_busy_time(market) == pytest.approx(2.25)
    assert [default_batches(market, h) for h in (336.0, 200.0, 100.0, 30.0, 4.0)] == \
        [20, 17, 8, 2, 2]


@pytest.mark.parametrize("batches", [1, 0, -3, 2.5, "20"])
def test_fewer_than_two_batches_is_refused(batches):
    with pytest.raises(ValueError, match=rf"batches must be a whole number >= 2, got "
                                         rf"{batches!r}"):
        ms.Study(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
                 [ms.CustomerSide(0.5)], horizon=100.0, batches=batches)


def test_batches_shorter_than_a_busy_time_warn_and_say_what_it_does():
    market, feature = ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation()
    with pytest.warns(RuntimeWarning, match=r"batches=100 cuts the window of 100 into "
                                            r"batches of 1, shorter than one mean busy time "
                                            r"\(2.25\).*batch-means standard error is "
                                            r"biased.*use at most 44 batches"):
        ms.Study(market, feature, [ms.CustomerSide(0.5)], horizon=100.0, batches=100)
    with pytest.warns(RuntimeWarning, match=r"use a horizon of at least 4.5"):
        ms.Study(market, feature, [ms.CustomerSide(0.5)], horizon=3.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ms.Study(market, feature, [ms.CustomerSide(0.5)], horizon=100.0, batches=44)


def test_frame_columns_are_unchanged_for_old_readers():
    """Existing summary columns keep their names and order at the front."""
    from marketsim.study import SUMMARY_COLUMNS

    old = ("arm", "design", "estimator", "metric", "truth", "truth_mc_se", "mean_estimate",
           "bias", "bias_mc_se", "relative_bias", "relative_bias_mc_se", "sd", "rmse",
           "rmse_mc_se", "mean_naive_se", "coverage", "coverage_mc_se", "replications")
    assert SUMMARY_COLUMNS[:len(old)] == old
