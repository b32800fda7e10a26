"""Shared test set-up: draw figures off screen; a quick scenario file for the command line;
start subprocesses that Ctrl-C reaches."""

import json
import signal
import subprocess

import matplotlib
import pytest

from marketsim.model.scenarios import rehearsal_rooms_scenario

matplotlib.use("Agg")


@pytest.fixture
def interruptible():
    """``start(args, **popen_options)``: a subprocess in which SIGINT raises
    ``KeyboardInterrupt``, as at a terminal, however this test run was started.

    A shell starts background jobs with SIGINT ignored, children inherit an ignored
    signal through ``exec``, and Python keeps an ignored SIGINT ignored (it installs
    its handler only over the default). A suite run as a background job would then
    send Ctrl-C to subprocesses that never see it. A handled signal is reset to the
    default by ``exec``, so SIGINT is handled here while the subprocess starts.
    """
    def start(args, **options) -> subprocess.Popen:
        ignored = signal.getsignal(signal.SIGINT) is signal.SIG_IGN
        if ignored:
            signal.signal(signal.SIGINT, signal.default_int_handler)
        try:
            return subprocess.Popen(args, **options)
        finally:
            if ignored:
                signal.signal(signal.SIGINT, signal.SIG_IGN)

    return start


@pytest.fixture(scope="session")
def scenario(tmp_path_factory):
    """The built-in scenario as a file, with a short window (replications of a few
    milliseconds), for the ``study`` and ``sweep`` commands."""
    data = json.loads(rehearsal_rooms_scenario().to_json())
    data["experiment"].update({"horizon": 4.0, "burn_in": 1.0})
    path = tmp_path_factory.mktemp("scenario") / "rooms.json"
    path.write_text(json.dumps(data))
    return path
