"""Command line on platform logs: marketsim calibrate FOLDER, marketsim analyze FOLDER."""

import pytest

import marketsim as ms
from marketsim.cli import main
from marketsim.model.scenario_file import load_scenario


def test_calibrate_prints_the_table_and_writes_a_scenario_report_accepts(tmp_path, capsys):
    log = ms.simulate_log(ms.scenarios.rehearsal_rooms(), horizon=150.0, burn_in=10.0, seed=1)
    folder = log.to_folder(tmp_path / "logs", kind="parquet")
    scenario_path = tmp_path / "calibrated.json"
    assert main(["calibrate", str(folder), "--scenario", str(scenario_path)]) == 0
    out = capsys.readouterr().out
    assert "Parameters (95% intervals)" in out and "Fit checks" in out
    scenario = load_scenario(scenario_path)
    assert scenario.market.n_listings == 40
    assert main(["report", str(scenario_path), "--replications", "2", "--out",
                 str(tmp_path / "report")]) == 0
    assert (tmp_path / "report" / "report.md").is_file()


def test_calibrate_without_impressions_needs_consideration(tmp_path, capsys):
    log = ms.simulate_log(ms.scenarios.rehearsal_rooms(), horizon=100.0, seed=2)
    folder = log.to_folder(tmp_path / "logs")
    (folder / "impressions.csv").unlink()
    with pytest.raises(SystemExit):
        main(["calibrate", str(folder), "--scenario", str(tmp_path / "s.json")])
    assert "consideration must be given" in capsys.readouterr().err
    assert main(["calibrate", str(folder), "--consideration", "0.2", "--scenario",
                 str(tmp_path / "s.json")]) == 0
    assert "not separately identified" in capsys.readouterr().out


def test_analyze_prints_the_estimates(tmp_path, capsys):
    market = ms.scenarios.rehearsal_rooms()
    log = ms.simulate_log(market, ms.scenarios.instant_confirmation(), ms.TwoSided(0.5, 0.5),
                          horizon=100.0, seed=3)
    folder = log.to_folder(tmp_path / "experiment")
    assert main(["analyze", str(folder)]) == 0
    out = capsys.readouterr().out
    assert "two-sided naive" in out and "Group rates" in out


def test_a_missing_folder_is_a_usage_error(tmp_path, capsys):
    with pytest.raises(SystemExit):
        main(["calibrate", str(tmp_path / "nowhere")])
    assert "folder must be an existing folder" in capsys.readouterr().err
