"""Market and Treatment: validation messages, derived quantities, immutability.

Every bad input must raise ``ValueError`` with a message that names the
parameter, says what it must be and shows what it got (DEVELOPERS.md,
"Conventions"). The tests match the whole relevant part of the message, so a
message that loses any of the three parts fails.
"""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np
import pandas as pd
import pytest

import marketsim as ms

BASE = dict(
    listing_counts=[3, 2],
    mean_busy_time=[1.0, 2.0],
    arrival_rate=2.0,
    customer_shares=[0.4, 0.6],
    consideration=[[0.5, 0.2], [0.3, 0.6]],
    utility=[[0.0, 0.5], [-0.5, 1.0]],
    outside_utility=[-1.0, -0.5],
)


def market(**changes) -> ms.Market:
    fields = dict(BASE)
    fields.update(changes)
    return ms.Market(**fields)


def raises(pattern: str):
    """``pytest.raises(ValueError)`` matching ``pattern`` literally (not as a regex)."""
    return pytest.raises(ValueError, match=re.escape(pattern))


# --------------------------------------------------------------- listing counts
@pytest.mark.parametrize(
    ("counts", "shown"),
    [([0, 2], "0"), ([-1, 2], "-1"), ([2.5, 2], "2.5"), (["a", 2], "'a'"),
     ([True, 2], "True"), (np.array([0, 2]), "0")],
)
def test_listing_counts_must_be_positive_whole_numbers(counts, shown):
    with raises(f"listing_counts must contain whole numbers >= 1, got {shown} at index 0"):
        market(listing_counts=counts)


def test_listing_counts_bad_entry_is_located():
    with raises("listing_counts must contain whole numbers >= 1, got 0 at index 1"):
        market(listing_counts=[3, 0])


@pytest.mark.parametrize("counts", [[], [[1, 2]]])
def test_listing_counts_must_be_a_non_empty_list(counts):
    with raises("listing_counts must be a non-empty list of whole numbers >= 1, got"):
        market(listing_counts=counts)


def test_listing_counts_accept_whole_floats():
    assert market(listing_counts=[3.0, 2.0]).listing_counts.tolist() == [3, 2]


# ---------------------------------------------------------------- rates, times
@pytest.mark.parametrize(
    ("value", "shown"),
    [(0.0, "0.0"), (-1.0, "-1.0"), (math.nan, "nan"), (math.inf, "inf")],
)
def test_mean_busy_time_must_be_finite_and_positive(value, shown):
    with raises(f"mean_busy_time must contain finite numbers > 0, got {shown} at index 1"):
        market(mean_busy_time=[1.0, value])


@pytest.mark.parametrize(
    ("value", "shown"),
    [(0, "0"), (-3.0, "-3.0"), (math.nan, "nan"), (math.inf, "inf"), ("a", "'a'"),
     (True, "True"), (np.float64(-2.0), "-2.0")],
)
def test_arrival_rate_must_be_finite_and_positive(value, shown):
    with raises(f"arrival_rate must be a finite number > 0, got {shown}"):
        market(arrival_rate=value)


# --------------------------------------------------------------------- utilities
@pytest.mark.parametrize(("value", "shown"), [(math.nan, "nan"), (math.inf, "inf"),
                                              (-math.inf, "-inf")])
def test_utility_must_be_finite(value, shown):
    with raises(f"utility must contain finite numbers, got {shown} at index (1, 0)"):
        market(utility=[[0.0, 0.0], [value, 0.0]])


@pytest.mark.parametrize(("value", "shown"), [(math.nan, "nan"), (math.inf, "inf")])
def test_outside_utility_must_be_finite(value, shown):
    with raises(f"outside_utility must contain finite numbers, got {shown} at index 1"):
        market(outside_utility=[0.0, value])


def test_price_must_be_finite_and_not_negative():
    with raises("price must contain finite numbers >= 0, got -1.0 at index 0"):
        market(price=[-1.0, 2.0])
    with raises("price must contain finite numbers >= 0, got nan at index 1"):
        market(price=[1.0, math.nan])


