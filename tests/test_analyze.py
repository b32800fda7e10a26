"""Analysis of a real experiment from its logs (ms.analyze)."""

import numpy as np
import pandas as pd
import pytest

import marketsim as ms
from marketsim.engine import Ledger
from marketsim.estimators.defaults import fitting_estimators


def ledger_of(log: ms.engine.logs.PlatformLog, bins: int) -> Ledger:
    """The ledger of the same run, counted from the log by cell, with ``bins`` equal
    time bins of the window (by session time)."""
    cells = log.cells
    split = cells.split
    listing_cell = np.repeat(np.arange(cells.n_listing_cells), cells.listing_count)
    customer_names = np.asarray(cells.market.customer_types)[split.customer_type]
    lookup = {(name, bool(t)): c for c, (name, t) in
              enumerate(zip(customer_names, split.customer_treated))}
    sessions = log.sessions
    customer_cell = np.array([lookup[name, bool(t)] for name, t in
                              zip(sessions.customer_type, sessions.treated)])
    booked = sessions.booked_listing.notna().to_numpy()
    bookings = np.zeros((cells.n_customer_cells, cells.n_listing_cells))
    np.add.at(bookings, (customer_cell[booked],
                         listing_cell[sessions.booked_listing[booked].astype(int)]), 1)
    arrivals = np.bincount(customer_cell, minlength=cells.n_customer_cells)
    window = log.window[1] - log.window[0]
    slot = np.minimum(((sessions.time.to_numpy() - log.window[0]) / window * bins)
                      .astype(int), bins - 1)
    bin_bookings = np.zeros((bins, *bookings.shape))
    np.add.at(bin_bookings, (slot[booked], customer_cell[booked],
                             listing_cell[sessions.booked_listing[booked].astype(int)]), 1)
    bin_arrivals = np.zeros((bins, cells.n_customer_cells))
    np.add.at(bin_arrivals, (slot, customer_cell), 1)
    return Ledger(cells=cells, bookings=bookings, arrivals=arrivals, window=window,
                  mean_available=np.full(cells.n_listing_cells, np.nan),
                  final_available=np.zeros(cells.n_listing_cells, dtype=np.int64), events=0,
                  bin_edges=np.linspace(0.0, window, bins + 1), bin_bookings=bin_bookings,
                  bin_arrivals=bin_arrivals, engine="chain")


@pytest.mark.parametrize("design", [ms.TwoSided(0.5, 0.5), ms.CustomerSide(0.3),
                                    ms.ListingSide(0.4)])
def test_analyze_reproduces_the_study_estimates_of_the_same_run(design):
    # The same estimators applied to the same run's ledger (the study's path,
    # Estimator.estimate) must give the same numbers as analyze on the logs.
    market = ms.scenarios.rehearsal_rooms()
    log = ms.simulate_log(market, ms.scenarios.instant_confirmation(), design,
                          horizon=200.0, burn_in=10.0, seed=5)
    analysis = ms.analyze(log.sessions, log.stays, log.listings,
                          customer_fraction=design.split(market).customer_fraction,
                          window=log.window)
    # default rule: 200 hours / (5 x mean busy time fitted from the log, about 2.25)
    batches = analysis.estimates.attrs["batches"]
    assert 15 <= batches <= 20
    ledger = ledger_of(log, batches)
    expected = {e.name: e.estimate(ledger) for e in
                fitting_estimators(ledger.cells.split, market)}
    got = analysis.estimates.set_index("estimator")
    assert set(got.index) == set(expected)
    for name, estimate in expected.items():
        if "corrected" in name or "debiased" in name:
            continue  # their weights use the balance, which analyze estimates from the logs
        assert got.loc[name, "estimate"] == pytest.approx(estimate.value, rel=1e-12,
                                                          abs=1e-12)
        assert got.loc[name, "standard_error"] == pytest.approx(estimate.standard_error,
                                                                rel=1e-12)
        assert got.loc[name, "batch_se"] == pytest.approx(estimate.batch_se, rel=1e-12)
        assert got.loc[name, "batch_high"] == pytest.approx(
            estimate.interval(kind="batch means")[1], rel=1e-12)


def test_analyze_with_a_calibration_adds_the_expected_bias():
    market = ms.scenarios.rehearsal_rooms()
    log = ms.simulate_log(market, ms.scenarios.instant_confirmation(), ms.TwoSided(0.5, 0.5),
                          horizon=300.0, burn_in=10.0, seed=6)
    control = ms.simulate_log(market, horizon=300.0, burn_in=10.0, seed=7)
    calibration = ms.calibrate(control.sessions, control.stays, control.listings,
                               control.impressions)
    analysis = ms.analyze(log.sessions, log.stays, log.listings, calibration, draws=5)
    table = analysis.estimates
    assert {"expected_relative_bias", "bias_low", "bias_high"} <= set(table.columns)
    assert (table.bias_low <= table.bias_high).all()
    assert analysis.customer_fraction == pytest.approx(0.5, abs=0.05)
    np.testing.assert_allclose(analysis.listing_fraction, 0.5)


def test_analyze_needs_treated_columns():
    log = ms.simulate_log(ms.scenarios.rehearsal_rooms(), horizon=20.0, seed=1)
    with pytest.raises(ValueError, match="sessions: column 'treated' is missing"):
        ms.analyze(log.sessions.drop(columns="treated"), log.stays, log.listings)
    with pytest.raises(ValueError, match="no built-in estimator fits"):
        ms.analyze(log.sessions, log.stays, log.listings)
    assert isinstance(log.sessions, pd.DataFrame)


def test_analyze_refuses_fewer_than_two_batches_and_warns_on_short_ones():
    market = ms.scenarios.rehearsal_rooms()
    log = ms.simulate_log(market, ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
                          horizon=40.0, burn_in=5.0, seed=2)
    with pytest.raises(ValueError, match=r"batches must be a whole number >= 2, got 1"):
        ms.analyze(log.sessions, log.stays, log.listings, batches=1)
    with pytest.warns(RuntimeWarning, match=r"batches=40 cuts the window .* shorter than "
                                            r"one mean busy time"):
        ms.analyze(log.sessions, log.stays, log.listings, batches=40)
