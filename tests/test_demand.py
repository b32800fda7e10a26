"""Demand profiles: normalisation, bad input, and arrivals simulated exactly in
both engines (counts per piece against the Poisson law they must follow)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

import marketsim as ms
from marketsim.engine import run_cells


def test_multipliers_average_one_over_the_period():
    """Time-weighted mean 1, so arrival_rate stays the mean rate and balance its meaning."""
    equal = ms.DemandProfile([2.0, 4.0, 6.0], period=24.0)
    np.testing.assert_allclose(equal.multipliers, [0.5, 1.0, 1.5])
    assert equal.mean_multiplier(0.0, 48.0) == pytest.approx(1.0)
    assert equal.mean_multiplier(16.0, 24.0) == pytest.approx(1.5)
    uneven = ms.DemandProfile([1.0, 3.0], period=10.0, starts=[0.0, 8.0])
    assert uneven.multipliers @ [8.0, 2.0] == pytest.approx(10.0)
    np.testing.assert_allclose(uneven.multiplier_at([0.0, 7.9, 8.0, 18.5]),
                               np.array([1, 1, 3, 3]) / 1.4)
    hourly = ms.DemandProfile(np.ones(24), piece_length=1.0)
    assert hourly.period == 24.0 and hourly.is_flat
    m = ms.scenarios.rehearsal_rooms()
    assert m.replace(demand=equal).balance == m.balance
    rebuilt = ms.DemandProfile.from_dict(uneven.to_dict())
    np.testing.assert_array_equal(rebuilt.starts, uneven.starts)
    np.testing.assert_array_equal(rebuilt.multipliers, uneven.multipliers)


@pytest.mark.parametrize(("arguments", "message"), [
    (([1.0, -0.5], 24.0), "multipliers must contain finite numbers >= 0, got -0.5 at index 1"),
    (([1.0, float("nan")], 24.0), "multipliers must contain finite numbers >= 0, got nan"),
    (([0.0, 0.0], 24.0), "multipliers must not all be 0"),
    (([5e-324, 0.0, 0.0], 24.0), "multipliers must have a mean over the period that they can "
                                 "be divided by (> 0 in floating point), got a mean of 0"),
    (([], 24.0), "multipliers must hold at least one value"),
    (([1.0, 2.0], 0.0), "period must be a finite number > 0, got 0.0"),
    (([1.0, 2.0],), "give period"),
])
def test_bad_profiles_are_refused(arguments, message):
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(")", r"\)")):
        ms.DemandProfile(*arguments)


def test_pieces_must_divide_the_period():
    with pytest.raises(ValueError, match=r"period must be the number of pieces times "
                                         r"piece_length \(24 x 1 = 24\), got 25"):
        ms.DemandProfile(np.ones(24), 25.0, piece_length=1.0)
    with pytest.raises(ValueError, match="starts must begin at 0, increase strictly and "
                                         "stay below period 10"):
        ms.DemandProfile([1.0, 2.0], 10.0, starts=[0.0, 12.0])
    with pytest.raises(ValueError, match=r"demand must be a marketsim\.DemandProfile"):
        ms.scenarios.rehearsal_rooms().replace(demand=[1.0, 2.0])


@pytest.mark.parametrize("busy_time", [None, ms.busy_time.LogNormal(cv=2.0)],
                         ids=["chain", "general"])
def test_arrivals_per_piece_follow_the_profile(busy_time):
    """Arrivals in a piece of length ``d`` with multiplier ``m`` are Poisson with
    mean ``arrival_rate * m * d`` (the definition of a piecewise-constant Poisson
    process); a piece with multiplier 0 gets no arrival at all. Bins of the window
    are aligned with the pieces; summed over days, the Pearson statistic
    ``sum((observed - expected)**2 / expected)`` of independent Poisson counts is
    compared with its chi-square law (scipy.stats.chi2)."""
    profile = ms.DemandProfile([1.0, 0.0, 3.0, 0.5], period=24.0, starts=[0, 5, 8, 20])
    market = ms.scenarios.rehearsal_rooms().replace(busy_time=busy_time, demand=profile)
    days = 60
    cells = ms.build_cells(market)
    ledger = run_cells(cells, horizon=24.0 * days, burn_in=48.0, seed=11, bins=24 * days)
    assert ledger.engine == ("chain" if busy_time is None else "general")
    hourly = ledger.bin_arrivals.sum(axis=1).reshape(days, 24).sum(axis=0)
    expected = market.arrival_rate * days * profile.multiplier_at(np.arange(24) + 0.5)
    assert np.all(hourly[5:8] == 0)
    keep = expected > 0

    def p_value(counts, means):
        return stats.chi2.sf(np.sum((counts - means) ** 2 / means), df=counts.size)

    assert p_value(hourly[keep], expected[keep]) > 1e-3
    # the test sees a wrong profile: the same counts against a flat day fail
    flat = np.full(keep.sum(), expected[keep].mean())
    assert p_value(hourly[keep], flat) < 1e-6
