"""Estimators on hand-built ledgers: every formula against arithmetic done by hand.

The ledger below is made up (no simulation): one customer type, one listing
type of 10 listings with price 4, the design ``TwoSided(0.5, 0.4)`` (4 treated
listings, 6 control), a window of 10 hours and these bookings::

                       control listings   treated listings
    control customers        36                 20          -> Q00 = 3.6, Q01 = 2.0
    treated customers        25                 40          -> Q10 = 2.5, Q11 = 4.0

with 100 arrivals of each customer group (200 in all).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import marketsim as ms
from marketsim.estimators import all_estimators, fitting_estimators, group_rates, metric_rate

A_C, A_L, WINDOW = 0.5, 0.4, 10.0
COUNTS = np.array([[36, 20], [25, 40]])
Q00, Q01, Q10, Q11 = 3.6, 2.0, 2.5, 4.0


def market(price=(4.0,)) -> ms.Market:
    return ms.Market(listing_counts=[10], mean_busy_time=[1.0], arrival_rate=5.0,
                     customer_shares=[1.0], consideration=1.0, utility=0.0,
                     outside_utility=0.0, price=price)


def ledger_of(design: ms.Design, bookings, arrivals, the_market=None) -> ms.Ledger:
    """A ledger with the given counts, built by hand (no simulation)."""
    cells = ms.build_cells(the_market or market(), ms.Treatment(utility_shift=0.3), design)
    bookings = np.asarray(bookings, dtype=np.int64)
    arrivals = np.asarray(arrivals, dtype=np.int64)
    assert bookings.shape == (cells.n_customer_cells, cells.n_listing_cells)
    n_listing = cells.n_listing_cells
    return ms.Ledger(cells=cells, bookings=bookings, arrivals=arrivals, window=WINDOW,
                     mean_available=np.zeros(n_listing), final_available=np.zeros(n_listing,
                                                                                  np.int64),
                     events=0, bin_edges=np.empty(0),
                     bin_bookings=np.zeros((0, *bookings.shape), np.int64),
                     bin_arrivals=np.zeros((0, arrivals.size), np.int64), engine="chain")


@pytest.fixture
def ledger() -> ms.Ledger:
    led = ledger_of(ms.TwoSided(A_C, A_L), COUNTS, [100, 100])
    split = led.cells.split
    # cell order: customers (control, treated), listings (control, treated)
    assert split.customer_treated.tolist() == [False, True]
    assert split.listing_treated.tolist() == [False, True]
    assert split.listing_count.tolist() == [6, 4]
    return led


def test_group_rates_are_counts_per_hour_with_poisson_variances(ledger):
    rates, variances = group_rates(ledger, "bookings")
    np.testing.assert_allclose(rates, [[Q00, Q01], [Q10, Q11]])
    np.testing.assert_allclose(variances, COUNTS / WINDOW**2)
    assert metric_rate(ledger) == pytest.approx(Q00 + Q01 + Q10 + Q11)


def test_customer_side_formula(ledger):
    # (Q10 + Q11)/0.5 - (Q00 + Q01)/0.5 = 13 - 11.2 = 1.8
    estimate = ms.CustomerSideEstimator().estimate(ledger)
    assert estimate.value == pytest.approx(1.8)
    # Var = [(25 + 40) + (36 + 20)] / 0.5^2 / 10^2 = 484 / 100
    assert estimate.standard_error == pytest.approx(math.sqrt(4.84))


def test_listing_side_formula(ledger):
    # (Q01 + Q11)/0.4 - (Q00 + Q10)/0.6 = 15 - 6.1/0.6
    estimate = ms.ListingSideEstimator().estimate(ledger)
    assert estimate.value == pytest.approx(15.0 - 6.1 / 0.6)
    # Var = (20 + 40)/0.16/100 + (36 + 25)/0.36/100
    assert estimate.standard_error == pytest.approx(math.sqrt(60 / 16 + 61 / 36))


def test_two_sided_naive_formula(ledger):
    # Q11/(0.5*0.4) - (Q00 + Q01 + Q10)/(1 - 0.2) = 20 - 8.1/0.8 = 9.875
    estimate = ms.TwoSidedNaive().estimate(ledger)
    assert estimate.value == pytest.approx(9.875)
    # Var = 40 * 5^2 / 100 + (36 + 20 + 25) * 1.25^2 / 100 = 10 + 1.265625
    assert estimate.standard_error == pytest.approx(math.sqrt(11.265625))


@pytest.mark.parametrize(("k", "expected"), [(1, 9.875 - 1.3), (2, 9.875 - 2.6)])
def test_two_sided_corrected_formula(ledger, k, expected):
    """first contrast Q10/0.5 - Q00/0.5 = 5 - 7.2 = -2.2; second Q01/0.4 - Q00/0.6
    = 5 - 6 = -1; with beta = 0.25 the correction is 0.25*(-2.2) + 0.75*(-1) = -1.3
    (both contrasts negative, so the naive estimate is pulled down)."""
    estimate = ms.TwoSidedCorrected(k=k, beta=0.25).estimate(ledger)
    assert estimate.value == pytest.approx(expected)
    # coefficients: Q11: 5; Q01: -1.25 + k*0.75/0.4; Q10: -1.25 + k*0.25/0.5;
    # Q00: -1.25 - k*(0.25/0.5 + 0.75/0.6)
    c11, c01 = 5.0, -1.25 + k * 0.75 / 0.4
    c10, c00 = -1.25 + k * 0.25 / 0.5, -1.25 - k * (0.25 / 0.5 + 0.75 / 0.6)
    variance = (c00**2 * 36 + c01**2 * 20 + c10**2 * 25 + c11**2 * 40) / WINDOW**2
    assert estimate.standard_error == pytest.approx(math.sqrt(variance))


def test_corrected_beta_defaults_to_exp_minus_balance(ledger):
    the_market = ledger.cells.market
    beta = math.exp(-the_market.balance)
    split = ledger.cells.split
    np.testing.assert_allclose(ms.TwoSidedCorrected(k=2).weights(split, the_market),
                               ms.TwoSidedCorrected(k=2, beta=beta).weights(split, the_market))
    assert ms.TwoSidedCorrected(k=1).name == "two-sided corrected (k=1)"
    assert ms.TwoSidedCorrected(k=1, beta=0.3).name == "two-sided corrected (k=1, beta=0.3)"


def test_revenue_scales_by_price_and_needs_prices(ledger):
    bookings = ms.TwoSidedNaive().estimate(ledger, "bookings")
    revenue = ms.TwoSidedNaive().estimate(ledger, "revenue")
    assert revenue.value == pytest.approx(4.0 * bookings.value)
    assert revenue.standard_error == pytest.approx(4.0 * bookings.standard_error)
    unpriced = ledger_of(ms.TwoSided(A_C, A_L), COUNTS, [100, 100], market(price=None))
    with pytest.raises(ValueError, match="metric 'revenue' needs a market with prices"):
        ms.TwoSidedNaive().estimate(unpriced, "revenue")


def test_conversion_is_the_analysts_difference_of_conversion_rates(ledger):
    """Customer-side: 65 bookings by 100 treated customers against 56 by 100 control
    customers: 0.65 - 0.56 = 0.09, standard error sqrt(0.65*0.35/100 + 0.56*0.44/100)
    (two independent binomial proportions)."""
    conversion = ms.CustomerSideEstimator().estimate(ledger, "conversion")
    assert conversion.value == pytest.approx(0.09)
    assert conversion.standard_error == pytest.approx(
        math.sqrt(0.65 * 0.35 / 100 + 0.56 * 0.44 / 100))
    assert metric_rate(ledger, "conversion") == pytest.approx(121 / 200)


def test_conversion_uses_the_observed_split_of_arrivals():
    """120 control and 80 treated arrivals (design probability 0.5): the estimate is
    65/80 - 56/120, not (65 - 56)/(0.5 * 200)."""
    uneven = ledger_of(ms.TwoSided(A_C, A_L), COUNTS, [120, 80])
    conversion = ms.CustomerSideEstimator().estimate(uneven, "conversion")
    p1, p0 = 65 / 80, 56 / 120
    assert conversion.value == pytest.approx(p1 - p0)
    assert conversion.standard_error == pytest.approx(
        math.sqrt(p1 * (1 - p1) / 80 + p0 * (1 - p0) / 120))
    # bookings per hour keep the design probability
    assert ms.CustomerSideEstimator().estimate(uneven).value == pytest.approx(1.8)


def test_listing_side_conversion_treats_each_arrival_as_a_multinomial_unit():
    """ListingSide(0.4) on 10 listings (4 treated); 200 arrivals booking 24 control and
    20 treated listings: (20/0.4 - 24/0.6)/200 = 0.05; per-arrival contributions
    1/0.4 (treated), -1/0.6 (control) or 0, so the variance is
    [24/0.36 + 20/0.16 - (50 - 40)^2/200] / 200^2."""
    listing = ledger_of(ms.ListingSide(0.4), [[24, 20]], [200])
    conversion = ms.ListingSideEstimator().estimate(listing, "conversion")
    assert conversion.value == pytest.approx(0.05)
    assert conversion.standard_error == pytest.approx(
        math.sqrt((24 / 0.36 + 20 / 0.16 - 10**2 / 200) / 200**2))


def test_unknown_metric_lists_the_options(ledger):
    with pytest.raises(ValueError, match="metric must be one of 'bookings', 'revenue', "
                                         "'conversion', got 'clicks'"):
        ms.CustomerSideEstimator().estimate(ledger, "clicks")


def test_naive_reduces_to_one_sided_estimators():
    """At a_L = 1 the naive estimator is the customer-side one, at a_C = 1 the
    listing-side one (DESIGN.md section 4), value and standard error."""
    rng = np.random.default_rng(5)
    customer = ledger_of(ms.CustomerSide(0.3), [[rng.integers(10, 99)], [rng.integers(10, 99)]],
                         [50, 50])
    for metric in ("bookings", "revenue", "conversion"):
        naive = ms.TwoSidedNaive().estimate(customer, metric)
        one = ms.CustomerSideEstimator().estimate(customer, metric)
        assert naive.value == pytest.approx(one.value)
        assert naive.standard_error == pytest.approx(one.standard_error)
    listing = ledger_of(ms.ListingSide(0.3), [rng.integers(10, 99, size=2)], [100])
    for metric in ("bookings", "revenue", "conversion"):
        naive = ms.TwoSidedNaive().estimate(listing, metric)
        one = ms.ListingSideEstimator().estimate(listing, metric)
        assert naive.value == pytest.approx(one.value)
        assert naive.standard_error == pytest.approx(one.standard_error)


@pytest.mark.parametrize(
    ("estimator", "design", "message"),
    [
        (ms.ListingSideEstimator(), ms.CustomerSide(0.5),
         r"listing-side needs a design that treats some but not all listings "
         r"\(0 < a_L < 1\), got a_L = 1 \(the design treats all of the listings\)"),
        (ms.CustomerSideEstimator(), ms.ListingSide(0.5),
         r"customer-side needs a design that treats some but not all customers"),
        (ms.TwoSidedCorrected(k=1), ms.CustomerSide(0.5),
         r"two-sided corrected \(k=1\) needs a design that treats some but not all listings"),
        (ms.TwoSidedNaive(), ms.GlobalControl(),
         r"two-sided naive needs a design with some treated pairs and some control pairs"),
        (ms.TwoSidedNaive(), ms.GlobalTreatment(), r"got a_C \* a_L = 1"),
    ],
)
def test_estimator_on_a_design_it_does_not_fit_raises_a_clear_error(estimator, design,
                                                                    message):
    split = design.split(market())
    with pytest.raises(ValueError, match=message):
        estimator.weights(split, market())


def test_fitting_estimators_by_design():
    the_market = market()

    def names(design):
        return [e.name for e in fitting_estimators(design.split(the_market), the_market)]

    assert names(ms.CustomerSide(0.5)) == ["customer-side", "two-sided naive"]
    assert names(ms.ListingSide(0.5)) == ["listing-side", "two-sided naive"]
    assert names(ms.TwoSided(0.5, 0.5)) == [e.name for e in all_estimators()]
    assert names(ms.GlobalControl()) == []


def test_corrected_estimator_rejects_bad_parameters():
    with pytest.raises(ValueError, match="k must be 1 or 2, got 3"):
        ms.TwoSidedCorrected(k=3)
    with pytest.raises(ValueError, match=r"beta must be a finite number in \[0, 1\], got 1.5"):
        ms.TwoSidedCorrected(k=1, beta=1.5)


def test_estimate_interval_is_normal_theory(ledger):
    estimate = ms.TwoSidedNaive().estimate(ledger)
    low, high = estimate.interval(0.95)
    assert (high - low) / 2 == pytest.approx(1.959963984540054 * estimate.standard_error)
    with pytest.raises(ValueError, match=r"level must be a finite number in \(0, 1\)"):
        estimate.interval(1.0)


def test_stratified_by_listing_type_so_rounding_cannot_fake_an_effect():
    """Treated listings are rounded per type (3 and 5 listings at 50%: 2/3 and 3/5
    treated). Mixing the types in one difference of means would report an effect of
    a null treatment; applied per type and summed (stratified, as the stratified
    randomization calls for), every estimator's large-market value under a null
    treatment is exactly 0."""
    market = ms.Market(listing_counts=[3, 5], mean_busy_time=[1.0, 3.0], arrival_rate=2.0,
                       customer_shares=[1.0], consideration=[[0.9, 0.4]],
                       utility=[[0.5, -0.5]], outside_utility=[0.0])
    null = ms.Treatment()
    for design in (ms.ListingSide(0.5), ms.TwoSided(0.5, 0.5)):
        split = design.split(market)
        assert [split.stratum(j).listing_fraction for j in (0, 1)] == [2 / 3, 3 / 5]
        ledger = ms.meanfield.steady_state(market, null, design).ledger()
        for estimator in fitting_estimators(split, market):
            value = estimator.estimate(ledger).value
            assert abs(value) < 1e-9 * ledger.booking_rate, (design, estimator, value)
    # the unstratified formula on the same ledger is visibly off
    ledger = ms.meanfield.steady_state(market, null, ms.ListingSide(0.5)).ledger()
    whole = ms.ListingSideEstimator().weights(ms.ListingSide(0.5).split(market), market)
    rates, _ = group_rates(ledger)
    assert abs(float(np.sum(whole * rates))) > 0.01 * ledger.booking_rate


def test_corrected_estimator_uses_the_naive_one_on_a_fully_treated_type():
    """A type whose listings are all treated (1 listing at 50% rounds up) has no
    control listings, so neither correction contrast exists there: the corrected
    estimator uses the naive coefficients on that type and its own elsewhere."""
    market = ms.Market(listing_counts=[1, 4], mean_busy_time=[1.0, 1.0], arrival_rate=1.0,
                       customer_shares=[1.0], consideration=0.5, utility=0.0,
                       outside_utility=0.0)
    split = ms.TwoSided(0.5, 0.5).split(market)
    corrected = ms.TwoSidedCorrected(k=2).stratum_weights(split, market)
    naive = ms.TwoSidedNaive().stratum_weights(split, market)
    np.testing.assert_array_equal(corrected[0], naive[0])
    np.testing.assert_array_equal(corrected[1],
                                  ms.TwoSidedCorrected(k=2).weights(split.stratum(1), market))
    assert not np.array_equal(corrected[1], naive[1])