# ------------------------------------------------------------------ probabilities
@pytest.mark.parametrize(
    ("value", "shown"), [(1.5, "1.5"), (-0.1, "-0.1"), (math.nan, "nan")]
)
def test_consideration_must_be_a_probability(value, shown):
    with raises(f"consideration must contain finite numbers in [0, 1], got {shown} "
                "at index (0, 1)"):
        market(consideration=[[0.5, value], [0.5, 0.5]])


def test_consideration_scalar_out_of_range():
    with raises("consideration must contain finite numbers in [0, 1], got 1.2 at index (0, 0)"):
        market(consideration=1.2)


def test_consideration_bounds_are_accepted():
    m = market(consideration=[[0.0, 1.0], [1.0, 0.0]])
    assert m.consideration.tolist() == [[0.0, 1.0], [1.0, 0.0]]


@pytest.mark.parametrize(("shares", "shown"), [([1.2, -0.2], "1.2"), ([-0.1, 1.1], "-0.1")])
def test_customer_shares_must_be_probabilities(shares, shown):
    with raises(f"customer_shares must contain finite numbers in [0, 1], got {shown} "
                "at index 0"):
        market(customer_shares=shares)


def test_customer_shares_must_sum_to_one():
    with raises("customer_shares must sum to 1 (tolerance 1e-09), got sum 1.1"):
        market(customer_shares=[0.5, 0.6])


def test_customer_shares_off_by_1e6_rejected():
    with raises("customer_shares must sum to 1 (tolerance 1e-09), got sum 1.000001"):
        market(customer_shares=[0.4, 0.6 + 1e-6])


def test_customer_shares_off_by_1e12_accepted():
    m = market(customer_shares=[0.4, 0.6 + 1e-12])
    assert m.customer_shares.sum() == pytest.approx(1.0, abs=1e-11)


def test_customer_shares_must_not_be_empty():
    with raises("customer_shares must list at least one customer type, got []"):
        market(customer_shares=[], consideration=0.5, utility=0.0, outside_utility=0.0)


# ------------------------------------------------------------------------ shapes
PAIR = "(n_customer_types, n_listing_types) = (2, 2)"


@pytest.mark.parametrize(
    ("name", "value", "message"),
    [
        ("consideration", [[0.5, 0.5]], f"consideration must have shape {PAIR}, got shape (1, 2)"),
        ("consideration", [0.5, 0.5, 0.5],
         f"consideration must have shape {PAIR}, got shape (3,)"),
        ("utility", [[0.0, 0.0, 0.0]] * 2, f"utility must have shape {PAIR}, got shape (2, 3)"),
        ("utility", [0.0, 0.0], f"utility must have shape {PAIR}, got shape (2,)"),
        ("outside_utility", [0.0, 0.0, 0.0],
         "outside_utility must have shape (n_customer_types,) = (2,), got shape (3,)"),
        ("outside_utility", [[0.0, 0.0]],
         "outside_utility must have shape (n_customer_types,) = (2,), got shape (1, 2)"),
        ("price", [1.0, 2.0, 3.0],
         "price must have shape (n_listing_types,) = (2,), got shape (3,)"),
        ("price", 2.0, "price must have shape (n_listing_types,) = (2,), got shape ()"),
        ("mean_busy_time", [1.0, 2.0, 3.0],
         "mean_busy_time must have shape (n_listing_types,) = (2,), got shape (3,)"),
    ],
)
def test_wrong_shapes(name, value, message):
    with raises(message):
        market(**{name: value})


def test_non_numeric_matrix():
    with raises("utility must be an array of numbers of shape"):
        market(utility=[["a", "b"], ["c", "d"]])


def test_scalars_broadcast():
    m = market(consideration=0.25, utility=1.0, outside_utility=-2.0)
    assert m.consideration.shape == (2, 2) and np.all(m.consideration == 0.25)
    assert m.utility.shape == (2, 2) and np.all(m.utility == 1.0)
    assert m.outside_utility.tolist() == [-2.0, -2.0]


