"""Backends: chunks cover every replication exactly once; a killed worker loses
nothing (local processes and Dask); Dask gives the same tables as local processes
for the same seed (study, sweep, design choice)."""

from __future__ import annotations

import multiprocessing
import os
import signal

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import marketsim as ms
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
    longest = max(1, int(backends.CHUNK_SECONDS / seconds))
    assert all(1 <= len(r) <= longest and r.step == 1 for _, r in chunks)


# ------------------------------------------------------------------ dead workers
def kill_a_worker_on_first_progress(monkeypatch, pids) -> list:
    """Make the first progress update (a chunk has finished, others are running) kill
    one worker process with SIGKILL, as the kernel's out-of-memory killer does."""
    killed: list = []

    class KillingBar:
        def __init__(self, *args, **kwargs):
            pass

        def update(self, count):
            if not killed:
                killed.append(pids()[0])
                os.kill(killed[0], signal.SIGKILL)

        def close(self):
            pass

    monkeypatch.setattr(backends, "_progress_bar", KillingBar)
    return killed


def test_a_killed_worker_process_loses_nothing(monkeypatch):
    """Two local workers, one killed mid-study: the study finishes with the table of
    an undisturbed run and a warning says what happened."""
    reference = study().run(40, seed=2, progress=False)
    killed = kill_a_worker_on_first_progress(
        monkeypatch, lambda: [p.pid for p in multiprocessing.active_children()])
    with pytest.warns(RuntimeWarning, match="a worker process died .* run again"):
        result = study().run(40, seed=2, workers=2, progress=False)
    assert killed
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


def test_dask_sweep_and_design_choice_equal_local_processes(client):
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


def test_a_killed_dask_worker_loses_nothing(client, monkeypatch):
    reference = study().run(40, seed=4, progress=False)
    workers = sorted(client.run(os.getpid).values())
    killed = kill_a_worker_on_first_progress(monkeypatch, lambda: workers)
    with pytest.warns(RuntimeWarning, match="left the cluster"):
        result = study().run(40, seed=4, backend="dask", client=client, progress=False)
    assert killed
    same(result, reference)
    client.wait_for_workers(2, timeout=60)  # the nanny restarts it for the next tests


def test_backend_options_are_checked(client):
    with pytest.raises(ValueError, match="backend must be one of"):
        study().run(4, seed=1, backend="cluster", progress=False)
    with pytest.raises(ValueError, match="needs client="):
        study().run(4, seed=1, backend="dask", progress=False)
    with pytest.raises(ValueError, match="client is only for backend='dask'"):
        study().run(4, seed=1, client=client, progress=False)
