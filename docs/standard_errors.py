"""Print the tables of docs/standard_errors.md: naive against batch-means standard errors.

For each market, a study of the standard designs (400 replications) scores both kinds
of standard error: the ratio of the mean standard error to the estimator's real
standard deviation over replications, and the coverage of the nominal 95% interval of
the true global effect. Markets: the rehearsal rooms over the demo's two weeks, and
the one-type market of tests/test_meanfield.py over 100 mean busy times. Run from the
repository root (a few minutes on 2 cores)::

    .venv/bin/python docs/standard_errors.py
"""

from __future__ import annotations

import marketsim as ms
from marketsim.report.wording import coverage_band, standard_error_sentence

REPLICATIONS, SEED = 400, 2026
DESIGNS = [ms.CustomerSide(0.5), ms.ListingSide(0.5), ms.TwoSided(0.5, 0.5)]
COLUMNS = ["arm", "estimator", "relative_bias", "sd", "naive_se_ratio", "coverage",
           "batch_se_ratio", "batch_coverage"]


def one_type_market() -> ms.Market:
    """One customer type, one listing type (invented numbers; tests/test_meanfield.py)."""
    return ms.Market(listing_counts=[100], mean_busy_time=[1.0], arrival_rate=100.0,
                     customer_shares=[1.0], consideration=0.5, utility=0.0,
                     outside_utility=0.0)


def main() -> None:
    markets = [("rehearsal rooms, 336 hours", ms.scenarios.rehearsal_rooms(), 336.0, 50.0),
               ("one-type market, 100 busy times", one_type_market(), 100.0, 10.0)]
    for name, market, horizon, burn_in in markets:
        study = ms.Study(market, ms.scenarios.instant_confirmation(), DESIGNS,
                         horizon=horizon, burn_in=burn_in, start="steady")
        result = study.run(REPLICATIONS, seed=SEED, workers=2, progress=False)
        low, high = coverage_band(REPLICATIONS)
        print(f"\n### {name}: {study.batches} batches, {REPLICATIONS} replications "
              f"(coverage band {low:.3f} to {high:.3f})\n")
        table = result.summary[COLUMNS].round(3)
        print("| " + " | ".join(COLUMNS) + " |")
        print("|" + "---|" * len(COLUMNS))
        for row in table.itertuples(index=False):
            print("| " + " | ".join(str(x) for x in row) + " |")
        print()
        print(standard_error_sentence(result.summary))


if __name__ == "__main__":
    main()
