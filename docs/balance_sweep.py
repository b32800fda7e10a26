"""Draw docs/balance_sweep.png, the figure of the README section "Large-market sweeps".

Run from the repository root::

    .venv/bin/python docs/balance_sweep.py
"""

from pathlib import Path

import numpy as np

import marketsim as ms
from marketsim.meanfield.figures import plot_balance_sweep

market = ms.scenarios.rehearsal_rooms().scaled(25)  # 1,000 listings
table = ms.meanfield.sweep_balance(
    market, ms.scenarios.instant_confirmation(),
    designs=[ms.CustomerSide(0.5), ms.ListingSide(0.5), ms.TwoSided(0.5, 0.5),
             ms.TwoSidedFollowingBalance()],
    balances=np.logspace(-2, 2, 61),
)
figure = plot_balance_sweep(
    table, ylim=(-1, 3),
    title="Rehearsal rooms, instant confirmation: large-market relative bias",
)
target = Path(__file__).with_name("balance_sweep.png")
figure.savefig(target, dpi=100)
print(f"wrote {target}")
