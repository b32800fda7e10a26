"""Print the tables of docs/where_each_estimator_wins.md.

On the three markets of tests/test_meanfield.py (the rehearsal rooms, a one-type
market and a three-type market), at balances 0.1 to 10, for two-sided designs with
fixed (0.5, 0.5) and balance-following fractions: the large-market relative bias of
each two-sided estimator (no Monte Carlo error) and, by simulation, the RMSE of a
finite experiment. Run from the repository root (about two minutes on 2 cores)::

    .venv/bin/python docs/where_each_estimator_wins.py
"""

from __future__ import annotations

import sys
from pathlib import Path

import pandas as pd

import marketsim as ms

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from test_meanfield import one_type_market, three_type_market

BALANCES = [0.1, 0.3, 1.0, 3.0, 10.0]
SHORT = {"two-sided naive": "naive", "two-sided corrected (k=1)": "k=1",
         "two-sided corrected (k=2)": "k=2", "two-sided debiased (first order)": "debiased"}
MARKETS = {
    "rehearsal rooms (200 listings)": ms.scenarios.rehearsal_rooms().scaled(5),
    "one type (100 listings)": one_type_market(),
    "three types (100 listings)": three_type_market(),
}
ARMS = {"fixed 0.5/0.5": ms.TwoSided(0.5, 0.5), "follows balance": ms.TwoSidedFollowingBalance()}


def winners(table: pd.DataFrame, column: str, label: str) -> pd.DataFrame:
    """Per point: the estimator with the least |column| and its value, the debiased
    estimator's value (with its Monte Carlo s.e. when the table has one)."""
    table = table.assign(score=table[column].abs(), short=table["estimator"].map(SHORT))
    rows = []
    for (arm, balance), part in table.groupby(["arm", "balance"], sort=False):
        best = part.loc[part["score"].idxmin()]
        mine = part[part["short"] == "debiased"].iloc[0]
        value = f"{mine[column]:.2f}"
        if f"{column}_mc_se" in part:
            value += f" ± {mine[column + '_mc_se']:.2f}"
        rows.append({"design": arm, "balance": f"{balance:g}", f"least {label}": best["short"],
                     f"its {label}": f"{best[column]:.2f}", f"debiased {label}": value})
    return pd.DataFrame(rows)


def relative(table: pd.DataFrame) -> pd.DataFrame:
    """RMSE and its Monte Carlo s.e. as a share of the effect."""
    scale = table["truth"].abs()
    return table.assign(rmse=table["rmse"] / scale, rmse_mc_se=table["rmse_mc_se"] / scale)


def markdown(table: pd.DataFrame) -> str:
    """A pipe table (no extra dependency)."""
    lines = ["| " + " | ".join(table.columns) + " |",
             "|" + "---|" * len(table.columns)]
    lines += ["| " + " | ".join(map(str, row)) + " |" for row in table.itertuples(index=False)]
    return "\n".join(lines)


def main() -> None:
    treatment = ms.scenarios.instant_confirmation()
    for name, market in MARKETS.items():
        arms = [ms.Arm(design, name=label) for label, design in ARMS.items()]
        large = ms.sweep(market.scaled(10), treatment, arms, BALANCES)
        simulated = ms.sweep(market, treatment, arms, BALANCES, mode="simulation",
                             horizon=100.0, burn_in=10.0, replications=100, seed=12,
                             workers=2, progress=False)
        table = winners(large, "relative_bias", "rel. bias").merge(
            winners(relative(simulated), "rmse", "rel. RMSE"), on=["design", "balance"])
        print(f"\n### {name}\n")
        print(markdown(table))


if __name__ == "__main__":
    main()
