"""Designs: the cell expansions, their rounding, the balance heuristic, a custom design."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import pytest

import marketsim as ms
from marketsim.estimators import design_estimators


def three_type_market() -> ms.Market:
    return ms.Market(
        listing_types=["booth", "room", "studio"],
        listing_counts=[3, 1, 5],
        mean_busy_time=[1.0, 2.0, 3.0],
        arrival_rate=2.0,
        customer_types=["solo", "band"],
        customer_shares=[0.6, 0.4],
        consideration=0.5,
        utility=0.0,
        outside_utility=-1.0,
    )


# ------------------------------------------------------------------ a custom design
@dataclass(frozen=True)
class OnlyStudios(ms.Design):
    """Only studios are eligible for treatment; every customer is exposed."""

    treated: float = 0.5

    def split(self, market):
        listings = [self.treated if name == "studio" else 0.0
                    for name in market.listing_types]
        return ms.CellSplit.from_fractions(market, customers=1.0, listings=listings)


def test_custom_design_in_a_few_lines_without_touching_the_library():
    market = three_type_market()
    split = OnlyStudios(0.6).split(market)
    # booth (3, control), room (1, control), studio: 2 control + 3 treated
    assert split.listing_type.tolist() == [0, 1, 2, 2]
    assert split.listing_treated.tolist() == [False, False, False, True]
    assert split.listing_count.tolist() == [3, 1, 2, 3]
    assert split.listing_fraction == pytest.approx(3 / 9)
    assert split.customer_fraction == 1.0

    treatment = ms.Treatment(utility_shift=0.5)
    cells = ms.build_cells(market, treatment, OnlyStudios(0.6))
    # treated studios (cell 3) are more attractive than control studios (cell 2)
    assert np.all(cells.weight[:, 3] > cells.weight[:, 2])
    np.testing.assert_allclose(cells.weight[:, 3] / cells.weight[:, 2], np.exp(0.5))
    ledger = ms.simulate(market, treatment, OnlyStudios(0.6), horizon=20.0, seed=4)
    assert ledger.bookings.shape == (2, 4)
    # the listing-side estimator fits it, the customer-side one does not
    assert np.isfinite(ms.ListingSideEstimator().estimate(ledger).value)
    with pytest.raises(ValueError, match="customer-side needs a design that treats some"):
        ms.CustomerSideEstimator().estimate(ledger)
    # and a study accepts it like any built-in design
    study = ms.Study(market, treatment, [OnlyStudios(0.6)], horizon=10.0)
    assert [e.name for e in study.estimators[0]] == ["listing-side"]
    assert study.run(2, seed=1, progress=False).completed == 2


# ------------------------------------------------------------------ built-in designs
def test_global_worlds_treat_nobody_or_everybody():
    market = three_type_market()
    control, treated = ms.GlobalControl().split(market), ms.GlobalTreatment().split(market)
    assert not control.customer_treated.any() and not control.listing_treated.any()
    assert treated.customer_treated.all() and treated.listing_treated.all()
    assert control.listing_count.tolist() == treated.listing_count.tolist() == [3, 1, 5]
    assert ms.GlobalControl().label == "global control"
    assert ms.GlobalTreatment().label == "global treatment"


def test_customer_side_splits_every_customer_type_by_probability():
    split = ms.CustomerSide(0.3).split(three_type_market())
    assert split.customer_type.tolist() == [0, 0, 1, 1]
    assert split.customer_treated.tolist() == [False, True, False, True]
    np.testing.assert_allclose(split.customer_share, [0.6 * 0.7, 0.6 * 0.3, 0.4 * 0.7, 0.4 * 0.3])
    assert split.customer_fraction == pytest.approx(0.3)
    assert split.listing_treated.all()
    assert ms.CustomerSide(0.3).label == "customer-side (a_C=0.3)"


def test_listing_side_is_stratified_with_the_stated_rounding():
    """``floor(a * n_j + 0.5)`` treated per type: 3 -> 2 (1.5 up), 1 -> 1 (0.5 up),
    5 -> 3 (2.5 up); realised share 6/9, not 0.5."""
    split = ms.ListingSide(0.5).split(three_type_market())
    treated = split.listing_count[split.listing_treated]
    assert treated.tolist() == [2, 1, 3]
    assert split.listing_fraction == pytest.approx(6 / 9)
    assert split.customer_treated.all()
    # 0.3: 0.9 -> 1, 0.3 -> 0 (the room type has no treated cell), 1.5 -> 2
    split = ms.ListingSide(0.3).split(three_type_market())
    assert split.listing_type[split.listing_treated].tolist() == [0, 2]
    assert split.listing_count[split.listing_treated].tolist() == [1, 2]
    assert ms.ListingSide(0.3).label == "listing-side (a_L=0.3)"


def test_two_sided_rounds_listings_like_listing_side_and_reduces_to_one_side():
    market = three_type_market()
    two = ms.TwoSided(0.4, 0.5).split(market)
    one = ms.ListingSide(0.5).split(market)
    assert two.listing_count.tolist() == one.listing_count.tolist()
    assert two.customer_fraction == pytest.approx(0.4)
    # listings=1 is customer-side, customers=1 listing-side
    assert ms.TwoSided(0.4, 1.0).split(market).listing_treated.all()
    assert ms.TwoSided(1.0, 0.5).split(market).customer_treated.all()
    assert ms.TwoSided(0.4, 0.5).label == "two-sided (a_C=0.4, a_L=0.5)"


def test_for_balance_matches_hand_arithmetic():
    """beta = exp(-ln 2) = 1/2: a_C = (1 - 1/2) + 1/2 * 0.2 = 0.6 and
    a_L = 0.4 * (1 - 1/2) + 1/2 = 0.7 (worked by hand)."""
    design = ms.TwoSided.for_balance(math.log(2.0), customers=0.2, listings=0.4)
    assert design.customers == pytest.approx(0.6, abs=1e-12)
    assert design.listings == pytest.approx(0.7, abs=1e-12)
    # default base fractions 0.5 at balance 1: beta = e^-1 = 0.367879...
    beta = math.exp(-1.0)
    default = ms.TwoSided.for_balance(1.0)
    assert default.customers == pytest.approx(1 - beta / 2)
    assert default.listings == pytest.approx(0.5 + beta / 2)


def test_for_balance_tends_to_one_sided_designs_at_the_extremes():
    scarce_demand = ms.TwoSided.for_balance(1e-9)
    assert scarce_demand.customers == pytest.approx(0.5)
    assert scarce_demand.listings == pytest.approx(1.0)
    scarce_supply = ms.TwoSided.for_balance(50.0)
    assert scarce_supply.customers == 1.0  # beta < 1e-16: exactly listing-side
    assert scarce_supply.listings == pytest.approx(0.5)
    # with few listings the rounding treats them all: customer-side in effect
    split = ms.TwoSided.for_balance(0.02).split(three_type_market())
    assert split.listing_treated.all()


@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda: ms.CustomerSide(0.0), r"treated must be a finite number in \(0, 1\), got 0.0"),
        (lambda: ms.CustomerSide(1.5), r"treated must be a finite number in \(0, 1\), got 1.5"),
        (lambda: ms.ListingSide("half"), r"treated must be a finite number .* got 'half'"),
        (lambda: ms.ListingSide(1.0), r"treated must be a finite number in \(0, 1\), got 1.0"),
        (lambda: ms.TwoSided(0.0, 0.5), r"customers must be a finite number in \(0, 1\], got 0.0"),
        (lambda: ms.TwoSided(0.5, 2.0), r"listings must be a finite number in \(0, 1\], got 2.0"),
        (lambda: ms.TwoSided(1.0, 1.0), r"must not both be 1 \(that is global treatment\)"),
        (lambda: ms.TwoSided.for_balance(0.0), r"balance must be a finite number > 0, got 0.0"),
        (lambda: ms.TwoSided.for_balance(1.0, customers=1.0),
         r"customers must be a finite number in \(0, 1\), got 1.0"),
        (lambda: ms.TwoSided.for_balance(float("nan")), r"balance must be a finite number > 0"),
    ],
)
def test_designs_reject_bad_fractions_with_clear_messages(make, message):
    with pytest.raises(ValueError, match=message):
        make()


def test_designs_are_values_that_pickle():
    import pickle

    for design in (ms.CustomerSide(0.3), ms.ListingSide(0.4), ms.TwoSided(0.2, 0.7),
                   ms.GlobalControl(), OnlyStudios(0.5)):
        again = pickle.loads(pickle.dumps(design))
        assert again == design and hash(again) == hash(design)


def test_two_sided_following_balance_is_for_balance_at_each_market():
    """One object, recomputed for every market: the split equals that of
    TwoSided.for_balance at the market's own balance."""
    design = ms.TwoSidedFollowingBalance()
    for balance in (0.05, 1.0, 20.0):
        market = ms.scenarios.rehearsal_rooms(balance=balance)
        ours = design.split(market)
        fixed = ms.TwoSided.for_balance(balance).split(market)
        assert ours.customer_share.tolist() == fixed.customer_share.tolist()
        assert ours.listing_count.tolist() == fixed.listing_count.tolist()
    assert design.label == "two-sided (follows balance)"
    assert [e.name for e in design_estimators(design)] == [
        "two-sided naive", "two-sided corrected (k=1)", "two-sided corrected (k=2)",
        "two-sided debiased (first order)"]
    with pytest.raises(ValueError, match=r"listings must be a finite number in \(0, 1\)"):
        ms.TwoSidedFollowingBalance(listings=1.0)


