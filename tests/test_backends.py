"""Backends: chunks cover every replication exactly once; a killed worker loses
nothing (local processes and Dask); Dask gives the same tables as local processes
for the same seed (study, sweep, design choice, horizon plan; the command line)."""

from __future__ import annotations

import functools
import multiprocessing
import os
import signal

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import marketsim as ms
from marketsim.cli import main
from marketsim.study import backends, replication

REPLICATE = replication.replicate

distributed = pytest.importorskip("distributed")  # in the test extra, so CI runs these


def study(replication_hours: float = 5.0) -> ms.Study:
    return ms.Study(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
                    arms=[ms.CustomerSide(0.5), ms.ListingSide(0.5)],
                    horizon=replication_hours, burn_in=1.0)


def same(first: ms.StudyResult, second: ms.StudyResult) -> None:
    pd.testing.assert_frame_equal(first.summary, second.summary, check_exact=True)
    pd.testing.assert_frame_equal(first.replications, second.replications, check_exact=True)


@pytest.fixture(scope="module")
def client():
    """One two-worker local cluster for the whole module (it starts in a few seconds)."""
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, \
            distributed.Client(cluster) as connected:
        yield connected


# ------------------------------------------------------------------ chunks
@settings(max_examples=200, deadline=None)
@given(todo=st.lists(st.sets(st.integers(0, 400)).map(sorted), min_size=1, max_size=4),
       workers=st.integers(1, 8), seconds=st.floats(1e-6, 2.0))
def test_chunks_cover_every_replication_once_in_consecutive_runs(todo, workers, seconds):
    chunks = backends.make_chunks(todo, workers, seconds)
    for job, indices in enumerate(todo):
        assert [i for j, r in chunks if j == job for i in r] == list(indices)
    longest = max(1, min(backends.MAX_CHUNK, int(backends.CHUNK_SECONDS / seconds)))
    assert all(1 <= len(r) <= longest and r.step == 1 for _, r in chunks)


# ------------------------------------------------------------------ dead workers
KILLED_AT = 20
"""The replication whose worker process is killed (once) mid-study."""


def kill_a_worker_mid_study(monkeypatch, marker) -> None:
    """Make the worker process that runs replication :data:`KILLED_AT` SIGKILL itself,
    as the kernel's out-of-memory killer would, the first time only (``marker``
    records it). The worker dies holding unfinished work whatever the timing, so the
    loss is certain: killing a worker from outside after the first result raced the
    workers, which could have finished everything by then."""
    monkeypatch.setattr(replication, "replicate", functools.partial(_killed_once, marker=marker))


def _killed_once(plan, root, index, *, marker):
    if index == KILLED_AT and multiprocessing.parent_process() is not None:
        try:
            os.close(os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY))
        except FileExistsError:
            pass  # killed once already: this is the rerun
        else:
            os.kill(os.getpid(), signal.SIGKILL)
    return REPLICATE(plan, root, index)


def test_a_killed_worker_process_loses_nothing(monkeypatch, tmp_path):
    """Two local workers, one killed mid-study: the study finishes with the table of
    an undisturbed run and a warning says what happened."""
    reference = study().run(40, seed=2, progress=False)
    kill_a_worker_mid_study(monkeypatch, tmp_path / "killed")
    with pytest.warns(RuntimeWarning, match="a worker process died .* run again"):
        result = study().run(40, seed=2, workers=2, progress=False)
    assert (tmp_path / "killed").exists()
    same(result, reference)


def test_workers_that_keep_dying_end_the_run_with_a_clear_error(monkeypatch):
    monkeypatch.setattr(backends, "MAX_RETRIES", 1)
    monkeypatch.setattr(replication, "replicate", _die_in_workers)
    with pytest.raises(RuntimeError, match="worker processes kept dying"), \
            pytest.warns(RuntimeWarning, match="a worker process died"):
        study().run(6, seed=2, workers=2, progress=False)


def _die_in_workers(plan, root, index):
    """A replication that kills the worker process running it (not the parent)."""
    if multiprocessing.parent_process() is not None:
        os.kill(os.getpid(), signal.SIGKILL)
    return REPLICATE(plan, root, index)


