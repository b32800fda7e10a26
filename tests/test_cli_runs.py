"""`marketsim study` and `marketsim sweep`: kill and resume, Ctrl-C, limits, exit codes.

A run killed with SIGKILL mid-way (no chance to clean up) and resumed into the
same store must give the table of an uninterrupted run with the same seed.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from marketsim.cli import main

ROOT = Path(__file__).resolve().parent.parent


def command(*arguments: object) -> list[str]:
    return [sys.executable, "-m", "marketsim", *map(str, arguments)]


def start(interruptible, *arguments: object) -> subprocess.Popen:
    return interruptible(command(*arguments), cwd=ROOT, stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, text=True)


def stop_when_stored(process: subprocess.Popen, store: Path, how: int, chunks: int = 3) -> None:
    """Send signal ``how`` once ``chunks`` chunk files are in the store (mid-run; the
    first two hold the one replication each that runs before the others)."""
    deadline = time.monotonic() + 120
    while len(list(store.glob("study-*/*.parquet"))) < chunks:
        assert process.poll() is None, "the run ended before it could be stopped"
        assert time.monotonic() < deadline, "no chunk appeared in the store"
        time.sleep(0.005)
    assert process.poll() is None, "the run ended before it could be stopped"
    os.kill(process.pid, how)


def tables_equal(first: Path, second: Path) -> None:
    pd.testing.assert_frame_equal(pd.read_csv(first), pd.read_csv(second), check_exact=True)


@pytest.mark.parametrize("kind, extra, again", [
    # the study is resumed without --replications and --seed: the store's are taken
    ("study", ["--replications", 250, "--seed", 11], []),
    ("sweep", ["--replications", 100, "--seed", 11, "--values", 0.5, 2.0],
     ["--values", 0.5, 2.0]),
])
def test_a_killed_run_resumed_gives_the_uninterrupted_table(tmp_path, scenario, kind, extra,
                                                             again, interruptible):
    store = tmp_path / "store"
    process = start(interruptible, kind, scenario, *extra, "--store", store)
    stop_when_stored(process, store, signal.SIGKILL)
    process.wait(timeout=60)
    assert process.returncode == -signal.SIGKILL
    # resumed and uninterrupted runs here, in this process (quicker than a subprocess)
    assert main(list(map(str, [kind, scenario, *again, "--store", store, "--resume",
                               "--out", tmp_path / "resumed.csv"]))) == 0
    assert main(list(map(str, [kind, scenario, *extra, "--out", tmp_path / "whole.csv"]))) == 0
    tables_equal(tmp_path / "resumed.csv", tmp_path / "whole.csv")


def test_ctrl_c_exits_130_and_keeps_what_finished(tmp_path, scenario, interruptible):
    store = tmp_path / "store"
    process = start(interruptible, "study", scenario, "--replications", 600, "--store", store)
    stop_when_stored(process, store, signal.SIGINT)
    _, errors = process.communicate(timeout=60)
    assert process.returncode == 130, errors[-2000:]
    assert "run the same command with --resume" in errors
    assert list(store.glob("study-000/*.parquet"))


def test_usage_errors_exit_2_and_run_nothing(tmp_path, scenario, capsys):
    store = tmp_path / "store"
    for arguments in (["--resume"], ["--resume", "--store", store],
                      ["--replications", 1], ["--workers", 0]):
        with pytest.raises(SystemExit) as stopped:
            main(["study", str(scenario), *map(str, arguments)])
        assert stopped.value.code == 2
    assert not store.exists()
    assert main(["study", str(scenario), "--replications", "3", "--store", str(store)]) == 0
    with pytest.raises(SystemExit) as stopped:  # a store is never overwritten by accident
        main(["study", str(scenario), "--replications", "3", "--store", str(store)])
    assert stopped.value.code == 2
    assert "add --resume" in capsys.readouterr().err
    with pytest.raises(SystemExit) as stopped:  # another question
        main(["sweep", str(scenario), "--values", "1", "--store", str(store), "--resume"])
    assert stopped.value.code == 2
    assert "holds a study, not a sweep" in capsys.readouterr().err


@pytest.mark.parametrize("kind, extra", [("study", []), ("sweep", ["--values", 0.5, 2.0])])
def test_a_run_over_its_limits_exits_3_with_the_estimate(tmp_path, scenario, kind, extra,
                                                         capsys):
    run = [kind, scenario, *extra, "--replications", 100_000]
    assert main(list(map(str, [*run, "--max-events", 1000]))) == 3
    assert f"refused: this {kind} would simulate about" in capsys.readouterr().err
    store = tmp_path / "store"
    assert main(list(map(str, [*run, "--max-seconds", 1, "--store", store]))) == 3
    told = capsys.readouterr().err
    assert "max_seconds=1" in told and f"kept in {str(store)!r}" in told
    with pytest.raises(SystemExit) as stopped:
        main(list(map(str, [*run, "--max-events", 0])))
    assert stopped.value.code == 2
