"""The two-sided first-order debiased estimator (DESIGN.md section 4; derivation in
docs/two_sided_debiased.md).

Outside references: the derivation itself (first-order Taylor expansion of the
large-market model of DESIGN.md section 5 in the utility shift, at each balance
limit), checked numerically against the large-market solver, whose own checks are
against ``scipy.integrate.solve_ivp`` and simulation (tests/test_meanfield.py); and
the exact finite-market simulation, checked within its Monte Carlo error.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from test_estimators import WINDOW, ledger_of
from test_estimators import market as hand_market
from test_meanfield import one_type_market, three_type_market

import marketsim as ms
from marketsim import meanfield as mf
from marketsim.randomness import spawn

SMALL_SHIFT = ms.Treatment(utility_shift=0.001)
FRACTIONS = [(0.5, 0.5), (0.3, 0.7), (0.7, 0.3)]
MARKETS = {"homogeneous": one_type_market, "heterogeneous": three_type_market}
DEBIASED = ms.TwoSidedDebiased()
K2 = ms.TwoSidedCorrected(k=2)


def relative_bias(market: ms.Market, treatment: ms.Treatment, design: ms.Design,
                  estimator: ms.Estimator) -> float:
    table = mf.expected_estimates(market, treatment, design, estimators=[estimator])
    return float(table["relative_bias"].iloc[0])


# --------------------------------------------------------------------------- formula
def test_formula_by_hand():
    """The hand-made ledger of tests/test_estimators.py (a_C = 0.5, a_L = 0.4, Q00 =
    3.6, Q01 = 2.0, Q10 = 2.5, Q11 = 4.0): naive 9.875; first contrast -2.2 with
    weight 0.25 / (0.4 * 0.8) = 0.78125; second -1 with weight 0.75 / (0.5 * 0.8) =
    1.875; estimate 9.875 - 1.71875 - 1.875 = 6.28125."""
    ledger = ledger_of(ms.TwoSided(0.5, 0.4), [[36, 20], [25, 40]], [100, 100])
    estimate = ms.TwoSidedDebiased(beta=0.25).estimate(ledger)
    assert estimate.value == pytest.approx(6.28125)
    c11, c01 = 5.0, -1.25 + 1.875 / 0.4
    c10, c00 = -1.25 + 0.78125 / 0.5, -1.25 - 0.78125 / 0.5 - 1.875 / 0.6
    variance = (c00**2 * 36 + c01**2 * 20 + c10**2 * 25 + c11**2 * 40) / WINDOW**2
    assert estimate.standard_error == pytest.approx(math.sqrt(variance))


def test_name_beta_and_bad_input():
    the_market = hand_market()
    split = ms.TwoSided(0.5, 0.4).split(the_market)
    beta = math.exp(-the_market.balance)
    np.testing.assert_allclose(DEBIASED.weights(split, the_market),
                               ms.TwoSidedDebiased(beta=beta).weights(split, the_market))
    assert DEBIASED.name == "two-sided debiased (first order)"
    assert ms.TwoSidedDebiased(beta=0.3).name == "two-sided debiased (first order, beta=0.3)"
    with pytest.raises(ValueError, match=r"beta must be a finite number in \[0, 1\], got 1.5"):
        ms.TwoSidedDebiased(beta=1.5)
    with pytest.raises(ValueError, match=r"two-sided debiased \(first order\) needs a design "
                                         r"that treats some but not all listings .* got a_L = 1"):
        DEBIASED.weights(ms.CustomerSide(0.5).split(the_market), the_market)


def test_in_the_two_sided_family_everywhere():
    """Defaults of both two-sided designs, hence studies, sweeps, design choice, report."""
    market = ms.scenarios.rehearsal_rooms()
    for design in (ms.TwoSided(0.5, 0.5), ms.TwoSidedFollowingBalance()):
        names = [e.name for e in ms.estimators.default_estimators(design, market)]
        assert names[-1] == DEBIASED.name, names


# --------------------------------------------------------------------------- first order
@pytest.mark.parametrize("fractions", FRACTIONS)
@pytest.mark.parametrize("name", MARKETS)
def test_first_order_exact_when_demand_is_scarce(name, fractions):
    """Balance 0.001, utility shift 0.001: every listing is available and the weight
    1 / (a_L (1 - a_C a_L)) of the first contrast cancels the naive bias to first
    order (docs/two_sided_debiased.md), so what is left is second order: relative
    bias below 1% (measured: 0.05% to 0.14%), while the naive estimator's is 19% to
    275% on these markets."""
    market = MARKETS[name]().with_balance(0.001)
    design = ms.TwoSided(*fractions)
    assert abs(relative_bias(market, SMALL_SHIFT, design, DEBIASED)) < 0.01
    assert abs(relative_bias(market, SMALL_SHIFT, design, ms.TwoSidedNaive())) > 0.1


@pytest.mark.parametrize("fractions", FRACTIONS)
@pytest.mark.parametrize("name", MARKETS)
def test_first_order_exact_when_supply_is_scarce_and_the_outside_option_dominates(
        name, fractions):
    """Balance 1,000, utility shift 0.001: the derivation for scarce supply assumes that
    the outside option dominates each choice (consideration -> 0). The relative bias
    falls toward 0 with consideration, roughly in proportion (1 -> 0.1 -> 0.01), and is
    below 2% at consideration 0.01 (measured: 0.08% to 1.5%)."""
    base = MARKETS[name]()
    shape = np.asarray(base.consideration, dtype=float)
    shape = shape / shape.max()
    biases = []
    for level in (1.0, 0.1, 0.01):
        market = base.replace(consideration=shape * level).with_balance(1000.0)
        biases.append(abs(relative_bias(market, SMALL_SHIFT, ms.TwoSided(*fractions),
                                        DEBIASED)))
    assert biases[0] > biases[1] > biases[2], biases
    assert biases[1] < 0.2 * biases[0] and biases[2] < 0.2 * biases[1], biases
    assert biases[2] < 0.02, biases


# --------------------------------------------------------------------------- between the limits
BALANCES = np.geomspace(0.01, 20.0, 25)


def following_balance_table(market: ms.Market):
    """Grown 50 times, so that rounding to whole listings leaves control listings of
    every type at balance 0.01 (a_L = 0.995)."""
    table = mf.sweep_balance(market.scaled(50), ms.scenarios.instant_confirmation(),
                             ms.TwoSided.for_balance, BALANCES, estimators=[DEBIASED, K2])
    return table.pivot_table(index="balance", columns="estimator", values="relative_bias")


def check_between_the_limits(market: ms.Market) -> None:
    table = following_balance_table(market)
    assert len(table) == len(BALANCES)
    debiased, k2 = table[DEBIASED.name], table[K2.name]
    assert debiased.abs().max() < 0.12, debiased.round(3).to_dict()
    apart = (debiased - k2).abs() > 0.01
    assert (debiased.abs() < k2.abs())[apart].all(), table[apart].round(3)


def test_between_the_limits_on_the_rehearsal_rooms():
    """Fractions that follow balance, utility shift 0.3 (the demo's treatment), balance
    0.01 to 20: the large-market relative bias stays below 12% (measured: at most
    7.4%, at balance 0.6; k = 2: up to 27%) and below k = 2's wherever they differ by
    more than 1 point."""
    check_between_the_limits(ms.scenarios.rehearsal_rooms())


def test_between_the_limits_on_the_homogeneous_market():
    """Same on the one-type market of tests/test_meanfield.py (measured: at most
    10.6%, at balance 1.2; k = 2: up to 19%)."""
    check_between_the_limits(one_type_market())


@pytest.mark.xfail(strict=True, reason=(
    "The check of issue 12 fails on this market: between the limits the debiased "
    "estimator over-corrects, relative bias -30% at balance 0.84 and 1.16 (k = 2: +15% "
    "and +9%), beyond -12% from balance 0.45 to 1.6. Its first-order weights are right at "
    "both limits (tests above); the interpolation beta = exp(-balance) fails here."))
def test_between_the_limits_on_the_heterogeneous_market():
    """The three-type market of tests/test_meanfield.py (different mean busy times
    1, 2 and 0.5, heterogeneous preferences). Kept strict: it will say when it passes.
    Cause and a candidate fix (not shipped): docs/two_sided_debiased.md, "Between the
    limits: what the check found"."""
    check_between_the_limits(three_type_market())


def test_what_happens_between_the_limits_on_the_heterogeneous_market():
    """What was measured on the three-type market (recorded, so that a change shows):
    exact at both ends, over-correction between them, never beyond -35%."""
    debiased = following_balance_table(three_type_market())[DEBIASED.name]
    assert abs(debiased.iloc[0]) < 0.02 and abs(debiased.iloc[-1]) < 0.02
    assert -0.35 < debiased.min() < -0.2


# --------------------------------------------------------------------------- simulation
def test_simulation_agrees_with_the_large_market_value():
    """5,000 listings (the rehearsal rooms grown 125 times), fractions that follow the
    balance, 24 replications of 40 hours from the steady state: the mean simulated
    estimate is within 4 Monte Carlo standard errors of the large-market expected value
    (Kurtz 1970: the finite chain converges to the large-market model), and far from
    the naive estimator's value (so the check can fail)."""
    market = ms.scenarios.rehearsal_rooms().scaled(125)
    assert market.n_listings == 5000
    treatment = ms.scenarios.instant_confirmation()
    design = ms.TwoSided.for_balance(market.balance)
    expected = mf.expected_estimates(market, treatment, design,
                                     estimators=[DEBIASED, ms.TwoSidedNaive()])
    limit, naive_limit = expected["expected_estimate"]
    values = np.array([
        DEBIASED.estimate(ms.simulate(market, treatment, design, horizon=40.0, burn_in=1.0,
                                      start="steady", seed=seed)).value
        for seed in spawn(5, 24)
    ])
    se = values.std(ddof=1) / math.sqrt(values.size)
    assert abs(values.mean() - limit) < 4 * se, (values.mean(), limit, se)
    assert abs(values.mean() - naive_limit) > 8 * se
