"""Smoke test: the package imports and the demo runs (small)."""

from marketsim.cli import main


def test_demo_runs(capsys, tmp_path):
    assert main(["demo", "--replications", "3", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "global treatment effect" in out
    assert "two-sided for balance" in out and "coverage" in out
    assert "Caveat:" in out
    assert (tmp_path / "study.png").stat().st_size > 0