# ------------------------------------------------------------------ dask
def test_dask_study_equals_local_processes(client):
    local = study().run(16, seed=7, workers=2, progress=False)
    same(study().run(16, seed=7, backend="dask", client=client, progress=False), local)
    address = client.scheduler.address  # an address works as well as a Client
    same(study().run(16, seed=7, backend="dask", client=address, progress=False), local)


def test_dask_sweep_design_choice_and_horizon_plan_equal_local_processes(client):
    market, treatment = ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation()
    options = {"mode": "simulation", "horizon": 4.0, "burn_in": 1.0, "replications": 6,
               "seed": 3, "progress": False}
    arms = [ms.CustomerSide(0.5), ms.TwoSidedFollowingBalance()]
    local = ms.sweep(market, treatment, arms, [0.5, 2.0], **options)
    remote = ms.sweep(market, treatment, arms, [0.5, 2.0], backend="dask", client=client,
                      **options)
    pd.testing.assert_frame_equal(local, remote, check_exact=True)
    candidates = [ms.CustomerSide(0.5), ms.ListingSide(0.5)]
    here = ms.choose_design(market, treatment, horizon=4.0, candidates=candidates,
                            replications=6, seed=3, progress=False)
    there = ms.choose_design(market, treatment, horizon=4.0, candidates=candidates,
                             replications=6, seed=3, progress=False, backend="dask",
                             client=client)
    pd.testing.assert_frame_equal(here.table, there.table, check_exact=True)
    pilots = {"pilot_horizon": 4.0, "burn_in": 1.0, "target_rmse": 0.5, "replications": 6,
              "seed": 3, "progress": False}
    here = ms.plan_horizon(market, treatment, ms.CustomerSide(0.5), **pilots)
    there = ms.plan_horizon(market, treatment, ms.CustomerSide(0.5), backend="dask",
                            client=client, **pilots)
    pd.testing.assert_frame_equal(here.table, there.table, check_exact=True)


def test_a_killed_dask_worker_loses_nothing(client, monkeypatch, tmp_path):
    reference = study().run(40, seed=4, progress=False)
    kill_a_worker_mid_study(monkeypatch, tmp_path / "killed")
    with pytest.warns(RuntimeWarning, match="left the cluster"):
        result = study().run(40, seed=4, backend="dask", client=client, progress=False)
    assert (tmp_path / "killed").exists()
    same(result, reference)
    client.wait_for_workers(2, timeout=60)  # the nanny restarts it for the next tests


def test_the_command_line_runs_on_a_dask_cluster_with_a_store(client, scenario, tmp_path):
    """``marketsim study --dask ADDRESS --store DIR`` gives the table of local processes."""
    run = ["study", scenario, "--replications", 8, "--seed", 3]
    assert main(list(map(str, [*run, "--workers", 2, "--out", tmp_path / "local.csv"]))) == 0
    assert main(list(map(str, [*run, "--dask", client.scheduler.address, "--store",
                               tmp_path / "store", "--out", tmp_path / "dask.csv"]))) == 0
    pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "local.csv"),
                                  pd.read_csv(tmp_path / "dask.csv"), check_exact=True)
    assert ms.StudyResult.from_store(tmp_path / "store").completed == 8


def test_backend_options_are_checked(client):
    with pytest.raises(ValueError, match="backend must be one of"):
        study().run(4, seed=1, backend="cluster", progress=False)
    with pytest.raises(ValueError, match="needs client="):
        study().run(4, seed=1, backend="dask", progress=False)
    with pytest.raises(ValueError, match="client is only for backend='dask'"):
        study().run(4, seed=1, client=client, progress=False)


def test_a_failed_question_about_the_dask_workers_does_not_fail_a_finished_run():
    """The watch over the workers is advisory: when asking the scheduler fails (seen as a
    rare AssertionError inside tornado's write buffer), it warns and the run goes on."""
    from marketsim.study.dask_backend import _WorkerWatch

    class Scheduler:
        def __init__(self) -> None:
            self.calls = 0

        def scheduler_info(self, n_workers: int = -1) -> dict:
            self.calls += 1
            if self.calls > 1:
                raise AssertionError
            return {"workers": {"tcp://a": {}, "tcp://b": {}}}

    watch = _WorkerWatch(Scheduler())
    with pytest.warns(RuntimeWarning, match="could not ask the Dask scheduler"):
        watch.look()
    assert watch.known == {"tcp://a", "tcp://b"} and not watch.gone
