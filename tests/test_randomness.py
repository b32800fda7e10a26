"""One randomness story: seeds, reproducibility and independent streams."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

import marketsim as ms
from marketsim.randomness import engine_streams, seed_sequence, spawn

MARKET = ms.scenarios.rehearsal_rooms()
RUN = dict(horizon=30.0, burn_in=2.0, bins=3)
ARRAYS = ("bookings", "arrivals", "mean_available", "final_available", "bin_bookings",
          "bin_arrivals")


def run(seed, design=None, treatment=None) -> ms.Ledger:
    return ms.simulate(MARKET, treatment, design, seed=seed, **RUN)


def identical(a: ms.Ledger, b: ms.Ledger) -> bool:
    return a.events == b.events and all(
        np.array_equal(getattr(a, name), getattr(b, name)) for name in ARRAYS)


SEED_MESSAGE = ("seed must be a whole number >= 0, a numpy.random.SeedSequence, "
                "a numpy.random.Generator or None, got ")


@pytest.mark.parametrize(
    "seed",
    [0, 7, 2**70, np.int64(5), np.random.SeedSequence(3), np.random.default_rng(3), None],
    ids=["zero", "int", "big-int", "numpy-int", "SeedSequence", "Generator", "None"],
)
def test_accepted_seeds(seed):
    ledger = run(seed)
    assert ledger.arrivals.sum() > 0
    assert isinstance(seed_sequence(seed), np.random.SeedSequence)


@pytest.mark.parametrize(
    ("seed", "shown"),
    [(-1, "-1"), ("42", "'42'"), (1.5, "1.5"), (3.0, "3.0"), (True, "True"),
     ([1, 2], "[1, 2]")],
)
def test_rejected_seeds(seed, shown):
    with pytest.raises(ValueError, match=re.escape(SEED_MESSAGE + shown)):
        run(seed)
    with pytest.raises(ValueError, match=re.escape(SEED_MESSAGE + shown)):
        spawn(seed, 2)


def test_same_int_seed_same_ledger():
    assert identical(run(11), run(11))
    assert identical(run(np.int64(11)), run(11))


def test_different_seeds_differ():
    ledgers = [run(seed) for seed in range(5)]
    for a in range(5):
        for b in range(a + 1, 5):
            assert not identical(ledgers[a], ledgers[b])


def test_seed_sequence_is_reused_as_is():
    sequence = np.random.SeedSequence(123)
    assert seed_sequence(sequence) is sequence
    assert identical(run(np.random.SeedSequence(123)), run(sequence))
    # an int seed is the SeedSequence of that int
    assert identical(run(123), run(np.random.SeedSequence(123)))


def test_generator_seed():
    # generators in the same state give the same ledger ...
    assert identical(run(np.random.default_rng(9)), run(np.random.default_rng(9)))
    # ... and one generator passed twice is advanced, giving two different runs
    rng = np.random.default_rng(9)
    assert not identical(run(rng), run(rng))


def test_none_seed_uses_fresh_entropy():
    assert not identical(run(None), run(None))


def test_spawn_is_reproducible_and_distinct():
    children = spawn(5, 4)
    again = spawn(5, 4)
    assert [c.spawn_key for c in children] == [(0,), (1,), (2,), (3,)]
    for a, b in zip(children, again):
        assert a.entropy == b.entropy and a.spawn_key == b.spawn_key
        assert np.array_equal(a.generate_state(4), b.generate_state(4))
    states = {tuple(c.generate_state(4).tolist()) for c in children}
    assert len(states) == 4
    ledgers = [run(child) for child in children]
    assert all(not identical(ledgers[0], other) for other in ledgers[1:])


def test_engine_streams_are_independent():
    """The arrival, choice and release streams of one run are distinct; their
    uniforms are uncorrelated (|r| < 4 / sqrt(n), the null standard error of a
    correlation coefficient being about 1 / sqrt(n))."""
    streams = engine_streams(2024)
    assert len(streams) == 3
    n = 20_000
    draws = np.array([stream.random(n) for stream in streams])
    correlation = np.corrcoef(draws)
    off_diagonal = correlation[~np.eye(3, dtype=bool)]
    assert np.all(np.abs(off_diagonal) < 4.0 / math.sqrt(n))
    # and reproducible
    again = np.array([stream.random(n) for stream in engine_streams(2024)])
    assert np.array_equal(draws, again)


def test_spawned_replications_are_uncorrelated():
    """Booking counts of runs with spawned seeds behave like independent draws:
    the lag-1 correlation of 200 replications is within 4 / sqrt(200)."""
    counts = np.array([
        ms.simulate(MARKET, horizon=5.0, seed=child).bookings.sum()
        for child in spawn(77, 200)
    ], dtype=float)
    assert counts.std() > 0
    lag_one = np.corrcoef(counts[:-1], counts[1:])[0, 1]
    assert abs(lag_one) < 4.0 / math.sqrt(200)


def test_common_random_numbers_across_worlds():
    """Same seed in global control and global treatment: the same customers
    arrive at the same times (the arrival stream does not depend on choices)."""
    control = run(31, ms.GlobalControl())
    treated = run(31, ms.GlobalTreatment(), ms.Treatment(utility_shift=0.5))
    np.testing.assert_array_equal(control.arrivals, treated.arrivals)
    np.testing.assert_array_equal(control.bin_arrivals, treated.bin_arrivals)
    assert not np.array_equal(control.bookings, treated.bookings)


def test_reused_seed_sequence_gives_the_same_streams():
    """A SeedSequence passed twice is not advanced: same streams, like an int."""
    sequence = np.random.SeedSequence(2024)
    first = [g.random() for g in engine_streams(sequence)]
    second = [g.random() for g in engine_streams(sequence)]
    assert first == second
    assert [c.spawn_key for c in spawn(sequence, 2)] == [(0,), (1,)]