# ------------------------------------------------------------------------ names
def test_duplicate_listing_type_names():
    with raises("listing_types must not repeat a name, got 'room' twice"):
        market(listing_types=["room", "room"])


def test_duplicate_customer_type_names():
    with raises("customer_types must not repeat a name, got 'band' twice"):
        market(customer_types=["band", "band"])


def test_missing_type_names():
    with raises("listing_types must name all 2 types, got 1 names"):
        market(listing_types=["room"])
    with raises("customer_types must name all 2 types, got 3 names"):
        market(customer_types=["a", "b", "c"])


def test_type_names_must_be_non_empty_strings():
    with raises("listing_types must contain non-empty strings, got ''"):
        market(listing_types=["room", ""])
    with raises("customer_types must contain non-empty strings, got 3"):
        market(customer_types=["a", 3])
    with raises("listing_types must be a list of 2 names, got the string 'ab'"):
        market(listing_types="ab")


def test_default_names():
    m = market()
    assert m.listing_types == ("listing type 0", "listing type 1")
    assert m.customer_types == ("customer type 0", "customer type 1")


# -------------------------------------------------------------------- treatment
def test_treatment_consideration_factor_negative():
    with raises("consideration_factor must be a finite number >= 0, got -1"):
        ms.Treatment(consideration_factor=-1)
    with raises("consideration_factor must contain finite numbers >= 0, got -0.5 at index "
                "(0, 1)"):
        ms.Treatment(consideration_factor=[[1.0, -0.5], [1.0, 1.0]])


def test_treatment_shifts_must_be_finite():
    with raises("utility_shift must be a finite number, got nan"):
        ms.Treatment(utility_shift=math.nan)
    with raises("outside_utility_shift must be a finite number, got inf"):
        ms.Treatment(outside_utility_shift=math.inf)
    with raises("utility_shift must contain finite numbers, got nan at index (1, 0)"):
        ms.Treatment(utility_shift=[[0.0, 0.0], [math.nan, 0.0]])
    with raises("utility_shift must be a finite number, got 'a'"):
        ms.Treatment(utility_shift="a")


@pytest.mark.parametrize("apply", ["simulate", "build_cells"])
def test_treatment_factor_pushing_consideration_above_one(apply):
    # consideration[1, 1] = 0.6; a factor of 2 gives 1.2 > 1
    treatment = ms.Treatment(consideration_factor=2.0)
    message = ("consideration_factor times the market's consideration must be <= 1, "
               "got 1.2 for pair (1, 1)")
    with raises(message):
        if apply == "simulate":
            ms.simulate(market(), treatment, ms.GlobalTreatment(), horizon=1.0, seed=0)
        else:
            ms.build_cells(market(), treatment, ms.CustomerSide(0.5))


def test_treatment_factor_keeping_consideration_at_most_one_is_fine():
    cells = ms.build_cells(market(), ms.Treatment(consideration_factor=1.0 / 0.6),
                           ms.GlobalTreatment())
    assert cells.consideration.max() == pytest.approx(1.0)


@pytest.mark.parametrize(
    ("fields", "message"),
    [
        (dict(utility_shift=[1.0, 2.0, 3.0]), f"utility_shift must have shape {PAIR}, "
                                              "got shape (3,)"),
        (dict(consideration_factor=[[1.0, 1.0]]), f"consideration_factor must have shape {PAIR}, "
                                                  "got shape (1, 2)"),
        (dict(outside_utility_shift=[0.1, 0.2, 0.3]),
         "outside_utility_shift must have shape (n_customer_types,) = (2,), got shape (3,)"),
    ],
)
def test_treatment_wrong_shape_raises_when_applied(fields, message):
    treatment = ms.Treatment(**fields)  # the treatment alone does not know the market
    with raises(message):
        ms.simulate(market(), treatment, ms.TwoSided(0.5, 0.5), horizon=1.0, seed=0)
    with raises(message):
        ms.build_cells(market(), treatment, ms.GlobalTreatment())


