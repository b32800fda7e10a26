"""Smoke test: the package imports and the demo runs (small)."""

from marketsim.cli import main


def test_demo_runs(capsys, tmp_path):
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
