"""The report's findings in words follow the tables by stated rules."""

import pandas as pd

from marketsim.report.wording import coverage_sentence


def test_coverage_sentence_names_only_the_estimators_that_undercover():
    """Under: coverage + 2 s.e. < 95%; over: coverage - 2 s.e. > 95%; the rest within error
    (a broad "the intervals cover less often than claimed" was wrong for k = 2)."""
    table = pd.DataFrame({
        "arm": ["one", "two", "three", "four"],
        "estimator": ["naive", "corrected (k=2)", "listing-side", "wide"],
        "coverage": [0.75, 0.97, 0.92, 0.995],
        "coverage_mc_se": [0.03, 0.012, 0.019, 0.002],
    })
    text = coverage_sentence(table)
    under, rest = text.split("More often than claimed")
    assert "one, naive (0.75)" in under and "corrected" not in under
    assert "four, wide" in rest.split("Within")[0]
    within = text.split("Within Monte Carlo error of 95%:")[1]
    assert "two, corrected (k=2) (0.97)" in within and "three, listing-side (0.92)" in within
    assert "significantly less often" in coverage_sentence(table.iloc[[1, 2]])