def test_treatment_repr_and_null():
    assert repr(ms.Treatment()) == "Treatment()"
    assert repr(ms.Treatment(utility_shift=0.2)) == "Treatment(utility_shift=0.2)"
    assert ms.Treatment().is_null
    assert not ms.Treatment(consideration_factor=0.5).is_null


def test_treatment_is_immutable():
    t = ms.Treatment(utility_shift=[[0.1, 0.2], [0.3, 0.4]])
    with pytest.raises(dataclasses.FrozenInstanceError):
        t.utility_shift = 0.0
    with pytest.raises(ValueError, match="read-only"):
        t.utility_shift[0, 0] = 5.0


# ------------------------------------------------------------ derived quantities
def test_n_listings_and_type_counts():
    m = market()
    assert m.n_listings == 5
    assert m.n_listing_types == 2
    assert m.n_customer_types == 2


def test_balance_by_hand():
    # release capacity = 3 / 1.0 + 2 / 2.0 = 4 per unit time; balance = 2 / 4
    assert market().balance == pytest.approx(0.5, rel=1e-15)
    # 10 / 2.5 + 4 / 0.5 = 12; balance = 3 / 12
    m = market(listing_counts=[10, 4], mean_busy_time=[2.5, 0.5], arrival_rate=3.0)
    assert m.release_capacity == pytest.approx(12.0, rel=1e-15)
    assert m.balance == pytest.approx(0.25, rel=1e-15)


def assert_same_fields(a: ms.Market, b: ms.Market, skip: tuple[str, ...]) -> None:
    for f in dataclasses.fields(ms.Market):
        if f.name in skip:
            continue
        x, y = getattr(a, f.name), getattr(b, f.name)
        if isinstance(x, np.ndarray):
            np.testing.assert_array_equal(x, y, err_msg=f.name)
        else:
            assert x == y, f.name


def test_with_balance():
    m = market(price=[10.0, 20.0], listing_types=["s", "l"], customer_types=["a", "b"])
    for target in (0.1, 1.0, 7.5):
        changed = m.with_balance(target)
        assert changed.balance == pytest.approx(target, rel=1e-12)
        assert changed.arrival_rate == pytest.approx(target * 4.0, rel=1e-12)
        assert_same_fields(changed, m, skip=("arrival_rate",))
    with raises("balance must be a finite number > 0, got 0"):
        m.with_balance(0)


def test_scaled():
    m = market()
    big = m.scaled(10)
    assert big.listing_counts.tolist() == [30, 20]
    assert big.n_listings == 50
    assert big.balance == pytest.approx(m.balance, rel=1e-12)
    assert big.arrival_rate == pytest.approx(20.0, rel=1e-12)
    assert_same_fields(big, m, skip=("listing_counts", "arrival_rate"))
    # rounding keeps at least one listing of every type
    assert m.scaled(0.1).listing_counts.tolist() == [1, 1]
    with raises("factor must be a finite number > 0, got -2"):
        m.scaled(-2)


def test_repr_is_readable():
    m = market(listing_types=["small room", "studio"], customer_types=["solo", "band"])
    assert repr(m) == (
        "Market(N=5 listings [small room: 3, studio: 2], arrival_rate=2, balance=0.5, "
        "customers [solo: 0.4, band: 0.6])"
    )


def test_summary_frame():
    m = market()
    table = m.summary()
    assert isinstance(table, pd.DataFrame)
    assert table.shape == (4, 9)
    assert list(table.columns) == [
        "customer_type", "listing_type", "customer_share", "outside_utility",
        "listing_count", "mean_busy_time", "busy_time", "consideration", "utility",
    ]
    assert set(table.busy_time) == {"exponential"}
    row = table[(table.customer_type == "customer type 1")
                & (table.listing_type == "listing type 0")].iloc[0]
    assert row.consideration == 0.3 and row.utility == -0.5 and row.listing_count == 3
    priced = market(price=[5.0, 8.0]).summary()
    assert priced.shape == (4, 10) and priced.columns[-1] == "price"


