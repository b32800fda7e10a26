"""The benchmark scripts still run (tiny settings): timings are not checked here,
only that each script finishes and prints its ratio, so that they never rot."""

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
BENCHMARKS = ROOT / "benchmarks"


@pytest.mark.parametrize("script, arguments, expected", [
    ("engine_vs_simpy.py", ["--quick", "--repeats", "1"], "cost per event at 1,000,000"),
    ("general_engine.py", ["--events", "2e4", "--large", "10", "--repeats", "1"],
     "daily profile / flat demand cost per event"),
    ("study_workers.py", ["--replications", "4", "--events", "2e4", "--repeats", "1"],
     "speed-up:"),
    ("meanfield_speed.py", ["--repeats", "3"], "Balance sweep, 60 points"),
    ("logging_cost.py", ["--horizon", "100", "--repeats", "1"], "logging on / off ratio"),
    ("calibration_speed.py", ["--sessions", "2e4"], "calibrate:"),
    ("dask_scaling.py", ["--replications", "4", "--events", "2e4", "--tiny", "40",
                         "--repeats", "1"], "scheduling overhead per task"),
    ("store_memory.py", ["--replications", "200"], "peak memory at"),
])
def test_benchmark_script_runs(script, arguments, expected):
    # the package of this checkout, not whichever copy the interpreter has installed
    path = os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH")) if p)
    done = subprocess.run([sys.executable, str(BENCHMARKS / script), *arguments],
                          capture_output=True, text=True, timeout=600, check=False,
                          env={**os.environ, "PYTHONPATH": path})
    assert done.returncode == 0, done.stderr[-2000:]
    assert expected in done.stdout
