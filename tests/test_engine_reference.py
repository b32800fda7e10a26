"""The engine against outside references: Erlang B, exact stationary
distributions of small chains, and Little's law.

Every tolerance is a multiple (4) of a Monte Carlo standard error estimated in
the test itself, from batch means (time bins of one long run) or independent
replications (spawned seeds). Each test also checks that its standard error is
small compared with the quantity tested, so that a wrong engine cannot pass by
being noisy.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

import marketsim as ms

Z = 4.0  # tolerance in Monte Carlo standard errors


def replications(market, treatment, design, *, count, horizon, burn_in, seed):
    """``count`` independent ledgers (seeds spawned from ``seed``)."""
    children = np.random.SeedSequence(seed).spawn(count)
    return [ms.simulate(market, treatment, design, horizon=horizon, burn_in=burn_in,
                        seed=child) for child in children]


def mean_and_se(samples: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean over axis 0 and its standard error."""
    samples = np.asarray(samples, dtype=float)
    return samples.mean(axis=0), samples.std(axis=0, ddof=1) / math.sqrt(samples.shape[0])


# ------------------------------------------------------------------- Erlang B
def erlang_b(servers: int, load: float) -> float:
    """Erlang B blocking probability by the standard recursion
    ``B(0) = 1, B(k) = A B(k-1) / (k + A B(k-1))``."""
    blocking = 1.0
    for k in range(1, servers + 1):
        blocking = load * blocking / (k + load * blocking)
    return blocking


# Standard Erlang B tables: the offered load (Erlangs) giving 1% blocking with
# c servers (c = 10: 4.461, c = 15: 8.108), as quoted in DESIGN.md section 8.
ERLANG_TABLE_1_PERCENT = [(10, 4.461), (15, 8.108)]


@pytest.mark.parametrize(("servers", "load"), ERLANG_TABLE_1_PERCENT)
def test_erlang_b_recursion_matches_table(servers, load):
    """Table check of the recursion itself (standard Erlang B tables)."""
    # table loads are given to 3 decimals; 0.001 Erlang moves B by about 3e-5 here
    assert erlang_b(servers, load) == pytest.approx(0.01, abs=5e-5)
    # and the recursion is not flat: one server fewer blocks far more
    assert erlang_b(servers - 1, load) > 0.015


@pytest.mark.parametrize(("servers", "load", "horizon"),
                         [(10, 4.461, 600_000.0), (15, 8.108, 350_000.0)])
def test_blocking_share_is_erlang_b(servers, load, horizon):
    """One listing type, consideration 1, negligible outside option: the market is
    an M/M/c/c loss system and the share of arrivals that do not book is Erlang
    B(c, A) with A = arrival_rate * mean_busy_time (standard Erlang B tables;
    Erlang 1917)."""
    m = ms.Market(listing_counts=[servers], mean_busy_time=[1.0], arrival_rate=load,
                  customer_shares=[1.0], consideration=1.0, utility=0.0,
                  outside_utility=-30.0)
    batches = 40
    ledger = ms.simulate(m, horizon=horizon, burn_in=20.0, seed=20240611 + servers,
                         bins=batches)
    booked = ledger.bin_bookings.sum(axis=(1, 2))
    arrived = ledger.bin_arrivals.sum(axis=1)
    blocked, se = mean_and_se(1.0 - booked / arrived)
    expected = erlang_b(servers, load)
    assert se < 0.03 * expected  # the check is tight enough to see a 12% error
    assert abs(blocked - expected) < Z * se, (blocked, expected, se)
    # the whole-window share agrees with the batch mean
    assert 1.0 - ledger.bookings.sum() / ledger.arrivals.sum() == pytest.approx(blocked,
                                                                                  abs=se)


