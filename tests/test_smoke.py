"""The command line: demo, scenario files, template (small settings)."""

import json
import re

import pytest

from marketsim.cli import main
from marketsim.model.scenario_file import load_scenario, scenario_from_dict
from marketsim.model.scenarios import rehearsal_rooms_scenario


def test_demo_writes_the_full_report(capsys, tmp_path):
    assert main(["demo", "--replications", "3", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "global treatment effect" in out
    assert "two-sided (follows balance)" in out and "coverage" in out
    assert "Caveat:" in out
    for figure in ("study.png", "balance_sweep.png", "design_choice.png"):
        assert (tmp_path / figure).stat().st_size > 0
    report = (tmp_path / "report.md").read_text()
    for heading in ("How biased and how noisy", "balance of demand and supply",
                    "Which design", "What these numbers are worth"):
        assert heading in report
    assert "Report:" in out


def test_template_round_trips_and_runs_as_a_report(capsys, tmp_path):
    assert main(["scenario-template"]) == 0
    text = capsys.readouterr().out
    scenario = scenario_from_dict(json.loads(text))
    assert scenario.to_json() == text
    data = json.loads(text)
    data["name"] = "my test market"
    data["experiment"]["horizon"] = 40.0
    path = tmp_path / "market.json"
    path.write_text(json.dumps(data))
    assert load_scenario(path).horizon == 40.0
    assert main(["report", str(path), "--replications", "2",
                 "--out", str(tmp_path / "out")]) == 0
    assert "my test market" in (tmp_path / "out" / "report.md").read_text()


@pytest.mark.parametrize("change, message", [
    (lambda d: d["market"].update(arrival_rate=-1),
     "market.arrival_rate must be a finite number > 0, got -1"),
    (lambda d: d["market"].pop("utility"), "market must have the key 'utility'"),
    (lambda d: d["experiment"].update(colour=1), "experiment has an unknown key 'colour'"),
    (lambda d: d["experiment"].update(horizon=0), "experiment.horizon must be a finite number"),
    (lambda d: d["treatment"].update(utility_shift="big"),
     "treatment.utility_shift must be a finite number"),
    (lambda d: d.update(name=""), "name must be a non-empty string, got ''"),
    (lambda d: d["market"].update(busy_time={"family": "lognormal", "cv": 0}),
     "market.busy_time: lognormal cv must be a finite number in (0, 10] (use Fixed() for "
     "cv 0), got 0"),
    (lambda d: d["market"].update(busy_time=[{"family": "fixed"}, {"family": "weibull"}]),
     "market.busy_time[1].family must be one of 'exponential', 'gamma'"),
    (lambda d: d["market"].update(busy_time=[{"family": "empirical", "stays": [2.0]}] * 2),
     "market.busy_time[0]: empirical stays must hold at least 2 values, got 1"),
    (lambda d: d["market"].update(demand={"multipliers": [0, 0], "period": 24}),
     "market.demand: multipliers must not all be 0"),
    (lambda d: d["market"].update(demand={"multipliers": [1, 2], "period": 24, "phase": 1}),
     "market.demand takes the keys multipliers, period, piece_length, starts, got 'phase'"),
])
def test_scenario_file_errors_name_the_key(change, message):
    data = rehearsal_rooms_scenario().to_dict()
    change(data)
    with pytest.raises(ValueError, match=re.escape(message)):
        scenario_from_dict(data)


def test_scenario_file_keeps_busy_times_and_demand():
    data = rehearsal_rooms_scenario().to_dict()
    data["market"]["busy_time"] = [{"family": "lognormal", "cv": 2.0},
                                   {"family": "empirical", "stays": [1.0, 2.0, 4.0]}]
    data["market"]["demand"] = {"multipliers": [1, 1, 2, 4], "period": 24.0}
    scenario = scenario_from_dict(data)
    again = scenario_from_dict(json.loads(scenario.to_json()))
    assert [b.describe() for b in again.market.busy_time] == [
        "lognormal (cv 2)", "empirical (3 stays, cv 0.535)"]
    assert again.market.demand.multipliers.tolist() == [0.5, 0.5, 1.0, 2.0]
    assert "busy_time" not in rehearsal_rooms_scenario().to_dict()["market"]


def test_report_command_rejects_a_missing_file(capsys, tmp_path):
    with pytest.raises(SystemExit):
        main(["report", str(tmp_path / "nothing.json")])
    assert "does not exist" in capsys.readouterr().err


@pytest.mark.parametrize("change, message", [
    (lambda d: d.pop("treatment"), "scenario must have the key 'treatment'"),
    (lambda d: d.update(treatment={}),
     "treatment must change bookings in the market, got one that leaves every customer's "
     "choice unchanged: Treatment()"),
    (lambda d: d["market"].update(consideration=0.0),
     "treatment must change bookings in the market, got one that leaves every customer's "
     "choice unchanged"),
    (lambda d: d["treatment"].update(utility_shift=[0.1, 0.2, 0.3]),
     "treatment.utility_shift must have shape (n_customer_types, n_listing_types) = (2, 2), "
     "got shape (3,)"),
    (lambda d: d["treatment"].update(consideration_factor=100.0),
     "treatment.consideration_factor times the market's consideration must be <= 1"),
    (lambda d: d["market"].update(customer_shares=["0.5", "0.5"]),
     "market.customer_shares must be an array of numbers of shape (n_customer_types,), got "
     "['0.5', '0.5']"),
    (lambda d: d["market"].update(listing_types=3),
     "market.listing_types must be a list of 2 names, got 3"),
    (lambda d: d["experiment"].update(horizon=1e-300),
     "experiment.horizon must be at least 1e-09 times burn_in"),
], ids=["no-treatment", "null-treatment", "nobody-books", "shift-shape", "factor",
        "string-shares", "names-int", "window"])
def test_scenarios_the_report_could_not_run_are_refused_on_loading(change, message):
    # before: accepted, then a KeyError, a matplotlib error or a ValueError traceback
    # deep in the report (or a TypeError while loading)
    data = rehearsal_rooms_scenario().to_dict()
    change(data)
    with pytest.raises(ValueError, match=re.escape(message)):
        scenario_from_dict(data)


def test_unreadable_scenario_files_are_usage_errors(capsys, tmp_path):
    with pytest.raises(SystemExit):
        main(["report", str(tmp_path)])  # a folder: was an IsADirectoryError traceback
    assert f"scenario file {str(tmp_path)!r} cannot be read" in capsys.readouterr().err
    binary = tmp_path / "market.json"
    binary.write_bytes(b"\xff\xfe{")
    with pytest.raises(SystemExit):
        main(["report", str(binary)])
    assert "is not UTF-8 text" in capsys.readouterr().err


@pytest.mark.parametrize("options, message", [
    (["--seed", "-1"], "--seed must be a whole number >= 0, got -1"),
    (["--out", "FILE"], "--out must be a folder that can be created, got"),
])
def test_bad_options_are_usage_errors_before_any_work(options, message, capsys, tmp_path):
    # before: a traceback from deep inside the study / from mkdir
    existing = tmp_path / "a file"
    existing.write_text("x")
    options = [str(existing) if o == "FILE" else o for o in options]
    with pytest.raises(SystemExit):
        main(["demo", "--replications", "2", *options])
    err = capsys.readouterr().err
    assert message in err and "usage: marketsim demo" in err


def test_report_that_cannot_run_its_designs_is_a_usage_error(capsys, tmp_path):
    # every type has one listing: listing-side randomization treats all of them
    data = rehearsal_rooms_scenario().to_dict()
    data["market"].update(listing_types=["room"], listing_counts=[1], mean_busy_time=[2.0],
                          consideration=[[0.5], [0.5]], utility=[[0.0], [0.0]], price=[10.0],
                          arrival_rate=1.0)
    data["experiment"].update(horizon=5.0, burn_in=0.0)
    path = tmp_path / "one.json"
    path.write_text(json.dumps(data))
    with pytest.raises(SystemExit):
        main(["report", str(path), "--replications", "2", "--workers", "1",
              "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert "rounding left no treated listing" in err and "at least 0.5 treats one" in err


def test_version_and_describe(capsys):
    """--version prints the package's version; describe explains every key a scenario
    file accepts (a key added to the file format without a word fails here)."""
    import marketsim
    from marketsim.model import scenario_file
    from marketsim.model.plan_spec import KEY_HELP

    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0
    assert capsys.readouterr().out.strip() == f"marketsim {marketsim.__version__}"
    accepted = {key for key in scenario_file.TOP_KEYS if key not in ("market", "treatment",
                                                                       "experiment")}
    for section, keys in (("market", scenario_file.MARKET_KEYS),
                          ("treatment", scenario_file.TREATMENT_KEYS),
                          ("experiment", scenario_file.EXPERIMENT_KEYS)):
        accepted |= {f"{section}.{key}" for key in keys}
    assert set(KEY_HELP) == accepted
    assert main(["describe"]) == 0
    out = capsys.readouterr().out
    assert "experiment.horizon" in out and "measured window, after the burn-in" in out


def test_scenario_file_chooses_designs_target_and_replications(capsys, tmp_path):
    data = rehearsal_rooms_scenario().to_dict()
    data["experiment"].update(
        horizon=20.0, burn_in=5.0, replications=3,
        designs=[{"design": "customer-side", "treated": 0.25},
                 {"design": "two-sided-following-balance"}],
        target={"target_relative_se": 0.1})
    path = tmp_path / "mine.json"
    path.write_text(json.dumps(data))
    scenario = load_scenario(path)
    assert scenario.replications == 3 and scenario.target == ("target_relative_se", 0.1)
    assert scenario_from_dict(scenario.to_dict()).designs == scenario.designs
    assert main(["report", str(path), "--workers", "1", "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    assert "3 replications" in out
    report = (tmp_path / "out" / "report.md").read_text()
    choice = report.split("## 3.")[1]
    ranked = set(re.findall(r"^\| \d+ \| ([^|]*?) \|", choice, re.M))
    assert ranked == {"customer-side (a_C=0.25)", "two-sided (follows balance)"}
    assert "standard deviation of the estimate 0.1 of the effect" in choice


@pytest.mark.parametrize("experiment, message", [
    ({"designs": [{"design": "cluster"}]}, "experiment.designs[0].design must be one of"),
    ({"designs": [{"design": "switchback"}]},
     "experiment.designs[0] (a switchback) needs block_length"),
    ({"designs": [{"design": "switchback", "block_length": 2, "burn_in": 2}]},
     "experiment.designs[0].burn_in must be shorter than block_length, got burn_in=2"),
    ({"designs": [{"design": "switchback", "block_length": 2, "assignment": "daily"}]},
     "experiment.designs[0].assignment must be one of 'random', 'alternating', got 'daily'"),
    ({"designs": [{"design": "listing-side", "listings": 0.5}]},
     "experiment.designs[0] has an unknown key 'listings'"),
    ({"designs": [{"design": "two-sided", "customers": 1.5}]},
     "experiment.designs[0].customers must be a finite number in (0, 1)"),
    ({"target": {"target_se": 0.1, "target_rmse": 0.2}}, "experiment.target must be an object"),
    ({"target": {"power": 0.8}}, "experiment.target must name one of"),
    ({"replications": 1}, "experiment.replications must be a whole number >= 2"),
])
def test_planning_keys_of_a_scenario_file_are_checked(experiment, message):
    data = rehearsal_rooms_scenario().to_dict()
    data["experiment"].update(experiment)
    with pytest.raises(ValueError, match=re.escape(message)):
        scenario_from_dict(data)
