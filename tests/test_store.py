"""Results store: resume runs only what is missing (a study, a horizon plan), refuses
another question, never reads a corrupt chunk as data; a study read back from a store is
the study run."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

import marketsim as ms
from marketsim.study import replication
from marketsim.study.store import describe, question_hash, read_manifest

REPLICATE = replication.replicate


def small_study(arrival_rate: float = 16.0) -> ms.Study:
    market = ms.scenarios.rehearsal_rooms().replace(arrival_rate=arrival_rate)
    return ms.Study(market, ms.scenarios.instant_confirmation(),
                    arms=[ms.CustomerSide(0.5), ms.ListingSide(0.5)], horizon=5.0,
                    burn_in=1.0)


def same(first: ms.StudyResult, second: ms.StudyResult) -> None:
    """Identical tables, bit for bit."""
    pd.testing.assert_frame_equal(first.summary, second.summary, check_exact=True)
    pd.testing.assert_frame_equal(first.replications, second.replications, check_exact=True)
    pd.testing.assert_frame_equal(first.truth, second.truth, check_exact=True)


def chunks(store) -> dict:
    """Chunk file name -> (inode, modification time in ns)."""
    return {p.name: (p.stat().st_ino, p.stat().st_mtime_ns)
            for p in sorted(store.glob("study-*/*.parquet"))}


@pytest.fixture(scope="module")
def reference():
    return small_study().run(12, seed=5, progress=False)


def test_describe_keeps_every_bit_and_every_parameter():
    market = ms.scenarios.rehearsal_rooms()
    assert question_hash(describe(market)) == question_hash(describe(
        ms.scenarios.rehearsal_rooms()))
    nudged = market.replace(arrival_rate=np.nextafter(market.arrival_rate, 100.0))
    assert question_hash(describe(nudged)) != question_hash(describe(market))
    assert describe(ms.TwoSided(0.5, 0.25)) != describe(ms.TwoSided(0.25, 0.5))
    assert describe(ms.TwoSidedCorrected(k=1)) != describe(ms.TwoSidedCorrected(k=2))


def test_a_store_holds_the_study_and_resumes_only_what_is_missing(tmp_path, reference):
    store = tmp_path / "store"
    first = small_study().run(7, seed=5, progress=False, store=store)
    before = chunks(store)
    assert before and first.completed == 7
    again = small_study().run(12, seed=5, progress=False, store=store)
    after = chunks(store)
    # the chunks of the first run are untouched (same files, not rewritten)
    assert all(after[name] == stamp for name, stamp in before.items())
    assert len(after) > len(before)
    same(again, reference)
    same(ms.StudyResult.from_store(store), reference)
    # a third run finds everything: it writes nothing and gives the same tables
    same(small_study().run(12, seed=5, progress=False, store=store), reference)
    assert chunks(store) == after
    # seed=None takes the store's seed
    same(small_study().run(12, progress=False, store=store), reference)
    assert read_manifest(store)["runs"][-1]["replications"] == 12


def test_a_store_made_for_another_question_is_refused(tmp_path):
    store = tmp_path / "store"
    small_study().run(3, seed=5, progress=False, store=store)
    with pytest.raises(ValueError, match=r"another question \(studies\[0\]\.market\."
                                         r"arrival_rate is 16\.0 in the store, 12\.0 here"):
        small_study(arrival_rate=12.0).run(3, seed=5, progress=False, store=store)
    with pytest.raises(ValueError, match="another seed"):
        small_study().run(3, seed=6, progress=False, store=store)
    other = tmp_path / "other"
    other.mkdir()
    (other / "notes.txt").write_text("mine")
    with pytest.raises(ValueError, match="store must be a new or empty folder"):
        small_study().run(3, seed=5, progress=False, store=other)
    with pytest.raises(ValueError, match="store must be a folder path"):
        small_study().run(3, seed=5, progress=False, store=3)


def test_a_corrupt_chunk_is_named_and_recomputed_never_read(tmp_path, reference):
    store = tmp_path / "store"
    small_study().run(12, seed=5, progress=False, store=store)
    victim = sorted(store.glob("study-000/*.parquet"))[-1]
    data = victim.read_bytes()
    victim.write_bytes(data[: len(data) // 2])  # truncated, as by a full disk
    with pytest.warns(RuntimeWarning, match=f"chunk .*{victim.name} is corrupt"):
        again = small_study().run(12, seed=5, progress=False, store=store)
    same(again, reference)
    assert victim.with_name(victim.name + ".corrupt").exists()


def test_a_chunk_of_another_question_is_not_read(tmp_path, reference):
    store = tmp_path / "store"
    small_study().run(12, seed=5, progress=False, store=store)
    other = tmp_path / "other"
    small_study(arrival_rate=12.0).run(4, seed=5, progress=False, store=other)
    stranger = sorted(other.glob("study-000/*.parquet"))[0]
    target = store / "study-000" / stranger.name
    target.write_bytes(stranger.read_bytes())  # a chunk copied in by mistake
    with pytest.warns(RuntimeWarning, match="another question"):
        again = small_study().run(12, seed=5, progress=False, store=store)
    same(again, reference)


def test_store_with_workers_gives_the_same_tables(tmp_path, reference):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = small_study().run(12, seed=5, workers=2, progress=False,
                                   store=tmp_path / "store")
    same(result, reference)


def test_an_interrupted_horizon_plan_resumes_from_its_store(tmp_path, monkeypatch):
    """Ctrl-C after 5 of the 2 x 8 pilot replications; the rerun into the store runs
    only the 11 missing ones and gives the plan of an uninterrupted run."""
    market, treatment = ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation()
    options = {"pilot_horizon": 4.0, "burn_in": 1.0, "target_rmse": 0.5, "replications": 8,
               "seed": 3, "progress": False}
    whole = ms.plan_horizon(market, treatment, ms.CustomerSide(0.5), **options)
    ran = []

    def counted(plan, root, index):
        if len(ran) == 5 and stop:
            raise KeyboardInterrupt
        ran.append(index)
        return REPLICATE(plan, root, index)

    monkeypatch.setattr(replication, "replicate", counted)
    store = tmp_path / "store"
    stop = True
    with pytest.raises(KeyboardInterrupt, match="kept in"):
        ms.plan_horizon(market, treatment, ms.CustomerSide(0.5), store=store, **options)
    stop = False
    ran.clear()
    resumed = ms.plan_horizon(market, treatment, ms.CustomerSide(0.5), store=store, **options)
    assert len(ran) == 2 * 8 - 5
    pd.testing.assert_frame_equal(resumed.table, whole.table, check_exact=True)
