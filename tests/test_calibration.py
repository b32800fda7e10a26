"""Calibration from platform logs: round trip, coverage, outside references, checks."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

import marketsim as ms
from marketsim.calibration import calibrate, check_log
from marketsim.calibration.availability import available_at
from marketsim.calibration.busy import complete_durations, exponential_test, fit_busy_times
from marketsim.calibration.choice import considered_counts, fit_logit, group_choices
from marketsim.study import simulate_log

MARKET = ms.Market(
    listing_counts=[30, 20], mean_busy_time=[2.0, 3.0], arrival_rate=20.0,
    customer_shares=[0.6, 0.4], consideration=[[0.3, 0.5], [0.6, 0.2]],
    utility=[[0.5, 0.0], [0.0, 1.0]], outside_utility=[-1.0, -0.5],
    listing_types=["small", "large"], customer_types=["band", "solo"],
)


def truth_table(market: ms.Market) -> dict[tuple[str, str, str], float]:
    """True value of every calibrated parameter, keyed like the calibration table
    (utilities relative to the outside option, which the logs identify)."""
    truth = {("arrival_rate", "", ""): market.arrival_rate}
    for i, c in enumerate(market.customer_types):
        truth["customer_share", c, ""] = market.customer_shares[i]
        for j, ell in enumerate(market.listing_types):
            truth["consideration", c, ell] = market.consideration[i, j]
            truth["utility", c, ell] = market.utility[i, j] - market.outside_utility[i]
    for j, ell in enumerate(market.listing_types):
        truth["mean_busy_time", "", ell] = market.mean_busy_time[j]
    return truth


def z_scores(fit, market: ms.Market) -> pd.Series:
    table = fit.table.set_index(["parameter", "customer_type", "listing_type"])
    truth = truth_table(market)
    rows = {key: (table.loc[key, "estimate"] - value) / table.loc[key, "se"]
            for key, value in truth.items()}
    return pd.Series(rows)


@pytest.fixture(scope="module")
def round_trip_log():
    return simulate_log(MARKET, horizon=2500.0, burn_in=10.0, seed=3)  # about 50,000 sessions


def test_round_trip_every_parameter_within_3_5_standard_errors(round_trip_log):
    # Maximum-likelihood estimates are asymptotically normal around the truth
    # (standard asymptotics); 13 parameters each within 3.5 s.e. fails by chance
    # with probability about 13 * 4.7e-4 = 0.6%.
    assert 45_000 < len(round_trip_log.sessions) < 55_000
    fit = calibrate(round_trip_log.sessions, round_trip_log.stays, round_trip_log.listings,
                    round_trip_log.impressions)
    z = z_scores(fit, MARKET)
    assert len(z) == 13
    assert (z.abs() < 3.5).all(), z


def test_round_trip_without_impressions_given_true_consideration(round_trip_log):
    log = round_trip_log
    truth = MARKET.consideration[:, [1, 0]]  # types in sorted order: large before small
    fit = calibrate(log.sessions, log.stays, log.listings, consideration=truth)
    z = z_scores(fit, MARKET).drop("consideration", level=0)
    assert (z.abs() < 3.5).all(), z
    assert any("not separately identified" in note for note in fit.notes)


def test_without_impressions_consideration_is_required(round_trip_log):
    log = round_trip_log
    with pytest.raises(ValueError, match=r"consideration must be given.*not separately"):
        calibrate(log.sessions, log.stays, log.listings)


@pytest.mark.slow
def test_intervals_cover_within_the_binomial_band():
    # 95% intervals over independent replications: the count of misses is
    # Binomial(R, 0.05); each parameter's coverage must stay within 3.5 binomial
    # standard errors of 95% (all 13 together fail by chance with prob. < 1%).
    replications = 100
    hits = []
    for r in range(replications):
        log = simulate_log(MARKET, horizon=200.0, burn_in=10.0, seed=1000 + r)
        fit = calibrate(log.sessions, log.stays, log.listings, log.impressions)
        hits.append(z_scores(fit, MARKET).abs() < stats.norm.ppf(0.975))
    coverage = pd.concat(hits, axis=1).mean(axis=1)
    band = 3.5 * np.sqrt(0.95 * 0.05 / replications)
    assert (coverage > 0.95 - band).all(), coverage
    assert (coverage < min(1.0, 0.95 + band) + 1e-12).all(), coverage


def test_utilities_agree_with_statsmodels_conditional_logit():
    # Outside reference: statsmodels' ConditionalLogit on the same choices, with the
    # outside option as N identical alternatives of utility 0 (weight N e^{u_0}) and
    # each considered listing an alternative with a dummy for its type.
    from statsmodels.discrete.conditional_models import ConditionalLogit

    log = simulate_log(MARKET, horizon=12.0, seed=11)
    checked = check_log(log.sessions, log.stays, log.listings, log.impressions)
    considered = considered_counts(checked)
    chosen = np.where(checked.session_booked >= 0,
                      checked.listing_type[np.maximum(checked.session_booked, 0)], -1)
    groups = group_choices(checked.session_customer, considered, chosen)
    ours = fit_logit(groups, MARKET.n_listings, checked.customer_types, checked.listing_types)
    n = MARKET.n_listings
    for i in range(2):
        mine = np.flatnonzero(checked.session_customer == i)
        # one row per alternative: considered listings of type 0, of type 1, outside x N
        sizes = np.column_stack([considered[mine], np.full(mine.size, n)])
        kind = np.concatenate([np.repeat([0, 1, 2], row) for row in sizes])
        group = np.repeat(mine, sizes.sum(axis=1))
        first = np.r_[True, (group[1:] != group[:-1]) | (kind[1:] != kind[:-1])]
        picked = np.where(chosen[group] >= 0, chosen[group], 2)
        endog = first & (kind == picked)
        exog = np.eye(3)[kind][:, :2]
        reference = ConditionalLogit(np.array(endog, dtype=float), np.array(exog),
                                     groups=np.array(group)).fit(disp=False, method="newton")
        np.testing.assert_allclose(ours.value[i], reference.params, atol=1e-6)
        np.testing.assert_allclose(ours.se[i], reference.bse, rtol=1e-3)


def test_rebuilt_availability_equals_the_engine_record(round_trip_log):
    log = round_trip_log
    checked = check_log(log.sessions, log.stays, log.listings, log.impressions,
                        window=log.window)
    rebuilt = available_at(checked.session_time, checked.listing_type[checked.stay_listing],
                           checked.stay_start, checked.stay_end, checked.listing_counts)
    order = [checked.listing_types.index(name) for name in MARKET.listing_types]
    np.testing.assert_array_equal(rebuilt[:, order], log.available)


@given(st.lists(st.tuples(st.integers(0, 3), st.floats(0, 50), st.floats(0, 10)),
                max_size=30),
       st.lists(st.floats(0, 70), min_size=1, max_size=20))
@settings(max_examples=60, deadline=None)
def test_rebuilt_availability_matches_a_direct_count(stays, times):
    # Invariant: available = size - #{stays of the group with start < t < end}.
    group = np.array([g for g, _, _ in stays], dtype=np.int64) % 2
    start = np.array([s for _, s, _ in stays])
    end = start + np.array([d for _, _, d in stays])
    size = np.array([40, 40])
    t = np.array(times)
    got = available_at(t, group, start, end, size)
    for k, moment in enumerate(t):
        for g in range(2):
            busy = np.sum((group == g) & (start < moment) & (end > moment))
            assert got[k, g] == size[g] - busy


def _stay_log(durations: np.ndarray, listings: int, gap: float) -> ms.calibration.CheckedLog:
    """Logs of one listing type whose stays follow each other on each listing."""
    per = durations.size // listings
    starts, ends, ids = [], [], []
    for ell in range(listings):
        d = durations[ell * per:(ell + 1) * per]
        start = np.cumsum(d + gap) - d
        starts.append(start)
        ends.append(start + d)
        ids.append(np.full(per, ell))
    span = max(e[-1] for e in ends) + 1.0
    return check_log(
        pd.DataFrame({"session_id": [0, 1], "time": [0.0, span], "customer_type": "c",
                      "booked_listing": [None, None]}),
        pd.DataFrame({"listing_id": np.concatenate(ids), "start": np.concatenate(starts),
                      "end": np.concatenate(ends)}),
        pd.DataFrame({"listing_id": np.arange(listings), "listing_type": "room"}))


@pytest.mark.parametrize("shape, low, high", [(4.0, 0.90, 1.0), (1.0, 0.0, 0.104)])
def test_exponential_check_flags_gamma_and_spares_exponential(shape, low, high):
    # Gamma(4) busy times (coefficient of variation 0.5) must be flagged in at least
    # 90% of logs of the round-trip size (about 7,000 stays of a type); exponential
    # ones (gamma shape 1) at the 5% level: over 200 logs the flag count is
    # Binomial(200, 0.05), and 0.104 is 3.5 binomial s.e. above 5%.
    rng = np.random.default_rng(7)
    flags = []
    for _ in range(200):
        durations = rng.gamma(shape, 3.0 / shape, size=7000)
        log = _stay_log(durations, listings=20, gap=0.5)
        mean = fit_busy_times(log).mean[0]
        flags.append(exponential_test(complete_durations(log, 0, mean)).flagged)
    assert low <= np.mean(flags) <= high


def test_busy_time_maximum_likelihood_counts_censored_stays():
    # Exponential MLE with right censoring: total exposure / number of events.
    log = check_log(
        pd.DataFrame({"session_id": [0, 1], "time": [0.0, 10.0], "customer_type": "c",
                      "booked_listing": [None, None]}),
        pd.DataFrame({"listing_id": [0, 0, 1], "start": [-2.0, 4.0, 1.0],
                      "end": [3.0, None, 12.0]}),
        pd.DataFrame({"listing_id": [0, 1], "listing_type": "room"}))
    fit = fit_busy_times(log)
    # exposure 3 (from the window's start) + 6 (censored) + 9 (cut at 10); 1 event
    assert fit.ended[0] == 1 and fit.censored[0] == 2
    assert fit.mean[0] == pytest.approx(18.0)


def test_erlang_b_blocking_in_the_logged_simulation():
    # Erlang B (standard loss-system formula, recursion B(k) = A B(k-1) / (k + A B(k-1))):
    # one type, consideration 1, negligible outside option: the share of customers
    # who find every listing busy equals B(c, A), A = arrival rate x mean busy time.
    c, arrival, busy = 5, 3.0, 1.0
    market = ms.Market(listing_counts=[c], mean_busy_time=[busy], arrival_rate=arrival,
                       customer_shares=[1.0], consideration=1.0, utility=0.0,
                       outside_utility=-30.0)
    log = simulate_log(market, horizon=20_000.0, burn_in=20.0, seed=2)
    blocked = log.sessions.booked_listing.isna().to_numpy()
    b = 1.0
    for k in range(1, c + 1):
        b = arrival * busy * b / (k + arrival * busy * b)
    n = blocked.size
    se = np.sqrt(b * (1 - b) / n) * 3  # sessions are correlated; 3x the binomial s.e.
    assert abs(blocked.mean() - b) < 4 * se
    assert np.array_equal(log.available[:, 0] == 0, blocked)


def test_fit_checks_speak_plain_words(round_trip_log):
    log = round_trip_log
    fit = calibrate(log.sessions, log.stays, log.listings, log.impressions)
    frame = fit.checks.to_frame()
    # the logs come from the model itself: no booking rate may be flagged (each
    # flag needs |z| > 3.5; four pairs give a false alarm with probability < 0.2%)
    assert not frame[frame.check == "booking rate"].flagged.any(), fit.checks.text()
    assert set(frame.check) == {"booking rate", "exponential busy times",
                                "stationary arrivals"}
    assert "booking rate" in fit.checks.text()
    assert fit.market.n_listings == MARKET.n_listings
    markets = fit.draw(5, seed=1)
    assert len(markets) == 5 and markets[0].arrival_rate != markets[1].arrival_rate
    logged = fit.market_with_logged_busy_times()
    assert [b.family for b in logged.busy_time] == ["empirical", "empirical"]
    np.testing.assert_allclose(logged.mean_busy_time, fit.market.mean_busy_time)
    assert [m.arrival_rate for m in fit.draw(2, seed=4)] == \
        [m.arrival_rate for m in fit.draw(2, seed=4)]
    fit.plot()


def _small_log():
    listings = pd.DataFrame({"listing_id": ["a", "b", "c"], "listing_type": ["x", "x", "y"]})
    stays = pd.DataFrame({"listing_id": ["a", "b", "a"], "start": [1.0, 2.0, 5.0],
                          "end": [3.0, 6.0, None]})
    sessions = pd.DataFrame({"session_id": [1, 2, 3, 4], "time": [1.0, 2.0, 4.0, 5.0],
                             "customer_type": ["p", "p", "q", "p"],
                             "booked_listing": ["a", "b", None, "a"]})
    impressions = pd.DataFrame({"session_id": [1, 1, 2, 3, 4],
                                "listing_id": ["a", "c", "b", "c", "a"]})
    return {"sessions": sessions, "stays": stays, "listings": listings,
            "impressions": impressions}


def test_small_log_passes_every_check():
    checked = check_log(**_small_log())
    assert checked.session_booked.tolist() == [0, 1, -1, 0]
    assert np.isinf(checked.stay_end[2])


def _broken(table, change):
    tables = _small_log()
    tables[table] = change(tables[table].copy())
    return tables


@pytest.mark.parametrize("table, change, message", [
    ("sessions", lambda f: f.rename(columns={"time": "tme"}),
     r"sessions: column 'time' is missing \(is 'tme' a misspelling\?\)"),
    ("stays", lambda f: f.drop(columns="end"), "stays: column 'end' is missing"),
    ("stays", lambda f: f.assign(end=[0.5, 6.0, None]),
     r"stays: column 'end' must be >= start: 1 of 3 rows break this, e.g. row 0"),
    ("stays", lambda f: f.assign(start=[1.0, 2.0, 2.5]),
     "stays: column 'start' must not fall inside an earlier stay.*1 of 3 rows"),
    ("stays", lambda f: f.assign(start=[1.0, np.nan, 5.0]),
     "stays: column 'start' must be a finite time.*1 of 3 rows.*row 1"),
    ("sessions", lambda f: f.assign(time=[1.0, 4.0, 2.0, 5.0]),
     "sessions: column 'time' must be sorted.*1 of 4 rows.*row 2"),
    ("sessions", lambda f: f.assign(time=[1.0, np.nan, 4.0, 5.0]),
     "sessions: column 'time' must be a finite time"),
    ("sessions", lambda f: f.assign(booked_listing=["a", "zz", None, "a"]),
     "sessions: column 'booked_listing' must be a listing_id.*1 of 4 rows.*'zz'"),
    ("sessions", lambda f: f.assign(booked_listing=["a", "a", None, "a"]),
     "sessions: column 'booked_listing' must be available.*1 of 4 rows.*row 1"),
    ("impressions", lambda f: f.assign(listing_id=["a", "c", "a", "c", "a"]),
     "impressions: column 'listing_id' must be available.*1 of 5 rows.*row 2"),
    ("impressions", lambda f: f.assign(session_id=[1, 1, 2, 3, 9]),
     "impressions: column 'session_id' must be a session_id.*1 of 5 rows"),
    ("listings", lambda f: f.assign(listing_id=["a", "a", "c"]),
     "listings: column 'listing_id' must not repeat.*1 of 3 rows"),
])
def test_bad_logs_are_refused_with_table_column_count_and_example(table, change, message):
    with pytest.raises(ValueError, match=message):
        check_log(**_broken(table, change))


def test_a_window_without_sessions_is_refused():
    with pytest.raises(ValueError, match=r"window .* must hold at least two sessions"):
        check_log(**_small_log(), window=(10.0, 20.0))


def test_sessions_outside_an_explicit_window_are_counted():
    checked = check_log(**_small_log(), window=(1.5, 6.0))
    assert checked.set_aside["sessions outside the window"] == 1
    assert checked.session_time.size == 3


def test_log_folder_round_trip(tmp_path, round_trip_log):
    from marketsim.calibration import read_log_folder

    small = simulate_log(MARKET, horizon=20.0, seed=4)
    for kind in ("csv", "parquet"):
        folder = small.to_folder(tmp_path / kind, kind=kind)
        tables = read_log_folder(folder)
        checked = check_log(**tables)
        assert checked.session_time.size == len(small.sessions)
        assert (checked.session_booked >= 0).sum() == small.sessions.booked_listing.notna().sum()


def test_stationarity_check_flags_a_rate_that_follows_the_hour_of_day():
    # Sessions of an inhomogeneous Poisson process (rate 10 by night, 30 by day,
    # thinning: Lewis & Shedler 1979) over 20 days must be flagged; a constant rate
    # mostly not (the chi-square test has level 5%).
    rng = np.random.default_rng(3)
    listings = pd.DataFrame({"listing_id": [0], "listing_type": ["room"]})
    stays = pd.DataFrame({"listing_id": [0], "start": [0.0], "end": [1.0]})
    verdicts = {}
    for name, day_rate in (("varying", 30.0), ("constant", 10.0)):
        times = np.sort(rng.uniform(0, 480, rng.poisson(30 * 480)))
        hour = times % 24
        keep = rng.random(times.size) < np.where((hour > 8) & (hour < 20), day_rate, 10) / 30
        sessions = pd.DataFrame({"session_id": np.arange(keep.sum()), "time": times[keep],
                                 "customer_type": "c", "booked_listing": None})
        from marketsim.calibration.arrivals import stationarity_test

        verdicts[name] = stationarity_test(check_log(sessions, stays, listings)).flagged
    assert verdicts == {"varying": True, "constant": False}


@given(st.lists(st.tuples(st.integers(0, 2), st.floats(0, 20), st.floats(0, 5)), max_size=25),
       st.lists(st.tuples(st.integers(0, 2), st.floats(0, 30)), min_size=1, max_size=25))
@settings(max_examples=80, deadline=None)
def test_busy_lookup_matches_a_direct_search(stays, queries):
    # Invariant of the interval search behind the booking and impression checks:
    # busy = some stay of the listing has start < t < end (stays of one listing are
    # made disjoint here by laying them end to end).
    from marketsim.calibration.tables import _busy_at

    listing = np.array([s[0] for s in stays], dtype=np.int64)
    start = np.zeros(len(stays))
    end = np.zeros(len(stays))
    clock = {0: 0.0, 1: 0.0, 2: 0.0}
    for k, (ell, gap, length) in enumerate(stays):
        start[k] = clock[ell] + gap
        end[k] = start[k] + length
        clock[ell] = end[k]
    q_listing = np.array([q[0] for q in queries], dtype=np.int64)
    q_time = np.array([q[1] for q in queries])
    got = _busy_at(listing, start, end, q_listing, q_time)
    for k in range(len(queries)):
        expected = np.any((listing == q_listing[k]) & (start < q_time[k]) & (end > q_time[k]))
        assert got[k] == expected