# ------------------------------------------------- exact finite chain (numpy)
def exact_chain(arrival_rate, shares, weight, outside_weight, consideration, counts,
                release_rate):
    """Stationary booking rates and mean availability of the finite market,
    computed from the generator matrix (independently of marketsim).

    Parameters are per customer cell ``c`` and listing cell ``l``: ``weight[c, l]
    = exp(u)``, ``outside_weight[c]`` the full outside weight (``N exp(u0)``).
    The state is the number of available listings per listing cell. From state
    ``k`` a listing of cell ``j`` is released at rate ``(n_j - k_j) tau_j`` and
    booked at rate ``sum_c Lambda phi_c P_c(j | k)``, where ``P_c`` averages the
    logit choice ``m_j w_cj / (W0_c + sum_l m_l w_cl)`` over independent
    ``m_l ~ Binomial(k_l, alpha_cl)`` considered listings.

    Returns
    -------
    rates : ndarray, shape (n_customer_cells, n_listing_cells)
    available : ndarray, shape (n_listing_cells,)
    """
    shares, weight = np.asarray(shares, float), np.asarray(weight, float)
    consideration = np.asarray(consideration, float)
    counts = [int(n) for n in counts]
    n_customer, n_listing = weight.shape
    states = list(itertools.product(*(range(n + 1) for n in counts)))
    index = {state: s for s, state in enumerate(states)}
    generator = np.zeros((len(states), len(states)))
    flow = np.zeros((len(states), n_customer, n_listing))  # booking rate by state
    for s, state in enumerate(states):
        for c in range(n_customer):
            for considered in itertools.product(*(range(k + 1) for k in state)):
                prob = 1.0
                for m, k, a in zip(considered, state, consideration[c]):
                    prob *= math.comb(k, m) * a**m * (1.0 - a) ** (k - m)
                if prob == 0.0 or not any(considered):
                    continue  # nothing considered: nobody books
                total = outside_weight[c] + sum(m * w for m, w in zip(considered, weight[c]))
                for j in range(n_listing):
                    flow[s, c, j] += (arrival_rate * shares[c] * prob * considered[j]
                                      * weight[c, j] / total)
        for j in range(n_listing):
            if state[j] > 0:
                down = (*state[:j], state[j] - 1, *state[j + 1:])
                generator[s, index[down]] += flow[s, :, j].sum()
            if state[j] < counts[j]:
                up = (*state[:j], state[j] + 1, *state[j + 1:])
                generator[s, index[up]] += (counts[j] - state[j]) * release_rate[j]
        generator[s, s] = -generator[s].sum()
    # pi Q = 0 with sum(pi) = 1: replace one balance equation by the normalisation
    system = generator.T.copy()
    system[-1, :] = 1.0
    right = np.zeros(len(states))
    right[-1] = 1.0
    pi = np.linalg.solve(system, right)
    assert np.all(pi > -1e-12) and np.allclose(pi @ generator, 0.0, atol=1e-10)
    rates = np.einsum("s,scj->cj", pi, flow)
    available = pi @ np.array(states, dtype=float)
    return rates, available


SMALL = dict(
    listing_counts=[4, 3],
    mean_busy_time=[1.0, 2.0],
    arrival_rate=5.0,
    customer_shares=[0.6, 0.4],
    consideration=[[0.6, 0.3], [0.4, 0.8]],
    utility=[[0.5, -0.3], [-0.2, 0.7]],
    outside_utility=[-1.0, -0.5],
)
TREATMENT = ms.Treatment(utility_shift=0.7, consideration_factor=1.2,
                         outside_utility_shift=-0.2)


def hand_cells(market: ms.Market, treatment: ms.Treatment, customers: float,
               listings: float):
    """Cells of a two-sided design built from the documented rules, without the
    library: customer cells (type, control then treated) with shares
    ``phi_i (1 - a_C)``, ``phi_i a_C``; listing cells with ``floor(a_L n_j + 0.5)``
    treated listings; the treatment acts on treated-customer x treated-listing
    pairs, its outside-utility shift on treated customers. Empty cells dropped."""
    customer_cells = [(i, t, phi * (customers if t else 1.0 - customers))
                      for i, phi in enumerate(market.customer_shares) for t in (False, True)]
    customer_cells = [cell for cell in customer_cells if cell[2] > 0]
    listing_cells = []
    for j, n in enumerate(market.listing_counts):
        treated = math.floor(listings * n + 0.5)
        for t, size in ((False, n - treated), (True, treated)):
            if size > 0:
                listing_cells.append((j, t, size))
    n_total = market.n_listings
    shift = np.broadcast_to(treatment.utility_shift, market.utility.shape)
    factor = np.broadcast_to(treatment.consideration_factor, market.utility.shape)
    outside_shift = np.broadcast_to(treatment.outside_utility_shift,
                                    market.outside_utility.shape)
    weight = np.empty((len(customer_cells), len(listing_cells)))
    consideration = np.empty_like(weight)
    outside_weight = np.empty(len(customer_cells))
    for c, (i, ct, _) in enumerate(customer_cells):
        outside_weight[c] = n_total * math.exp(market.outside_utility[i]
                                               + (outside_shift[i] if ct else 0.0))
        for ell, (j, lt, _) in enumerate(listing_cells):
            both = ct and lt
            weight[c, ell] = math.exp(market.utility[i, j] + (shift[i, j] if both else 0.0))
            consideration[c, ell] = market.consideration[i, j] * (factor[i, j] if both else 1.0)
    return dict(
        customer_cells=customer_cells,
        listing_cells=listing_cells,
        arrival_rate=market.arrival_rate,
        shares=[phi for _, _, phi in customer_cells],
        weight=weight,
        outside_weight=outside_weight,
        consideration=consideration,
        counts=[n for _, _, n in listing_cells],
        release_rate=[1.0 / market.mean_busy_time[j] for j, _, _ in listing_cells],
    )


def exact_for(cells: dict) -> tuple[np.ndarray, np.ndarray]:
    keys = ("arrival_rate", "shares", "weight", "outside_weight", "consideration", "counts",
            "release_rate")
    return exact_chain(*(cells[k] for k in keys))