def test_market_is_immutable():
    m = market()
    with pytest.raises(dataclasses.FrozenInstanceError):
        m.arrival_rate = 3.0
    for name in ("listing_counts", "mean_busy_time", "customer_shares", "consideration",
                 "utility", "outside_utility"):
        array = getattr(m, name)
        assert not array.flags.writeable, name
        with pytest.raises(ValueError, match="read-only"):
            array.flat[0] = 0


def test_market_copies_its_inputs():
    utility = np.array([[0.0, 0.5], [-0.5, 1.0]])
    m = market(utility=utility)
    utility[0, 0] = 99.0
    assert m.utility[0, 0] == 0.0


# -------------------------------------------------------------- simulate inputs
@pytest.mark.parametrize(
    ("start", "message"),
    [
        ("full", "start must be one of 'empty', 'steady', got 'full'"),
        ([1], "start must be 'empty', 'steady' or whole numbers of shape (n_listing_cells,) "
              "= (2,) (listing type 0 | control, listing type 1 | control), got shape (1,)"),
        (5, "start must be 'empty', 'steady' or whole numbers of shape (n_listing_cells,) "
            "= (2,)"),
        ([1.5, 1], "start must contain whole numbers, got [1.5, 1.0]"),
        ([math.nan, 1], "start must contain whole numbers, got [nan, 1.0]"),
        (["a", "b"], "start must contain whole numbers, got ['a', 'b']"),
        ([4, 1], "start must be between 0 and the cell size for every listing cell, got 4 "
                 "for cell 'listing type 0 | control' of size 3"),
        ([1, -1], "start must be between 0 and the cell size for every listing cell, got -1 "
                  "for cell 'listing type 1 | control' of size 2"),
    ],
)
def test_simulate_start_errors(start, message):
    with raises(message):
        ms.simulate(market(), horizon=1.0, seed=0, start=start)


def test_simulate_start_counts_are_used():
    # started with nothing available and no time to release, nobody can book
    ledger = ms.simulate(market(arrival_rate=50.0, mean_busy_time=[1e6, 1e6]), horizon=1.0,
                         seed=0, start=[0, 0])
    assert ledger.arrivals.sum() > 0
    assert ledger.bookings.sum() == 0
    assert ledger.final_available.tolist() == [0, 0]
    full = ms.simulate(market(), horizon=1.0, seed=0, start=[3.0, 2.0])
    assert full.final_available.dtype == np.int64


@pytest.mark.parametrize(
    ("fields", "message"),
    [
        (dict(horizon=0), "horizon must be a finite number > 0, got 0"),
        (dict(horizon=-1.0), "horizon must be a finite number > 0, got -1.0"),
        (dict(horizon=math.nan), "horizon must be a finite number > 0, got nan"),
        (dict(horizon=math.inf), "horizon must be a finite number > 0, got inf"),
        (dict(horizon="10"), "horizon must be a finite number > 0, got '10'"),
        (dict(burn_in=-1.0), "burn_in must be a finite number >= 0, got -1.0"),
        (dict(burn_in=math.nan), "burn_in must be a finite number >= 0, got nan"),
        (dict(bins=0), "bins must be a whole number >= 1, got 0"),
        (dict(bins=2.5), "bins must be a whole number >= 1, got 2.5"),
        (dict(bins=-3), "bins must be a whole number >= 1, got -3"),
    ],
)
def test_simulate_horizon_burn_in_bins_errors(fields, message):
    arguments = dict(horizon=1.0, seed=0)
    arguments.update(fields)
    with raises(message):
        ms.simulate(market(), **arguments)


def test_simulate_type_errors():
    with raises("design must be a marketsim.Design (e.g. ms.CustomerSide(0.5)), got str"):
        ms.simulate(market(), design="customer-side", horizon=1.0)
    with raises("design must be a marketsim.Design (e.g. ms.CustomerSide(0.5)), got ABCMeta"):
        ms.simulate(market(), design=ms.GlobalTreatment, horizon=1.0)  # class, not instance
    with raises("treatment must be a marketsim.Treatment or None, got float"):
        ms.simulate(market(), treatment=0.3, horizon=1.0)
    with raises("market must be a marketsim.Market, got dict"):
        ms.simulate(dict(BASE), horizon=1.0)