# ------------------------------------------------------- custom splits are checked
def _split(**changes) -> dict:
    """A valid split of ``three_type_market`` (booth 3, room 1, studio 5), changed."""
    fields = dict(customer_type=[0, 1], customer_treated=[True, True],
                  customer_share=[0.6, 0.4], listing_type=[0, 0, 1, 2],
                  listing_treated=[False, True, False, False], listing_count=[2, 1, 1, 5])
    fields.update(changes)
    return fields


@dataclass(frozen=True)
class FixedSplit(ms.Design):
    """A custom design that returns whatever it is given (for the checks below)."""

    returned: object = None

    def split(self, market):
        return self.returned

    def __repr__(self):
        return "FixedSplit()"


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        (dict(listing_count=[2, 1, 0, 5]), "listing_count must be a 1-d array of whole numbers "
                                           ">= 1, got [2, 1, 0, 5]"),
        (dict(listing_count=[2, 1.5, 1, 5]), "listing_count must be a 1-d array of whole "
                                             "numbers >= 1, got [2, 1.5, 1, 5]"),
        (dict(customer_type=[0, -1]), "customer_type must be a 1-d array of whole numbers "
                                      ">= 0, got [0, -1]"),
        (dict(customer_treated=[1, 0]), "customer_treated must be a 1-d array of True/False, "
                                        "got [1, 0]"),
        (dict(customer_share=[0.3, 0.2]), "customer_share must sum to 1, got sum 0.5"),
        (dict(customer_share=[1.2, -0.2]), "customer_share must contain finite numbers in "
                                           "(0, 1], got 1.2 at index 0"),
        (dict(customer_treated=[True]), "customer_type, customer_treated, customer_share must "
                                        "have the same length >= 1 (one entry per customer "
                                        "cell), got lengths [2, 1, 2]"),
        (dict(listing_type=[], listing_treated=[], listing_count=[]),
         "listing_type, listing_treated, listing_count must have the same length >= 1"),
    ],
)
def test_cell_split_checks_itself(changes, message):
    with pytest.raises(ValueError, match=re.escape(message)):
        ms.CellSplit(**_split(**changes))


