"""The command line: demo, scenario files, template (small settings)."""

import json

import pytest

from marketsim.cli import main
from marketsim.scenario_file import load_scenario, scenario_from_dict
from marketsim.scenarios import rehearsal_rooms_scenario


def test_demo_writes_the_full_report(capsys, tmp_path):
    assert main(["demo", "--replications", "3", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "global treatment effect" in out
    assert "two-sided for balance" in out and "coverage" in out
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
])
def test_scenario_file_errors_name_the_key(change, message):
    data = rehearsal_rooms_scenario().to_dict()
    change(data)
    with pytest.raises(ValueError, match=message.replace(".", r"\.")):
        scenario_from_dict(data)


def test_report_command_rejects_a_missing_file(capsys, tmp_path):
    with pytest.raises(SystemExit):
        main(["report", str(tmp_path / "nothing.json")])
    assert "does not exist" in capsys.readouterr().err