def test_simulate_requires_horizon():
    with pytest.raises(TypeError):
        ms.simulate(market())


@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda: ms.CustomerSide(0.0), "treated must be a finite number in (0, 1), got 0.0"),
        (lambda: ms.CustomerSide(1.0), "treated must be a finite number in (0, 1), got 1.0"),
        (lambda: ms.ListingSide(1.5), "treated must be a finite number in (0, 1), got 1.5"),
        (lambda: ms.TwoSided(0.0, 0.5), "customers must be a finite number in (0, 1], got 0.0"),
        (lambda: ms.TwoSided(0.5, math.nan), "listings must be a finite number in (0, 1], "
                                             "got nan"),
        (lambda: ms.TwoSided(1.0, 1.0), "customers and listings must not both be 1"),
    ],
)
def test_design_fraction_errors(make, message):
    with raises(message):
        make()


# ------------------------------------------ non-numbers, sizes and rounding (review)
@pytest.mark.parametrize(
    ("fields", "message"),
    [
        (dict(customer_shares=["0.4", "0.6"]),
         "customer_shares must be an array of numbers of shape (n_customer_types,), "
         "got ['0.4', '0.6']"),
        (dict(customer_shares=[True, False]),
         "customer_shares must be an array of numbers of shape (n_customer_types,), "
         "got [True, False]"),
        (dict(customer_shares=[[1.0], [0.5, 0.5]]),
         "customer_shares must be an array of numbers of shape (n_customer_types,), "
         "got [[1.0], [0.5, 0.5]]"),
        (dict(customer_shares=None),
         "customer_shares must be an array of numbers of shape (n_customer_types,), "
         "got None"),
        (dict(consideration=True),
         f"consideration must be an array of numbers of shape {PAIR}, got True"),
        (dict(utility=[[0.0, None], [0.0, 0.0]]),
         f"utility must be an array of numbers of shape {PAIR}, got [[0.0, None], [0.0, 0.0]]"),
        (dict(mean_busy_time=np.array(["1", "2"])),
         "mean_busy_time must be an array of numbers of shape (n_listing_types,) = (2,), "
         "got ['1', '2']"),
        (dict(outside_utility=np.array([1j, 0])),
         "outside_utility must be an array of numbers of shape (n_customer_types,) = (2,)"),
        (dict(listing_types=3), "listing_types must be a list of 2 names, got 3"),
    ],
)
def test_arrays_refuse_strings_bools_none_and_ragged_lists(fields, message):
    # numpy would quietly read "0.4" as 0.4, True as 1.0 and None as nan
    with raises(message):
        market(**fields)


@pytest.mark.parametrize(
    ("counts", "message"),
    [
        ([1e20, 2], "listing_counts must contain whole numbers <= 2**53 = 9007199254740992, "
                    "got 100000000000000000000 at index 0"),
        ([2**53, 2], "listing_counts must add up to at most 2**53 = 9007199254740992, got "
                     "9007199254740994"),
    ],
)
def test_listing_counts_too_large_for_exact_counting(counts, message):
    with raises(message):  # was an OverflowError
        market(listing_counts=counts)


def test_scaled_beyond_exact_counting_names_the_factor():
    with raises("factor must keep the market at most 9007199254740992 listings, got 1e+30"):
        market().scaled(1e30)  # was a garbage count from an invalid cast


def test_mean_busy_time_too_small_for_a_finite_release_rate():
    with raises("mean_busy_time must be large enough that listing_counts / mean_busy_time "
                "is finite, got 1e-310 at index 0"):
        market(mean_busy_time=[1e-310, 1.0])  # was an inf rate and raw scipy errors later


def test_zero_dimensional_arrays_count_as_numbers():
    assert market(arrival_rate=np.array(2.0)).arrival_rate == 2.0
    assert ms.Treatment(utility_shift=np.array(0.2)).utility_shift == 0.2
    design = ms.CustomerSide(np.array(0.5))
    assert design == ms.CustomerSide(0.5) and type(design.treated) is float
    hash(design)  # a stored 0-d array would make the design unhashable
    assert repr(ms.TwoSided(np.float64(0.5), np.float32(0.25))) == \
        "TwoSided(customers=0.5, listings=0.25)"


