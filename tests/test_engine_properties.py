"""Properties every run must have, on randomly generated valid markets.

Hypothesis draws markets (1-3 types on each side, small counts, any
consideration in [0, 1], utilities and outside utilities in [-5, 5], busy times
of every shape, flat demand or a profile over a period), designs
(global control and treatment, customer-side, listing-side, two-sided, and
two-sided following balance) and treatments whose consideration factor keeps
consideration <= 1. These are invariants of the chain's bookkeeping, not
statistical checks, so they must hold for every draw, in both engines (the
chain for exponential busy times, the general engine for the other shapes).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

import marketsim as ms
from marketsim.engine import run_cells

FRACTION = st.floats(0.01, 0.99)
SHAPES = st.one_of(
    st.just(ms.busy_time.Exponential()),
    st.just(ms.busy_time.Fixed()),
    st.builds(ms.busy_time.Gamma, st.floats(0.05, 10.0)),
    st.builds(ms.busy_time.LogNormal, st.floats(0.05, 10.0)),
    # stays the Empirical shape accepts: a positive mean (a subnormal stay beside zeros
    # sums above 0 but averages to 0)
    st.builds(ms.busy_time.Empirical, st.lists(st.floats(0.0, 10.0), min_size=2,
                                               max_size=5).filter(lambda x: np.mean(x) > 0)),
)
PROFILES = st.one_of(
    st.none(),
    st.builds(ms.DemandProfile,
              st.lists(st.floats(0.0, 5.0), min_size=1,
                       max_size=6).filter(lambda x: np.mean(x) > 0),  # as for the stays
              st.floats(0.1, 30.0)),
)


@st.composite
def markets(draw) -> ms.Market:
    n_listing = draw(st.integers(1, 3))
    n_customer = draw(st.integers(1, 3))
    counts = draw(st.lists(st.integers(1, 6), min_size=n_listing, max_size=n_listing))
    busy = draw(st.lists(st.floats(0.2, 5.0), min_size=n_listing, max_size=n_listing))
    raw = np.array(draw(st.lists(st.floats(0.0, 1.0), min_size=n_customer,
                                 max_size=n_customer)))
    if raw.sum() < 1e-6:
        raw[0] = 1.0
    shares = raw / raw.sum()
    consideration = draw(st.lists(
        st.lists(st.floats(0.0, 1.0), min_size=n_listing, max_size=n_listing),
        min_size=n_customer, max_size=n_customer))
    utility = draw(st.lists(
        st.lists(st.floats(-5.0, 5.0), min_size=n_listing, max_size=n_listing),
        min_size=n_customer, max_size=n_customer))
    outside = draw(st.lists(st.floats(-5.0, 5.0), min_size=n_customer, max_size=n_customer))
    balance = draw(st.floats(0.05, 5.0))
    capacity = float(np.sum(np.array(counts) / np.array(busy)))
    shapes = draw(st.one_of(st.none(), SHAPES,
                            st.lists(SHAPES, min_size=n_listing, max_size=n_listing)))
    return ms.Market(listing_counts=counts, mean_busy_time=busy,
                     arrival_rate=balance * capacity, customer_shares=shares,
                     consideration=consideration, utility=utility, outside_utility=outside,
                     busy_time=shapes, demand=draw(PROFILES))


@st.composite
def treatments(draw, market: ms.Market) -> ms.Treatment:
    shape = market.utility.shape
    if draw(st.booleans()):
        shift = draw(st.floats(-2.0, 2.0))
    else:
        shift = np.array(draw(st.lists(st.floats(-2.0, 2.0), min_size=shape[0] * shape[1],
                                       max_size=shape[0] * shape[1]))).reshape(shape)
    # a factor u / consideration with u in [0, 1] keeps the product <= 1
    room = np.where(market.consideration > 0, 1.0 / np.maximum(market.consideration, 1e-300),
                    3.0) * (1.0 - 1e-9)
    if draw(st.booleans()):
        factor = draw(st.floats(0.0, 1.0)) * float(room.min())
    else:
        u = np.array(draw(st.lists(st.floats(0.0, 1.0), min_size=room.size,
                                   max_size=room.size))).reshape(shape)
        factor = u * room
    outside_shift = draw(st.floats(-2.0, 2.0))
    return ms.Treatment(utility_shift=shift, consideration_factor=factor,
                        outside_utility_shift=outside_shift)


def two_sided(customers: float, listings: float) -> ms.Design:
    if customers == 1.0 and listings == 1.0:
        return ms.GlobalTreatment()
    return ms.TwoSided(customers, listings)


DESIGNS = st.one_of(
    st.just(ms.GlobalControl()),
    st.just(ms.GlobalTreatment()),
    st.builds(ms.CustomerSide, FRACTION),
    st.builds(ms.ListingSide, FRACTION),
    st.builds(two_sided, st.floats(0.01, 1.0), st.floats(0.01, 1.0)),
    st.builds(ms.TwoSided.for_balance, st.floats(0.05, 5.0)),
)


@st.composite
def runs(draw):
    market = draw(markets())
    return dict(
        market=market,
        treatment=draw(treatments(market)),
        design=draw(DESIGNS),
        horizon=draw(st.floats(1.0, 20.0)),
        burn_in=draw(st.one_of(st.just(0.0), st.floats(0.0, 5.0))),
        bins=draw(st.one_of(st.none(), st.integers(1, 6))),
        seed=draw(st.integers(0, 2**32)),
    )


@settings(max_examples=400, deadline=None)
@given(runs())
def test_bookkeeping_invariants(run):
    """Any valid market runs; counts are consistent whatever the market and design."""
    ledger = ms.simulate(run["market"], run["treatment"], run["design"],
                         horizon=run["horizon"], burn_in=run["burn_in"], bins=run["bins"],
                         seed=run["seed"])
    cells = ledger.cells
    count = cells.listing_count
    assert ledger.bookings.shape == (cells.n_customer_cells, cells.n_listing_cells)
    assert ledger.arrivals.shape == (cells.n_customer_cells,)

    # availability stays within [0, n] per listing cell
    assert np.all(ledger.mean_available >= 0.0)
    assert np.all(ledger.mean_available <= count * (1.0 + 1e-12))
    assert ledger.final_available.dtype == np.int64
    assert np.all((ledger.final_available >= 0) & (ledger.final_available <= count))

    # counts are non-negative; nobody books twice
    assert np.all(ledger.bookings >= 0) and np.all(ledger.arrivals >= 0)
    assert np.all(ledger.bookings.sum(axis=1) <= ledger.arrivals)
    # a listing cell a customer cell never considers is never booked by it
    assert np.all(ledger.bookings[cells.consideration == 0.0] == 0)
    assert ledger.events >= ledger.arrivals.sum()
    assert ledger.engine == ("chain" if run["market"].has_exponential_busy_times
                             else "general")

    if run["burn_in"] == 0.0:
        # from a full start every event is recorded: a cell's net loss of available
        # listings is its bookings minus its releases, and events = arrivals + releases
        releases = ledger.bookings.sum(axis=0) - (count - ledger.final_available)
        assert np.all(releases >= 0)
        assert ledger.events == ledger.arrivals.sum() + releases.sum()

    if run["bins"] is None:
        assert ledger.bin_bookings.shape[0] == 0 and ledger.bin_edges.size == 0
    else:
        bins = run["bins"]
        assert ledger.bin_bookings.shape == (bins, *ledger.bookings.shape)
        np.testing.assert_array_equal(ledger.bin_bookings.sum(axis=0), ledger.bookings)
        np.testing.assert_array_equal(ledger.bin_arrivals.sum(axis=0), ledger.arrivals)
        assert ledger.bin_edges.size == bins + 1
        assert ledger.bin_edges[0] == 0.0
        assert ledger.bin_edges[-1] == run["horizon"]


LEDGER_ARRAYS = ("bookings", "arrivals", "mean_available", "final_available", "bin_edges",
                 "bin_bookings", "bin_arrivals")


@settings(max_examples=100, deadline=None)
@given(runs())
def test_same_seed_same_ledger(run):
    """The same seed gives an identical ledger (every array, every count)."""
    first, second = (ms.simulate(run["market"], run["treatment"], run["design"],
                                 horizon=run["horizon"], burn_in=run["burn_in"],
                                 bins=run["bins"], seed=run["seed"]) for _ in range(2))
    for name in LEDGER_ARRAYS:
        np.testing.assert_array_equal(getattr(first, name), getattr(second, name),
                                      err_msg=name)
    assert first.events == second.events
    assert first.window == second.window


@settings(max_examples=100, deadline=None)
@given(markets(), st.integers(0, 2**32))
def test_null_treatment_matches_global_control(market, seed):
    """Global treatment with a treatment that changes nothing is global control:
    same cells up to labels, same random streams, hence the same ledger."""
    control = ms.simulate(market, design=ms.GlobalControl(), horizon=5.0, seed=seed)
    treated = ms.simulate(market, ms.Treatment(), ms.GlobalTreatment(), horizon=5.0,
                          seed=seed)
    for name in ("bookings", "arrivals", "mean_available", "final_available"):
        np.testing.assert_array_equal(getattr(control, name), getattr(treated, name),
                                      err_msg=name)


@settings(max_examples=60, deadline=None)
@given(runs(), st.integers(1, 50), st.sampled_from(["auto", "general"]))
def test_ledger_does_not_depend_on_slice_size(run, slice_events, engine):
    """A run cut into slices of any size gives the ledger of one uncut run (the
    kernels keep their whole state in arrays between slices)."""
    cells = ms.build_cells(run["market"], run["treatment"], run["design"])
    ledgers = [run_cells(cells, horizon=run["horizon"], burn_in=run["burn_in"],
                         bins=run["bins"], seed=run["seed"], engine=engine,
                         slice_events=size) for size in (slice_events, 10**9)]
    for name in LEDGER_ARRAYS:
        np.testing.assert_array_equal(getattr(ledgers[0], name), getattr(ledgers[1], name),
                                      err_msg=name)
    assert ledgers[0].events == ledgers[1].events


def test_slices_call_the_hook_and_resume():
    """``on_slice`` sees the run after every slice but the last, with time and
    events growing; the ledger equals the uncut one."""
    market = ms.scenarios.rehearsal_rooms().replace(busy_time=ms.busy_time.LogNormal(2.0))
    cells = ms.build_cells(market)
    seen = []
    sliced = run_cells(cells, horizon=20.0, seed=3, slice_events=100, on_slice=seen.append)
    whole = run_cells(cells, horizon=20.0, seed=3)
    np.testing.assert_array_equal(sliced.bookings, whole.bookings)
    assert len(seen) == sliced.events // 100
    assert all(p.engine == "general" and p.end == 20.0 for p in seen)
    assert np.all(np.diff([p.time for p in seen]) > 0)
    assert [p.events for p in seen] == [100 * (k + 1) for k in range(len(seen))]
    assert 0.0 < seen[0].fraction < seen[-1].fraction <= 1.0
