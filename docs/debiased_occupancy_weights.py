"""Print the table of docs/two_sided_debiased.md, "Between the limits: what the check found".

A study, not a shipped estimator. The two-sided debiased estimator weighs its two
contrasts ``C_1 = Q_10/a_C - Q_00/(1-a_C)`` and ``C_2 = Q_01/a_L - Q_00/(1-a_L)`` by
the exact first-order weight of one balance limit each, blended by ``beta =
exp(-balance)``. On one listing type the exact first-order weights at any balance
have a closed form in the type's occupancy ``o`` (busy share) and the customers'
booking probability ``P`` (:func:`occupancy_weights`); the "occupancy-weighted"
variant uses them on each listing type, with ``o`` and ``P`` read from the
experiment's own ledger (:func:`ledger_occupancy`), so its weights depend on the data.

For each market (the rehearsal rooms, the one-type and three-type markets of
tests/test_meanfield.py, and 12 random markets from a fixed seed), grown 50 times as
in tests/test_debiased.py, with fractions that follow balance (``ms.TwoSided.for_balance``)
and the demo's utility shift 0.3, over 25 balances from 0.01 to 20, the large-market
model (no Monte Carlo error) gives the relative bias of the shipped debiased
estimator, of the corrected estimator with k = 2 and of the variant, and the ratio of
the variant's naive standard error to the shipped estimator's. The standard errors
are the Poisson (naive) ones of ``Estimate.standard_error`` on the expected ledger,
with the variant's weights held at their large-market values (the noise of the
plug-in ``o`` and ``P`` is left out; it enters multiplied by contrasts of the order of
the effect). The ratio does not depend on the length of the run. Run from the
repository root (about 20 seconds)::

    PYTHONPATH=. .venv/bin/python docs/debiased_occupancy_weights.py
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

import marketsim as ms
from marketsim.engine import Ledger, build_cells
from marketsim.estimators.totals import Estimate, GroupTotals
from marketsim.meanfield.steady import global_effect, solve_cells

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_meanfield import one_type_market, three_type_market
from where_each_estimator_wins import markdown

BALANCES = np.geomspace(0.01, 20.0, 25)
TREATMENT = ms.scenarios.instant_confirmation()
DEBIASED = ms.TwoSidedDebiased()
K2 = ms.TwoSidedCorrected(k=2)
RANDOM_SEED = 2026
N_RANDOM = 12


def occupancy_weights(a_c: float, a_l: float, o: float, p: float) -> tuple[float, float]:
    """Exact first-order weights ``(w1, w2)`` of ``C_1`` and ``C_2`` on one listing type.

    ``estimate = naive + w1 * C_1 + w2 * C_2`` with ``g = 1/((1 - a_C a_L)(1 - P o))``,
    ``w2 = g / a_C``, ``w1 = g K / (a_L (1 - a_L))`` and ``K = (1 - a_L) - o [2 (1 -
    a_C a_L) - a_C o (1 - a_L) - P a_L (1 - a_C)]``. At ``o = 0`` they are the two
    limit weights of ``ms.TwoSidedDebiased``, ``1/(a_L (1 - a_C a_L))`` and
    ``1/(a_C (1 - a_C a_L))``, both at once (``C_2`` is 0 to first order there).

    Parameters
    ----------
    a_c, a_l : float
        Treated shares of customers and of the type's listings, in (0, 1).
    o : float
        Occupancy of the type (busy share of its listings), in [0, 1).
    p : float
        Booking probability of an arriving customer, in [0, 1).
    """
    both = 1.0 - a_c * a_l
    g = 1.0 / (both * (1.0 - p * o))
    k = (1.0 - a_l) - o * (2.0 * both - a_c * o * (1.0 - a_l) - p * a_l * (1.0 - a_c))
    return g * k / (a_l * (1.0 - a_l)), g / a_c


def contrast_coefficients(a_c: float, a_l: float, w1: float, w2: float) -> np.ndarray:
    """Coefficients on ``Q_xy`` (rows: customer status, columns: listing status) of
    ``naive + w1 C_1 + w2 C_2``, shape (2, 2)."""
    rest = -1.0 / (1.0 - a_c * a_l)
    naive = np.array([[rest, rest], [rest, 1.0 / (a_c * a_l)]])
    first = np.array([[-1.0 / (1.0 - a_c), 0.0], [1.0 / a_c, 0.0]])
    second = np.array([[-1.0 / (1.0 - a_l), 1.0 / a_l], [0.0, 0.0]])
    return naive + w1 * first + w2 * second


def ledger_occupancy(ledger: Ledger, groups: str = "all") -> tuple[np.ndarray, np.ndarray]:
    """Per listing type, what the experiment's ledger says: ``o``, the busy share of
    the type's listings, and ``P``, the booking probability of the customer cells
    that book the type, weighed by their bookings of it.

    Parameters
    ----------
    ledger : Ledger
    groups : {"all", "control"}
        Read both arms (the table's choice) or only control listings (for ``o``) and
        control customers (for ``P``).

    Returns
    -------
    o, p : ndarray, shape (n_listing_types,)
    """
    if groups not in ("all", "control"):
        raise ValueError(f"groups must be 'all' or 'control', got {groups!r}")
    split = ledger.cells.split
    n_types = ledger.cells.market.n_listing_types
    listing = np.ones(split.listing_count.size, dtype=bool)
    customer = np.ones(split.customer_share.size, dtype=bool)
    if groups == "control":
        listing, customer = ~split.listing_treated, ~split.customer_treated
    kind = split.listing_type[listing]
    busy = (split.listing_count - np.asarray(ledger.mean_available, dtype=float))[listing]
    o = np.bincount(kind, busy, n_types) / np.bincount(
        kind, split.listing_count[listing].astype(float), n_types)
    bookings = np.asarray(ledger.bookings, dtype=float)[customer]
    probability = bookings.sum(axis=1) / np.asarray(ledger.arrivals, dtype=float)[customer]
    by_type = np.zeros((bookings.shape[0], n_types))
    np.add.at(by_type.T, split.listing_type, bookings.T)
    p = (probability @ by_type) / by_type.sum(axis=0)
    return o, p


def occupancy_weighted(ledger: Ledger, groups: str = "all") -> Estimate:
    """The occupancy-weighted variant on one ledger: :func:`occupancy_weights` per
    listing type, with that type's treated share and the ledger's ``o`` and ``P``
    (:func:`ledger_occupancy`)."""
    split = ledger.cells.split
    market = ledger.cells.market
    o, p = ledger_occupancy(ledger, groups)
    weights = np.zeros((market.n_listing_types, 2, 2))
    for kind in np.unique(split.listing_type):
        stratum = split.stratum(kind)
        a_c, a_l = stratum.customer_fraction, stratum.listing_fraction
        weights[kind] = contrast_coefficients(a_c, a_l, *occupancy_weights(a_c, a_l, o[kind],
                                                                             p[kind]))
    return GroupTotals.of(ledger).combine(weights)


def balance_table(market: ms.Market, balances: np.ndarray = BALANCES,
                  treatment: ms.Treatment = TREATMENT) -> pd.DataFrame:
    """Large-market relative biases and the standard-error ratio, one row per balance.

    Fractions follow balance (``ms.TwoSided.for_balance``). Columns: ``balance,
    debiased, k2, occupancy, occupancy_control`` (relative biases; the last reads ``o``
    and ``P`` from control groups only) and ``se_ratio`` (naive standard error of the
    variant over that of the shipped debiased estimator).
    """
    rows = []
    for balance in balances:
        at = market.with_balance(float(balance))
        design = ms.TwoSided.for_balance(balance)
        ledger = solve_cells(build_cells(at, treatment, design)).ledger()
        truth = global_effect(at, treatment, "bookings")
        shipped = DEBIASED.estimate(ledger)
        variant = occupancy_weighted(ledger)
        rows.append({
            "balance": float(balance),
            "debiased": (shipped.value - truth) / truth,
            "k2": (K2.estimate(ledger).value - truth) / truth,
            "occupancy": (variant.value - truth) / truth,
            "occupancy_control": occupancy_weighted(ledger, "control").value / truth - 1.0,
            "se_ratio": variant.standard_error / shipped.standard_error,
        })
    return pd.DataFrame(rows)


def random_markets(seed: int = RANDOM_SEED, count: int = N_RANDOM) -> dict[str, ms.Market]:
    """Moderate invented markets: 1-3 customer and listing types, 20-100 listings per
    type, mean busy times 0.3 to 3, consideration 0.05 to 0.9, utilities and outside
    utilities standard normal."""
    rng = np.random.default_rng(seed)
    markets = {}
    for k in range(count):
        n_c, n_l = (int(v) for v in rng.integers(1, 4, 2))
        markets[f"random {k + 1} ({n_c}x{n_l})"] = ms.Market(
            listing_counts=rng.integers(20, 101, n_l),
            mean_busy_time=10 ** rng.uniform(-0.5, 0.5, n_l), arrival_rate=1.0,
            customer_shares=rng.dirichlet(np.ones(n_c)),
            consideration=rng.uniform(0.05, 0.9, (n_c, n_l)),
            utility=rng.normal(0.0, 1.0, (n_c, n_l)), outside_utility=rng.normal(0.0, 1.0, n_c))
    return markets


def markets() -> dict[str, ms.Market]:
    """Every market of the table, grown 50 times (as in tests/test_debiased.py)."""
    named = {"rehearsal rooms": ms.scenarios.rehearsal_rooms(), "one type": one_type_market(),
             "three types": three_type_market(), **random_markets()}
    return {name: market.scaled(50) for name, market in named.items()}


def summary(name: str, table: pd.DataFrame) -> dict:
    """One row of the printed table: max |relative bias| (percent) of each estimator and
    the balance where the shipped estimator's and the variant's are largest; the
    standard-error ratio at the lowest balance of the table, its median over the
    balances and its max at balance >= 10."""
    high = table["balance"] >= 10.0
    return {
        "market": name,
        "debiased %": 100 * table["debiased"].abs().max(),
        "at balance": table.loc[table["debiased"].abs().idxmax(), "balance"],
        "k=2 %": 100 * table["k2"].abs().max(),
        "occupancy %": 100 * table["occupancy"].abs().max(),
        "at balance ": table.loc[table["occupancy"].abs().idxmax(), "balance"],
        "occupancy, control groups %": 100 * table["occupancy_control"].abs().max(),
        "SE ratio at 0.01": table["se_ratio"].iloc[0],
        "SE ratio median": table["se_ratio"].median(),
        "SE ratio max, balance >= 10": table.loc[high, "se_ratio"].max(),
    }


def main() -> None:
    rows = [summary(name, balance_table(market)) for name, market in markets().items()]
    table = pd.DataFrame(rows)
    random = table["market"].str.startswith("random")
    print("Max |large-market relative bias| over balance 0.01-20 (25 points), fractions that "
          "follow balance,\nutility shift 0.3; SE ratio = naive standard error of the "
          "occupancy-weighted variant / the shipped debiased estimator's.\n")
    print(markdown(table.map(lambda v: f"{v:.3g}" if isinstance(v, float) else v)))
    worst = table[random].max(numeric_only=True)
    print(f"\nRandom markets, worst |relative bias|: debiased {worst['debiased %']:.1f}%, "
          f"k=2 {worst['k=2 %']:.1f}%, occupancy-weighted {worst['occupancy %']:.1f}% "
          f"(control groups {worst['occupancy, control groups %']:.1f}%); SE ratio: median of "
          f"medians {table.loc[random, 'SE ratio median'].median():.2g}, largest at balance "
          f">= 10 {worst['SE ratio max, balance >= 10']:.3g}.")

if __name__ == "__main__":
    main()