# design, (a_C, a_L) of the same design for the hand-built cells, treatment
DESIGNS = [
    (ms.GlobalControl(), (0.0, 0.0), ms.Treatment()),
    (ms.TwoSided(0.5, 0.5), (0.5, 0.5), TREATMENT),
    (ms.ListingSide(0.5), (1.0, 0.5), TREATMENT),
]


@pytest.mark.parametrize(("design", "fractions", "treatment"), DESIGNS,
                         ids=["global-control", "two-sided", "listing-side"])
def test_matches_exact_stationary_distribution(design, fractions, treatment):
    """Booking rate per customer cell x listing cell and mean availability per
    listing cell agree with the stationary distribution of the generator matrix
    solved with numpy (DESIGN.md section 8, "Exact finite chains")."""
    m = ms.Market(**SMALL)
    cells = hand_cells(m, treatment, *fractions)
    # the library splits the market the same way (same cells, same order)
    split = ms.build_cells(m, treatment, design).split
    assert [(int(i), bool(t)) for i, t in zip(split.customer_type, split.customer_treated)] \
        == [(i, t) for i, t, _ in cells["customer_cells"]]
    assert [(int(j), bool(t), int(n)) for j, t, n in zip(
        split.listing_type, split.listing_treated, split.listing_count)] \
        == cells["listing_cells"]
    exact_rates, exact_available = exact_for(cells)

    ledgers = replications(m, treatment, design, count=30, horizon=3000.0, burn_in=20.0,
                           seed=97)
    rates, rates_se = mean_and_se([ledger.bookings / ledger.window for ledger in ledgers])
    available, available_se = mean_and_se([ledger.mean_available for ledger in ledgers])

    assert np.all(rates_se < 0.04 * exact_rates), (rates_se, exact_rates)
    assert np.all(available_se < 0.02 * exact_available)
    np.testing.assert_array_less(np.abs(rates - exact_rates), Z * rates_se)
    np.testing.assert_array_less(np.abs(available - exact_available), Z * available_se)

    # the check has power: a chain whose outside option does not grow with N
    # (weight exp(u0) instead of N exp(u0)) is rejected by the same data
    wrong = dict(cells, outside_weight=cells["outside_weight"] / m.n_listings)
    wrong_rates, _ = exact_for(wrong)
    total, total_se = mean_and_se([ledger.bookings.sum() / ledger.window
                                   for ledger in ledgers])
    assert abs(total - wrong_rates.sum()) > 3 * Z * total_se


def test_exact_chain_sees_the_treatment():
    """The two-sided reference distinguishes the treated world from the untreated
    one by far more than the simulation error (so the test above has power on
    the treated-customer x treated-listing cell)."""
    m = ms.Market(**SMALL)
    treated, _ = exact_for(hand_cells(m, TREATMENT, 0.5, 0.5))
    untreated, _ = exact_for(hand_cells(m, ms.Treatment(), 0.5, 0.5))
    # customer cell 1 = type 0 treated; listing cell 1 = type 0 treated
    assert treated[1, 1] > 1.3 * untreated[1, 1]


def test_exact_chain_reduces_to_erlang_b():
    """The hand-built generator itself against the Erlang B recursion (one cell,
    consideration 1, no outside option)."""
    rates, available = exact_chain(4.461, [1.0], [[1.0]], [0.0], [[1.0]], [10], [1.0])
    assert 1.0 - rates.sum() / 4.461 == pytest.approx(erlang_b(10, 4.461), rel=1e-9)
    # busy listings = carried load A (1 - B)
    assert 10 - available[0] == pytest.approx(4.461 * (1 - erlang_b(10, 4.461)), rel=1e-9)


# ---------------------------------------------------------------- Little's law
@pytest.mark.parametrize(
    ("design", "treatment"),
    [(ms.GlobalControl(), ms.Treatment()), (ms.TwoSided(0.6, 0.4), TREATMENT)],
    ids=["global-control", "two-sided"],
)
def test_littles_law(design, treatment):
    """Per listing type, mean busy listings = booking rate x mean busy time
    (Little, Operations Research 9(3), 1961)."""
    m = ms.scenarios.rehearsal_rooms()
    ledgers = replications(m, treatment, design, count=20, horizon=1000.0, burn_in=30.0,
                           seed=1961)
    listing_type = ms.build_cells(m, treatment, design).split.listing_type
    busy, predicted = [], []
    for ledger in ledgers:
        per_type_busy = np.zeros(m.n_listing_types)
        per_type_rate = np.zeros(m.n_listing_types)
        np.add.at(per_type_busy, listing_type,
                  ledger.cells.listing_count - ledger.mean_available)
        np.add.at(per_type_rate, listing_type, ledger.bookings.sum(axis=0) / ledger.window)
        busy.append(per_type_busy)
        predicted.append(per_type_rate * m.mean_busy_time)
    difference, se = mean_and_se(np.array(busy) - np.array(predicted))
    mean_busy = np.mean(busy, axis=0)
    assert np.all(se < 0.01 * mean_busy)
    np.testing.assert_array_less(np.abs(difference), Z * se)
