"""The occupancy-weighted study of docs/debiased_occupancy_weights.py (not a shipped
estimator; docs/two_sided_debiased.md, "Between the limits: what the check found").

Outside references: the shipped estimator's limit weights (docs/two_sided_debiased.md,
each derived at one balance limit), which the closed-form weights must reduce to at
occupancy 0; and the large-market solver (checked against ``scipy.integrate.solve_ivp``
in tests/test_meanfield.py), on which the closed form must be exact to first order.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from test_meanfield import one_type_market

import marketsim as ms
from marketsim.engine import build_cells
from marketsim.meanfield.steady import global_effect, solve_cells

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "docs"))
import debiased_occupancy_weights as study

FRACTIONS = [(0.5, 0.5), (0.3, 0.7), (0.7, 0.3)]


@pytest.mark.parametrize("a_c, a_l", FRACTIONS)
@pytest.mark.parametrize("p", [0.0, 0.3, 0.9])
def test_occupancy_zero_gives_the_shipped_limit_weights(a_c, a_l, p):
    """At o = 0 the weights are the two limit weights of ms.TwoSidedDebiased: its
    coefficients with beta = 1 are naive + w1 C_1, with beta = 0 naive + w2 C_2."""
    market = ms.scenarios.rehearsal_rooms().scaled(50)
    split = ms.TwoSided(a_c, a_l).split(market)
    shipped_first = ms.TwoSidedDebiased(beta=1.0).weights(split, market)
    shipped_second = ms.TwoSidedDebiased(beta=0.0).weights(split, market)
    a_c, a_l = split.customer_fraction, split.listing_fraction
    w1, w2 = study.occupancy_weights(a_c, a_l, 0.0, p)
    np.testing.assert_allclose(study.contrast_coefficients(a_c, a_l, w1, 0.0), shipped_first)
    np.testing.assert_allclose(study.contrast_coefficients(a_c, a_l, 0.0, w2), shipped_second)
    # P -> 0 (the outside option dominates): the second weight is the shipped one at
    # any occupancy (the first multiplies C_1, which is 0 there to first order).
    assert study.occupancy_weights(a_c, a_l, 0.6, 0.0)[1] == pytest.approx(w2)


@pytest.mark.parametrize("balance", [0.3, 1.0, 3.0])
def test_first_order_exact_on_one_listing_type_between_the_limits(balance):
    """Utility shift 0.001, fractions (0.3, 0.7): the variant's relative bias is second
    order (below 0.1%) at middle balance, where the shipped estimator's is 7% to 13%."""
    market = one_type_market().scaled(50).with_balance(balance)
    treatment = ms.Treatment(utility_shift=0.001)
    ledger = solve_cells(build_cells(market, treatment, ms.TwoSided(0.3, 0.7))).ledger()
    truth = global_effect(market, treatment, "bookings")
    assert abs(study.occupancy_weighted(ledger).value / truth - 1.0) < 1e-3
    assert abs(ms.TwoSidedDebiased().estimate(ledger).value / truth - 1.0) > 0.01


def test_balance_table_on_the_rehearsal_rooms():
    """The script's core on one market at three balances. At balance 0.01 (occupancy
    near 0) the variant's expected value agrees with the shipped estimator's within 1
    point of the effect (measured 0.3 point), though its standard error is larger
    (measured 20x: it keeps the second contrast, 0 in expectation there, at full
    weight, and a_L = 0.995 makes that contrast noisy); near balance 1 it is less
    biased (measured 4.4% against 7.3%); at balance 20 its standard error is many
    times larger (measured 65x)."""
    table = study.balance_table(ms.scenarios.rehearsal_rooms().scaled(50), [0.01, 0.84, 20.0])
    low, middle, high = table.to_dict("records")
    assert abs(low["occupancy"] - low["debiased"]) < 0.01
    assert abs(middle["occupancy"]) < abs(middle["debiased"]) - 0.01
    assert low["se_ratio"] > 1 and high["se_ratio"] > 10