@pytest.mark.parametrize(
    ("treatment", "message"),
    [
        (ms.Treatment(utility_shift=1e308),
         "utility_shift plus the market's utility must be finite, got 1e+308 at index (0, 0)"),
        (ms.Treatment(outside_utility_shift=[0.0, -1e308]),
         "outside_utility_shift plus the market's outside_utility must be finite, got "
         "-1e+308 at index 1"),
    ],
    ids=["utility", "outside"],
)
def test_treatment_refuses_overflowing_utilities(treatment, message):
    big = market(utility=[[1e308, 0.0], [0.0, 0.0]], outside_utility=[0.0, -1e308])
    with raises(message):  # overflow gave NaN weights: nobody booked, NaN availability
        ms.simulate(big, treatment, ms.GlobalTreatment(), horizon=1.0, seed=0)


def test_treatment_string_rejected_at_construction():
    with raises("utility_shift must be a number or an array of numbers, got ['0.2']"):
        ms.Treatment(utility_shift=["0.2"])


@pytest.mark.parametrize(
    ("start", "message"),
    [
        (["1", "2"], "start must contain whole numbers, got ['1', '2']"),
        ([True, True], "start must contain whole numbers, got [True, True]"),
        ([1j, 1], "start must contain whole numbers, got [1j, (1+0j)]"),
    ],
)
def test_simulate_start_refuses_non_numbers(start, message):
    with raises(message):
        ms.simulate(market(), horizon=1.0, seed=0, start=start)


def test_simulate_window_lost_to_rounding_is_refused():
    # burn_in + horizon == burn_in in floating point: the run recorded nothing and
    # reported mean availability 0 for a market whose listings were all available
    with raises("horizon must be at least 1e-09 times burn_in and burn_in + horizon must be "
                "finite (else the window is lost to rounding), got horizon=1e-12 with "
                "burn_in=1000000.0"):
        ms.simulate(market(), horizon=1e-12, burn_in=1e6, seed=0)
    tiny = ms.simulate(market(), horizon=1e-300, seed=0)  # no burn-in: nothing is lost
    assert tiny.mean_available.tolist() == [3.0, 2.0]


def test_simulate_edge_markets_stay_finite():
    """One listing, no consideration, utilities +-50, 10 million listings: all finite."""
    one = market(listing_counts=[1], mean_busy_time=[1.0], customer_shares=[1.0],
                 consideration=0.5, utility=0.0, outside_utility=-1.0)
    huge = market(listing_counts=[6_000_000, 4_000_000]).with_balance(1.0)
    cases = [
        (one, ms.TwoSided(0.5, 0.5), 10.0),
        (market(consideration=0.0), ms.CustomerSide(0.5), 10.0),
        (market(utility=50.0, outside_utility=-50.0), ms.ListingSide(0.5), 10.0),
        (market(utility=-50.0, outside_utility=50.0), ms.ListingSide(0.5), 10.0),
        (market(utility=[[50.0, -50.0], [-50.0, 50.0]], outside_utility=[50.0, -50.0]),
         ms.TwoSidedFollowingBalance(), 10.0),
        (huge, ms.CustomerSide(0.5), 1e-3),
    ]
    for m, design, horizon in cases:
        ledger = ms.simulate(m, ms.Treatment(utility_shift=0.5), design, horizon=horizon,
                             seed=1, bins=2)
        assert np.all(np.isfinite(ledger.mean_available))
        assert np.all(ledger.bookings.sum(axis=1) <= ledger.arrivals)
        assert np.all((ledger.final_available >= 0)
                      & (ledger.final_available <= ledger.cells.listing_count))


def test_simulate_refuses_bins_that_would_not_fit_in_memory():
    with raises("bins must be at most"):
        ms.simulate(market(), horizon=1.0, seed=0, bins=10**13)
