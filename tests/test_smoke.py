"""Smoke test: the package imports and the demo runs (small)."""

from marketsim.cli import main


def test_demo_runs(capsys):
    assert main(["demo", "--replications", "3"]) == 0
    out = capsys.readouterr().out
    assert "global treatment effect" in out