@pytest.mark.parametrize(
    ("returned", "message"),
    [
        (None, "design FixedSplit(): split(market) must return a marketsim.CellSplit, got "
               "NoneType"),
        (ms.CellSplit(**_split(listing_count=[2, 1, 2, 5])),
         "design FixedSplit(): listing_count of the cells of listing type 'room' must add up "
         "to its 1 listings, got 2"),
        (ms.CellSplit(**_split(listing_type=[0, 0, 2, 2], listing_count=[2, 1, 1, 4])),
         "design FixedSplit(): listing_count of the cells of listing type 'room' must add up "
         "to its 1 listings, got 0"),
        (ms.CellSplit(**_split(customer_type=[0, 0])),
         "design FixedSplit(): customer_share of the cells of customer type 'solo' must add "
         "up to its share 0.6, got 1.0"),
        (ms.CellSplit(**_split(customer_type=[0, 2])),
         "design FixedSplit(): customer_type must be below the market's 2 types, got 2"),
    ],
    ids=["none", "extra-listings", "missing-type", "customer-share", "type-out-of-range"],
)
def test_custom_split_must_divide_the_market(returned, message):
    # before: IndexError, AttributeError, or a silently different market (negative
    # availability, customers of one type counted as another)
    design = FixedSplit(returned)
    with pytest.raises(ValueError, match=re.escape(message)):
        ms.simulate(three_type_market(), design=design, horizon=1.0)
    with pytest.raises(ValueError, match=re.escape(message)):
        ms.meanfield.steady_state(three_type_market(), design=design)


def test_custom_split_given_as_lists_is_stored_as_arrays():
    split = ms.CellSplit(**_split())
    assert split.listing_count.dtype == np.int64 and split.customer_treated.dtype == bool
    assert not split.listing_count.flags.writeable
    ledger = ms.simulate(three_type_market(), ms.Treatment(utility_shift=0.2),
                         FixedSplit(split), horizon=5.0, seed=0)
    assert ledger.bookings.shape == (2, 4)


def test_from_fractions_checks_its_market():
    message = "market must be a marketsim.Market, got NoneType"
    with pytest.raises(ValueError, match=re.escape(message)):
        ms.CellSplit.from_fractions(None, customers=0.5, listings=0.5)
