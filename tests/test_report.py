"""The report's findings in words follow the tables by stated rules."""

import re

import numpy as np
import pandas as pd
import pytest

import marketsim as ms
from marketsim.report.full_report import write_full_report
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
