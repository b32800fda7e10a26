"""Print the switchback's bias against block length and burn-in on the rehearsal rooms.

Large-market relative bias (the ODE run through the schedule, no Monte Carlo error) of
random and alternating switchbacks, and the simulated relative bias (with its Monte Carlo
standard error) and interval coverage of random switchbacks on the 40-room market over
two weeks (336 hours after a day of burn-in, 200 replications). Block lengths in mean
busy times (2.25 hours). Run from the repository root (about a minute on 2 cores)::

    .venv/bin/python docs/switchback_bias.py
"""

from __future__ import annotations

import pandas as pd

import marketsim as ms

MULTIPLES = [0.5, 1.0, 2.0, 5.0, 10.0, 20.0]
BURN_INS = [0.0, 1.0]  # in mean busy times (capped below the block)


def main() -> None:
    market = ms.scenarios.rehearsal_rooms()
    feature = ms.scenarios.instant_confirmation()
    busy = float(market.listing_counts @ market.mean_busy_time / market.n_listings)
    only = [ms.SwitchbackDifference()]
    rows, arms = [], []
    for k in MULTIPLES:
        for b in BURN_INS:
            burn_in = min(b, 0.5 * k) * busy
            row = {"block (busy times)": k, "burn-in (busy times)": burn_in / busy}
            for assignment in ("random", "alternating"):
                design = ms.Switchback(k * busy, burn_in=burn_in, assignment=assignment)
                table = ms.meanfield.expected_estimates(market, feature, design, only)
                row[f"large-market {assignment}"] = float(table["relative_bias"].iloc[0])
            rows.append(row)
            if 2 * k * busy <= 336.0:
                arms.append(ms.Arm(ms.Switchback(k * busy, burn_in=burn_in), only,
                                   name=f"{k:g}/{burn_in / busy:g}"))
    table = pd.DataFrame(rows)
    result = ms.Study(market, feature, arms, horizon=336.0, burn_in=24.0,
                      start="steady").run(200, seed=2026, workers=2, progress=False)
    simulated = result.summary.set_index("arm")
    keys = [f"{k:g}/{b:g}" for k, b in zip(table["block (busy times)"],
                                           table["burn-in (busy times)"])]
    table["simulated random"] = [simulated["relative_bias"].get(key) for key in keys]
    table["mc s.e."] = [simulated["relative_bias_mc_se"].get(key) for key in keys]
    table["coverage"] = [simulated["coverage"].get(key) for key in keys]
    pd.set_option("display.width", 140)
    print(f"Rehearsal rooms, mean busy time {busy:.2f} h, large-market effect "
          f"{ms.meanfield.gte(market, feature):.3f} bookings per hour; relative bias:")
    print(table.round(3).to_string(index=False))


if __name__ == "__main__":
    main()
