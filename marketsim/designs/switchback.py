"""Switchback (time-block) design: the whole market switches between treatment and control.

Time in the measured window is cut into blocks of length ``block_length``; each
block is wholly treated (every customer sees the feature on every listing) or
wholly control. The first ``burn_in`` time units of every block are dropped from
the analysis, because the market carries state (busy listings) across a switch.
The engine runs the schedule piece by piece, each piece exact, and carries the
market's state across the switches (:mod:`marketsim.engine.runner`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from marketsim import _validation as check
from marketsim.designs.base import Design
from marketsim.designs.split import CellSplit
from marketsim.model.market import Market

ASSIGNMENTS = ("random", "alternating")
"""``"random"``: each block treated with probability 1/2, independently (drawn again in
the rare case that every block falls in one group); ``"alternating"``: treated,
control, treated, ... from the first block."""

BLOCK_RESOLUTION = 1e-9
"""A window whose length is within this share of a whole number of blocks has that
many whole blocks (no sliver of a last block from rounding)."""


@dataclass(frozen=True, eq=False)
class BlockSchedule:
    """Which blocks of a switchback's window are treated, and which parts are kept.

    Times are measured from the start of the window (after the run's own burn-in).

    Attributes
    ----------
    starts, ends : ndarray, shape (n_blocks,)
        Start and end of each block; the last block may be shorter than the others
        when the window is not a whole number of blocks.
    kept_starts : ndarray, shape (n_blocks,)
        Start of each block's kept part: ``min(start + burn_in, end)``.
    treated : ndarray of bool, shape (n_blocks,)
    """

    starts: np.ndarray
    ends: np.ndarray
    kept_starts: np.ndarray
    treated: np.ndarray

    @property
    def n_blocks(self) -> int:
        """Number of blocks."""
        return int(self.starts.size)

    @property
    def kept_lengths(self) -> np.ndarray:
        """Length of each block's kept part (0 for a last block shorter than the burn-in)."""
        return self.ends - self.kept_starts

    @property
    def edges(self) -> np.ndarray:
        """Block boundaries, shape (n_blocks + 1,)."""
        return np.append(self.starts, self.ends[-1])

    def pieces(self) -> list[tuple[float, float, bool, int]]:
        """The window as consecutive pieces ``(start, end, treated, block)``: each block's
        burn-in (``block = -1``: not recorded) then its kept part (``block = k``);
        empty pieces are left out."""
        result = []
        for k in range(self.n_blocks):
            treated = bool(self.treated[k])
            if self.kept_starts[k] > self.starts[k]:
                result.append((float(self.starts[k]), float(self.kept_starts[k]), treated, -1))
            if self.ends[k] > self.kept_starts[k]:
                result.append((float(self.kept_starts[k]), float(self.ends[k]), treated, k))
        return result


@dataclass(frozen=True)
class Switchback(Design):
    """Switchback design: time blocks, each wholly treated or wholly control.

    Parameters
    ----------
    block_length : float
        Length of each block, > 0, in the market's time unit. Blocks start at the
        beginning of the measured window (after the run's own burn-in); the window
        must hold at least two blocks.
    burn_in : float
        Time dropped at the start of every block, >= 0 and shorter than
        ``block_length``: the market still carries the previous block's state
        (listings booked under the other arm) then. Choose it in mean busy times:
        after a few of them the carry-over has mostly worn off.
    assignment : {"random", "alternating"}
        ``"random"``: each block is treated with probability 1/2 independently
        (the schedule is drawn again, rarely, if every block falls in one group);
        ``"alternating"``: treated, control, treated, ... from the first block.

    Notes
    -----
    Everyone is treated in a treated block, so the cells of the design are those
    of global treatment; the engine switches the choice weights of the cells
    between the treated and the control market at every block boundary and keeps
    the market's state (available listings, and for general busy times the heap
    of release times). A run records each block's kept part separately
    (:attr:`marketsim.Ledger.blocks`); the switchback estimators
    (:class:`~marketsim.SwitchbackDifference`,
    :class:`~marketsim.SwitchbackHorvitzThompson`) read them.

    With a demand profile, blocks fall at different times of the day: choose the
    horizon in whole periods and, ideally, block lengths that do not divide into
    the period in a way that puts every treated block at the same hours
    (random assignment averages that out).

    References
    ----------
    "Design and analysis of switchback experiments", Management Science (2023);
    "Switchback experiments under geometric mixing" (2022), working paper.

    Examples
    --------
    >>> import marketsim as ms
    >>> ms.Switchback(6.0, burn_in=2.0).label
    'switchback (block 6, burn-in 2, random)'
    >>> ms.Switchback(6.0, burn_in=2.0, assignment="alternating").schedule(
    ...     horizon=24.0).treated.tolist()
    [True, False, True, False]
    """

    block_length: float
    burn_in: float = 0.0
    assignment: str = "random"

    def __post_init__(self) -> None:
        length = check.number("block_length", self.block_length, low=0.0, low_open=True)
        burn_in = check.number("burn_in", self.burn_in, low=0.0)
        if burn_in >= length:
            raise ValueError(
                "burn_in must be shorter than block_length (each block keeps block_length - "
                f"burn_in after its burn-in), got burn_in={burn_in:g} with "
                f"block_length={length:g}"
            )
        object.__setattr__(self, "block_length", length)
        object.__setattr__(self, "burn_in", burn_in)
        object.__setattr__(self, "assignment",
                           check.choice("assignment", self.assignment, ASSIGNMENTS))

    def split(self, market: Market) -> CellSplit:
        """The cells of a treated block: every customer and listing exposed (with a
        warning when alternating blocks fall in step with the market's demand cycle)."""
        self._warn_in_step_with_demand(market)
        return CellSplit.from_fractions(market, customers=1.0, listings=1.0)

    def _warn_in_step_with_demand(self, market: Market) -> None:
        """Warn when alternating blocks give the treated blocks a different share of
        the demand than of the time (over the first 100 blocks): the demand cycle then
        enters the estimate."""
        profile = market.demand
        if self.assignment != "alternating" or profile is None or profile.is_flat:
            return
        starts = np.arange(0, 100, 2) * self.block_length
        treated_demand = sum(profile.cumulative(t + self.block_length) - profile.cumulative(t)
                             for t in starts)
        share = treated_demand / profile.cumulative(100 * self.block_length)
        if abs(share - 0.5) > 0.02:
            warnings.warn(
                f"Switchback: alternating blocks of {self.block_length:g} fall in step with "
                f"the demand profile (period {profile.period:g}): treated blocks get "
                f"{share:.0%} of the demand in half the time, so the demand cycle biases the "
                "estimate; use assignment='random' or blocks of whole periods",
                RuntimeWarning, stacklevel=3)

    @property
    def label(self) -> str:
        return (f"switchback (block {self.block_length:.4g}, burn-in {self.burn_in:.4g}, "
                f"{self.assignment})")

    def check_horizon(self, horizon: float) -> float:
        """``horizon`` if it holds at least two blocks, else a ``ValueError``."""
        horizon = check.number("horizon", horizon, low=0.0, low_open=True)
        if horizon < 2.0 * self.block_length * (1.0 - BLOCK_RESOLUTION):
            raise ValueError(
                f"horizon must hold at least two blocks of the switchback (2 x block_length "
                f"= {2.0 * self.block_length:g}), got horizon={horizon:g}"
            )
        return horizon

    def schedule(self, horizon: float, rng: np.random.Generator | None = None
                 ) -> BlockSchedule:
        """The blocks of a window of length ``horizon`` and their assignment.

        Parameters
        ----------
        horizon : float
            Length of the measured window, at least two blocks.
        rng : numpy.random.Generator, optional
            Draws the random assignment (needed for ``assignment="random"``).

        Returns
        -------
        BlockSchedule
        """
        horizon = self.check_horizon(horizon)
        n = max(2, math.ceil(horizon / self.block_length - BLOCK_RESOLUTION))
        starts = np.arange(n) * self.block_length
        ends = np.minimum(starts + self.block_length, horizon)
        ends[-1] = horizon
        kept_starts = np.minimum(starts + self.burn_in, ends)
        if self.assignment == "alternating":
            treated = np.arange(n) % 2 == 0
        else:
            if rng is None:
                raise ValueError("rng must be a numpy.random.Generator for random "
                                 "assignment, got None")
            kept = ends > kept_starts
            while True:
                treated = rng.random(n) < 0.5
                if treated[kept].any() and not treated[kept].all():
                    break
        for values in (starts, ends, kept_starts, treated):
            values.flags.writeable = False
        return BlockSchedule(starts=starts, ends=ends, kept_starts=kept_starts,
                             treated=treated)


__all__ = ["ASSIGNMENTS", "BlockSchedule", "Switchback"]
