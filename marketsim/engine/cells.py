"""Turn a market, a treatment and a design into the cell arrays the models read.

A *customer cell* is a customer type with a treatment status, a *listing cell*
a listing type with a treatment status. Listings inside a cell are
exchangeable, so the state of the market is the number of available listings
per listing cell.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.designs import CellSplit, Design, GlobalControl
from marketsim.model import NO_TREATMENT, Market, Treatment

START_OPTIONS = ("empty", "steady")
"""Named starting states: every listing available, or the large-market steady state."""


@dataclass(frozen=True, eq=False)
class MarketCells:
    """Everything the engine and the large-market model need, per cell.

    Choice weights are scaled per customer cell (dividing by the largest of the
    cell's weights) so that utilities of any size neither overflow nor
    underflow; logit choice depends only on weight ratios.

    Attributes
    ----------
    market, treatment, design : Market, Treatment, Design
        What the cells were built from.
    split : CellSplit
        The design's division of the market into cells.
    arrival_rate : float
        Total customer arrival rate ``Lambda``.
    customer_share : ndarray, shape (n_customer_cells,)
        Probability that an arrival belongs to each customer cell.
    outside_weight : ndarray, shape (n_customer_cells,)
        Scaled weight of the outside option, ``N * exp(u_0)``.
    weight : ndarray, shape (n_customer_cells, n_listing_cells)
        Scaled logit weight ``exp(u)`` of one listing of the cell.
    consideration : ndarray, shape (n_customer_cells, n_listing_cells)
        Probability of considering one available listing of the cell.
    listing_count : ndarray of int, shape (n_listing_cells,)
    release_rate : ndarray, shape (n_listing_cells,)
        Rate ``1 / mean_busy_time`` at which one busy listing becomes available.
    price : ndarray, shape (n_listing_cells,) or None
        Price of one booking, when the market has prices.
    customer_labels, listing_labels : tuple of str
        Readable names such as ``"band | treated"``.
    """

    market: Market
    treatment: Treatment
    design: Design
    split: CellSplit
    arrival_rate: float
    customer_share: np.ndarray
    outside_weight: np.ndarray
    weight: np.ndarray
    consideration: np.ndarray
    listing_count: np.ndarray
    release_rate: np.ndarray
    price: np.ndarray | None
    customer_labels: tuple[str, ...]
    listing_labels: tuple[str, ...]

    @property
    def n_customer_cells(self) -> int:
        """Number of customer cells."""
        return int(self.customer_share.size)

    @property
    def n_listing_cells(self) -> int:
        """Number of listing cells."""
        return int(self.listing_count.size)

    def check_availability(self, values: ArrayLike, *, whole: bool) -> np.ndarray:
        """Check a ``start=`` array: available listings per listing cell.

        Parameters
        ----------
        values : array_like, shape (n_listing_cells,)
            Each between 0 and the cell's size.
        whole : bool
            Require whole numbers (the finite market) or accept any real number
            (the large-market model).

        Returns
        -------
        ndarray of float, shape (n_listing_cells,)
        """
        kind = "whole numbers" if whole else "available listings"
        shape = (self.n_listing_cells,)
        try:
            array = np.asarray(values)
        except ValueError:  # ragged nesting
            array = np.asarray(None)
        if array.shape != shape:
            raise ValueError(
                f"start must be 'empty', 'steady' or {kind} of shape (n_listing_cells,) "
                f"= {shape} ({', '.join(self.listing_labels)}), got shape {array.shape}"
            )
        try:
            if check.first_non_number(array) is not check.ALL_NUMBERS:
                raise ValueError
            numeric = array.astype(float)
        except (TypeError, ValueError):
            raise ValueError(f"start must contain {kind}, got {array.tolist()}") from None
        if whole and not (np.isfinite(numeric) & (numeric % 1 == 0)).all():
            raise ValueError(f"start must contain whole numbers, got {numeric.tolist()}")
        outside = ~np.isfinite(numeric) | (numeric < 0) | (numeric > self.listing_count)
        if outside.any():
            k = int(np.argmax(outside))
            shown = int(numeric[k]) if whole else float(numeric[k])
            raise ValueError(
                f"start must be between 0 and the cell size for every listing cell, got "
                f"{shown!r} for cell {self.listing_labels[k]!r} of size "
                f"{int(self.listing_count[k])}"
            )
        return numeric


    def starting_counts(self, start: str | ArrayLike) -> np.ndarray:
        """Available listings per listing cell at time 0, as a fresh int64 array.

        ``start`` is ``"empty"`` (every listing available) or whole counts per
        listing cell. The warm start ``"steady"`` needs the large-market model,
        which lives above the engine: :func:`marketsim.simulate` and
        :class:`marketsim.Study` resolve it to counts before they get here.
        """
        if isinstance(start, str):
            check.choice("start", start, START_OPTIONS)
            if start == "steady":
                raise ValueError(
                    "start must be 'empty' or counts per listing cell at the engine level, "
                    "got 'steady' (use marketsim.simulate, which resolves the warm start)"
                )
            return self.listing_count.astype(np.int64).copy()
        return self.check_availability(start, whole=True).astype(np.int64)

def build_cells(
    market: Market, treatment: Treatment | None = None, design: Design | None = None
) -> MarketCells:
    """Expand ``market`` into cells under ``design`` with ``treatment``.

    Parameters
    ----------
    market : Market
    treatment : Treatment, optional
        Defaults to no treatment.
    design : Design, optional
        Defaults to :class:`~marketsim.GlobalControl`.

    Returns
    -------
    MarketCells
    """
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    treatment = NO_TREATMENT if treatment is None else treatment
    if not isinstance(treatment, Treatment):
        raise ValueError(
            f"treatment must be a marketsim.Treatment or None, got {type(treatment).__name__}"
        )
    design = GlobalControl() if design is None else design
    if not isinstance(design, Design):
        raise ValueError(
            f"design must be a marketsim.Design (e.g. ms.CustomerSide(0.5)), "
            f"got {type(design).__name__}"
        )
    split = design.split(market)
    if not isinstance(split, CellSplit):
        raise ValueError(
            f"design {design!r}: split(market) must return a marketsim.CellSplit, "
            f"got {type(split).__name__}"
        )
    split.check_market(market, f"design {design!r}")
    treated_utility, treated_consideration, treated_outside = treatment.resolve(market)

    ci, lj = split.customer_type, split.listing_type
    pair_treated = split.customer_treated[:, None] & split.listing_treated[None, :]
    utility = np.where(pair_treated, treated_utility[ci][:, lj], market.utility[ci][:, lj])
    consideration = np.where(
        pair_treated, treated_consideration[ci][:, lj], market.consideration[ci][:, lj]
    )
    outside = np.where(split.customer_treated, treated_outside[ci], market.outside_utility[ci])
    log_outside = np.log(market.n_listings) + outside
    scale = np.maximum(log_outside, utility.max(axis=1))
    status = {True: "treated", False: "control"}
    return MarketCells(
        market=market,
        treatment=treatment,
        design=design,
        split=split,
        arrival_rate=market.arrival_rate,
        customer_share=split.customer_share,
        outside_weight=np.exp(log_outside - scale),
        weight=np.exp(utility - scale[:, None]),
        consideration=consideration,
        listing_count=split.listing_count,
        release_rate=1.0 / market.mean_busy_time[lj],
        price=None if market.price is None else market.price[lj],
        customer_labels=tuple(
            f"{market.customer_types[i]} | {status[bool(t)]}"
            for i, t in zip(ci, split.customer_treated)
        ),
        listing_labels=tuple(
            f"{market.listing_types[j]} | {status[bool(t)]}"
            for j, t in zip(lj, split.listing_treated)
        ),
    )
