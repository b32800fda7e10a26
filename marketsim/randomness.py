"""One randomness story for the whole library.

Every stochastic call takes ``seed``: an int, a :class:`numpy.random.SeedSequence`,
a :class:`numpy.random.Generator` or ``None`` (fresh entropy). Independent runs
get independent streams from :meth:`numpy.random.SeedSequence.spawn`; there is
no global random state.
"""

from __future__ import annotations

from numbers import Integral
from typing import Union

import numpy as np

SeedLike = Union[int, np.random.SeedSequence, np.random.Generator, None]


def seed_sequence(seed: SeedLike) -> np.random.SeedSequence:
    """Turn any accepted ``seed`` into a :class:`numpy.random.SeedSequence`.

    A ``Generator`` is advanced (it supplies the entropy), so passing the same
    generator twice gives two different, independent streams.
    """
    if isinstance(seed, np.random.SeedSequence):
        return seed
    if isinstance(seed, np.random.Generator):
        return np.random.SeedSequence(seed.integers(0, 2**63, size=4).tolist())
    if seed is None:
        return np.random.SeedSequence()
    if isinstance(seed, Integral) and not isinstance(seed, bool) and seed >= 0:
        return np.random.SeedSequence(int(seed))
    raise ValueError(
        "seed must be a whole number >= 0, a numpy.random.SeedSequence, "
        f"a numpy.random.Generator or None, got {seed!r}"
    )


def spawn(seed: SeedLike, count: int) -> list[np.random.SeedSequence]:
    """``count`` independent child seed sequences of ``seed``.

    Unlike :meth:`numpy.random.SeedSequence.spawn`, this does not advance a
    ``SeedSequence`` passed in: child ``k`` always has spawn key
    ``seed.spawn_key + (k,)``, so the same ``SeedSequence`` gives the same
    children every time, as the same int does.
    """
    parent = seed_sequence(seed)
    return [
        np.random.SeedSequence(parent.entropy, spawn_key=(*parent.spawn_key, k),
                               pool_size=parent.pool_size)
        for k in range(count)
    ]


def engine_streams(seed: SeedLike) -> tuple[np.random.Generator, ...]:
    """The three independent generators one simulation run uses.

    Arrivals (times and customer cells), choices (consideration and logit draws)
    and releases each have their own stream. Two runs with the same seed in
    different worlds (global control and global treatment) therefore see the
    same customers arriving at the same times: common random numbers, which
    lowers the Monte Carlo error of their difference.
    """
    return tuple(np.random.Generator(np.random.PCG64(child)) for child in spawn(seed, 3))


def schedule_stream(seed: SeedLike) -> np.random.Generator:
    """The generator that draws a switchback's random assignment of blocks: a fourth
    child of ``seed``, independent of the three :func:`engine_streams` (which it
    leaves unchanged), and the same for every run with this seed."""
    return np.random.Generator(np.random.PCG64(spawn(seed, 4)[3]))
