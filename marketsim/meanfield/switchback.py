"""A switchback's expected estimates in a large market: the ODE run through the schedule.

In a large market the state (the available share of each listing cell) follows
the ODE of :mod:`marketsim.meanfield`; a switchback switches the ODE's choice
weights between the treated and the control market at every block boundary,
and the state carries over. What the market carries across a switch is the
carry-over that biases the switchback estimators; running the ODE through the
schedule measures it without simulation.

- ``assignment="alternating"``: the schedule is followed exactly (treated,
  control, treated, ...) after warm-up blocks that let the start be forgotten;
  with flat demand the path is then periodic over two blocks and two recorded
  blocks give the exact long-run value.
- ``assignment="random"``: the state at a block's start depends on the
  earlier blocks' assignments but not on the block's own (drawn independently),
  so the long-run mean of a treated block is the mean, over the stationary law
  of block-start states, of the treated block run from that state (and the same
  for control). That law is sampled by one long random schedule (fixed seed);
  at every block start *both* a treated and a control block are run from the
  same state (paired), and the schedule goes on with the arm drawn. The pairing
  removes most of the sampling noise: over 50 recorded blocks the value moves
  by well under 1% of the effect between seeds (``tests/test_switchback.py``).

The estimators apply unchanged to the expected ledger this returns (its blocks
are the recorded ones; for random assignment each block start appears twice,
treated then control).
"""

from __future__ import annotations

import math

import numpy as np

from marketsim.designs import BlockSchedule, GlobalControl, Switchback
from marketsim.engine import Ledger, MarketCells, build_cells
from marketsim.meanfield.periodic import flow_through
from marketsim.meanfield.solver import FlowModel

RECORDED_BLOCKS = 50
"""Blocks recorded for random assignment, or under a demand profile."""
WARM_UP_RELAXATION = 20.0
"""Warm-up blocks cover at least this many slowest mean busy times (``exp(-20)`` of
the start remains)."""
MAX_WARM_UP_BLOCKS = 2000


def switchback_ledger(cells: MarketCells, *, blocks: int = RECORDED_BLOCKS,
                      seed: int = 0) -> Ledger:
    """The large-market expected ledger of a switchback design in the long run.

    Parameters
    ----------
    cells : MarketCells
        Cells of a market under a :class:`~marketsim.Switchback` design.
    blocks : int
        Block starts recorded (random assignment, or any assignment under a
        demand profile), >= 2.
    seed : int
        Seed of the long random schedule (random assignment).

    Returns
    -------
    Ledger
        Expected counts per recorded block's kept part (``blocks`` set); see the
        module notes.
    """
    design = cells.design
    if not isinstance(design, Switchback):
        raise ValueError(f"cells must be those of a switchback design, got {design!r}")
    if isinstance(blocks, bool) or not isinstance(blocks, int) or blocks < 2:
        raise ValueError(f"blocks must be a whole number >= 2, got {blocks!r}")
    control = build_cells(cells.market, cells.treatment, GlobalControl())
    models = {True: FlowModel.of(cells), False: FlowModel.of(control)}
    profile = cells.market.demand
    flat = profile is None or profile.is_flat
    length, burn_in = design.block_length, design.burn_in
    slowest = float(models[True].tau.min())
    warm = min(MAX_WARM_UP_BLOCKS,
               max(2, 2 * math.ceil(WARM_UP_RELAXATION / (slowest * length) / 2)))
    random = design.assignment == "random"
    recorded = blocks if (random or not flat) else 2
    rng = np.random.default_rng(seed)
    s = models[False].rho.astype(float).copy()
    rows: list[tuple[bool, np.ndarray, np.ndarray]] = []
    for k in range(warm + recorded):
        start = k * length
        drawn = bool(rng.random() < 0.5) if random else k % 2 == 0
        arms = (True, False) if (random and k >= warm) else (drawn,)
        following = s
        for arm in arms:
            end, bookings, arrivals = flow_through(models[arm], s, start, start + length,
                                                   profile, count_from=start + burn_in)
            if k >= warm:
                rows.append((arm, bookings, arrivals))
            if arm == drawn:
                following = end
        s = following
    n = len(rows)
    starts = np.arange(n) * length
    schedule = BlockSchedule(starts=starts, ends=starts + length,
                             kept_starts=starts + burn_in,
                             treated=np.array([arm for arm, _, _ in rows]))
    bin_bookings = np.stack([b for _, b, _ in rows])
    bin_arrivals = np.stack([a for _, _, a in rows])
    window = n * (length - burn_in)
    return Ledger(
        cells=cells, bookings=bin_bookings.sum(axis=0), arrivals=bin_arrivals.sum(axis=0),
        window=window, mean_available=s * models[True].n,
        final_available=np.clip(np.rint(s * models[True].n).astype(np.int64), 0,
                                cells.listing_count),
        events=0, bin_edges=schedule.edges, bin_bookings=bin_bookings,
        bin_arrivals=bin_arrivals, engine="large-market", blocks=schedule)


__all__ = ["RECORDED_BLOCKS", "WARM_UP_RELAXATION", "switchback_ledger"]
