"""The report's findings in words follow the tables by stated rules."""

import re

import numpy as np
import pandas as pd
import pytest

import marketsim as ms
from marketsim.report.full_report import write_full_report
from marketsim.report.wording import coverage_band, coverage_sentence, standard_error_sentence


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


def test_standard_error_sentence_follows_its_rule():
    """Trust the kind whose coverage is in the central 95% band of Binomial(n, 0.95) / n
    (scipy.stats.binom; 400 replications: 371 to 388 hits, i.e. 0.9275 to 0.97) with
    s.e./sd nearest 1; when neither covers, name the one nearest the real spread."""
    from scipy.stats import binom

    assert coverage_band(400) == tuple(x / 400 for x in binom.interval(0.95, 400, 0.95))
    assert coverage_band(400) == (0.9275, 0.97)
    table = pd.DataFrame({
        "arm": ["batch wins", "both cover", "neither", "no batches", "wide naive"],
        "estimator": ["e1", "e2", "e3", "e4", "e5"], "replications": [400] * 5,
        "coverage": [0.99, 0.93, 0.70, 0.95, 0.94],
        "naive_se_ratio": [1.35, 0.96, 1.20, 1.0, 1.40],
        "batch_coverage": [0.95, 0.96, 0.72, float("nan"), 0.85],
        "batch_se_ratio": [1.01, 1.05, 0.98, float("nan"), 1.02],
    })
    text = standard_error_sentence(table)
    trusted, neither = text.split("Neither kind covers as claimed for ")
    assert "batch wins, e1: batch means (coverage 0.95, s.e./sd 1.01; naive 0.99, 1.35)" \
        in trusted
    # both in the band: 0.96 is nearer 1 than 1.05
    assert "both cover, e2: naive (coverage 0.93, s.e./sd 0.96" in trusted
    assert "no batches, e4: naive (coverage 0.95, s.e./sd 1.00)" in trusted
    assert ("wide naive, e5: naive (coverage 0.94, s.e./sd 1.40; batch means 0.85, 1.02), "
            "whose intervals cover although batch means is nearer the real spread") in trusted
    assert neither.startswith("neither, e3 (a bias makes every interval miss); the nearest "
                              "the real spread is batch means (coverage 0.72, s.e./sd 0.98")


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    scenario = ms.scenarios.rehearsal_rooms_scenario()
    path = write_full_report(scenario, replications=4, seed=1, out=folder, workers=1)
    return path.read_text(encoding="utf-8"), scenario


def test_report_has_one_truth_and_one_label_per_design(demo_report):
    """Section 1 and the design choice come from the same simulations (one truth), and a
    design has the same label in every section (its own label, not a section's name)."""
    text, _ = demo_report
    first, rest = text.split("## 2.")
    _, choice = rest.split("## 3.")
    arms_1 = set(re.findall(r"^\| ((?:customer|listing|two)-side[^|]*?) \|", first, re.M))
    arms_3 = set(re.findall(r"^\| \d+ \| ([^|]*?) \|", choice, re.M))
    assert arms_1 & arms_3  # the same labels in both sections
    for design in (ms.CustomerSide(0.5), ms.ListingSide(0.5), ms.TwoSided(0.5, 0.5),
                   ms.TwoSidedFollowingBalance()):
        assert design.label in arms_1
    assert "customer-side 0.5" not in text and "for balance 0." not in text
    assert "one truth" in first
    assert "differs from it by Monte Carlo error" in choice
    # section 1 scores both standard errors and says which to trust (336 h: 20 batches)
    assert "batch_coverage" in first and "20 consecutive batches" in first
    assert "Which standard error to trust" in first or "Neither kind covers" in first


def test_report_states_the_crossing_by_root_finding_and_where_the_market_sits(demo_report):
    text, scenario = demo_report
    large = scenario.market.scaled(25)
    (root,) = ms.meanfield.crossover_balances(large, scenario.treatment, ms.CustomerSide(0.5),
                                              ms.ListingSide(0.5))
    assert f"at a balance of {root:.3g}" in text
    assert f"This market's balance, {scenario.market.balance:.3g}, is below that crossing" in text
    assert "dotted line: this market" in text


def test_balance_figures_mark_the_market_and_draw_relative_bias_in_percent():
    from marketsim.meanfield.figures import plot_balance_sweep
    from marketsim.planning.figures import plot_sweep

    market, feature = ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation()
    table = ms.meanfield.sweep_balance(market, feature, [ms.CustomerSide(0.5)],
                                       [0.1, 1.0, 10.0])
    figure = plot_balance_sweep(table, market_balance=market.balance)
    for axis in figure.axes:
        assert any(np.allclose(line.get_xdata(), market.balance) for line in axis.lines)
        assert "%" in axis.get_yticklabels()[1].get_text() or axis.get_ylabel() == ""
    swept = ms.sweep(market, feature, [ms.CustomerSide(0.5)], values=[0.1, 1.0, 10.0])
    figure = plot_sweep(swept, market_value=market.balance)
    relative = figure.axes[1]
    assert relative.get_yscale() == "symlog"  # relative bias reaches 1130% at balance 10
    assert "logarithmic beyond" in relative.get_title()
    assert any(np.allclose(line.get_xdata(), market.balance) for line in relative.lines)
