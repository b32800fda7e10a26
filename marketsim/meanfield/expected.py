"""Expected value and bias of estimators in the large-market limit, one design or a
sweep over balance."""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Union

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from marketsim import _validation as check
from marketsim.designs import Design, Switchback
from marketsim.engine import build_cells
from marketsim.estimators import METRICS, Estimator, default_estimators, design_estimators
from marketsim.meanfield.steady import global_effect, long_run_ledger, require_treatment
from marketsim.meanfield.switchback import switchback_ledger
from marketsim.model import Market, Treatment

DesignLike = Union[Design, Callable[[float], Design]]

def expected_estimates(
    market: Market,
    treatment: Treatment,
    design: Design,
    estimators: Iterable[Estimator] | None = None,
    metric: str = "bookings",
) -> pd.DataFrame:
    """Large-market value of each estimator under ``design``, with its bias.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    design : Design
        The experiment (e.g. ``ms.TwoSided(0.5, 0.5)``).
    estimators : iterable of Estimator, optional
        Default: the design's own estimators that fit it, without repeats
        (:func:`marketsim.estimators.default_estimators`).
    metric : {"bookings", "revenue", "conversion"}

    Returns
    -------
    pandas.DataFrame
        One row per estimator with columns ``design, estimator, metric, balance,
        customer_fraction, listing_fraction, truth, expected_estimate, bias,
        relative_bias``; ``truth`` is the large-market global treatment effect
        (:func:`gte`), ``bias = expected_estimate - truth`` and
        ``relative_bias = bias / truth`` (NaN when the truth is exactly 0).

    Notes
    -----
    With a demand profile, the expected ledger and the truth are averages over
    whole periods of the periodic path (:func:`marketsim.meanfield.periodic_path`).
    A :class:`~marketsim.Switchback` is run through its schedule in the long run
    (:func:`marketsim.meanfield.switchback.switchback_ledger`): its bias is the
    carry-over across switches that the blocks' burn-in did not remove.

    Raises
    ------
    ValueError
        If a given estimator does not fit the design (message from the estimator),
        or, with ``estimators=None``, none of the design's own estimators fits (for
        example ``ListingSide(0.5)`` on a market whose every type has one listing:
        rounding treats them all).

    Examples
    --------
    >>> import marketsim as ms
    >>> table = ms.meanfield.expected_estimates(
    ...     ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3),
    ...     ms.CustomerSide(0.5))
    >>> table[["estimator", "relative_bias"]].round(3).values.tolist()
    [['customer-side', 0.397]]
    """
    check.choice("metric", metric, METRICS)
    require_treatment(treatment)
    if not isinstance(design, Design):
        raise ValueError(
            f"design must be a marketsim.Design (e.g. ms.TwoSided(0.5, 0.5)), "
            f"got {type(design).__name__}"
        )
    chosen = None if estimators is None else _estimator_list(estimators)
    truth = global_effect(market, treatment, metric)
    rows = _estimate_rows(market, treatment, design, design.label, chosen, metric, truth,
                          strict=True)
    return pd.DataFrame(rows, columns=ESTIMATE_COLUMNS)


ESTIMATE_COLUMNS = [
    "design", "estimator", "metric", "balance", "customer_fraction", "listing_fraction",
    "truth", "expected_estimate", "bias", "relative_bias",
]


def sweep_balance(
    market: Market,
    treatment: Treatment,
    designs: DesignLike | Sequence[DesignLike] | Mapping[str, DesignLike],
    balances: ArrayLike,
    estimators: Iterable[Estimator] | None = None,
    metric: str = "bookings",
) -> pd.DataFrame:
    """Large-market bias of several designs and estimators over a range of balances.

    The arrival rate is rescaled to each balance (:meth:`Market.with_balance`);
    everything else stays as in ``market``.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    designs : Design, callable, or a list or dict of them
        A :class:`~marketsim.Design` (:class:`~marketsim.TwoSidedFollowingBalance`
        follows balance by itself), or a callable ``balance -> Design``
        (``ms.TwoSided.for_balance`` can be passed as it is). A dict gives each
        design its label in the table; otherwise the label is the design's
        :attr:`~marketsim.Design.label` or the callable's name.
    balances : array_like of float
        Balances to visit, each > 0.
    estimators : iterable of Estimator, optional
        Default: the design's own estimators that fit it at that balance
        (:func:`marketsim.estimators.default_estimators`).
        A given estimator is left out at balances where it does not fit the design
        (e.g. a listing-side estimator once ``for_balance`` treats every listing).
    metric : {"bookings", "revenue", "conversion"}

    Returns
    -------
    pandas.DataFrame
        Columns as :func:`expected_estimates`, one row per balance x design x
        estimator; ``balance`` holds the values of ``balances`` as given;
        ``customer_fraction`` and ``listing_fraction`` are the treated
        shares the design realised at that balance.

    Examples
    --------
    >>> import marketsim as ms
    >>> table = ms.meanfield.sweep_balance(
    ...     ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3),
    ...     [ms.CustomerSide(0.5), ms.ListingSide(0.5)], balances=[0.1, 1.0, 10.0])
    >>> table.pivot(index="balance", columns="design",
    ...             values="relative_bias").round(2)  # doctest: +NORMALIZE_WHITESPACE
    design   customer-side (a_C=0.5)  listing-side (a_L=0.5)
    balance
    0.1                         0.03                    1.29
    1.0                         0.47                    0.52
    10.0                       11.30                    0.01
    """
    check.choice("metric", metric, METRICS)
    require_treatment(treatment)
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    labelled = _labelled_designs(designs)
    grid = np.atleast_1d(np.asarray(balances, dtype=object))
    if grid.ndim != 1 or grid.size == 0:
        raise ValueError(f"balances must be a non-empty list of numbers > 0, got {balances!r}")
    values = [check.number(f"balances[{k}]", b, low=0.0, low_open=True)
              for k, b in enumerate(grid)]
    chosen = None if estimators is None else _estimator_list(estimators)
    rows: list[dict] = []
    for balance in values:
        at = market.with_balance(balance)
        truth = global_effect(at, treatment, metric)
        for label, design in labelled:
            concrete = design(balance) if not isinstance(design, Design) else design
            if not isinstance(concrete, Design):
                raise ValueError(
                    f"design {label!r} must return a marketsim.Design for a balance, got "
                    f"{type(concrete).__name__} at balance {balance:g}"
                )
            rows.extend(_estimate_rows(at, treatment, concrete, label, chosen, metric,
                                       truth, strict=False, balance=balance))
    return pd.DataFrame(rows, columns=ESTIMATE_COLUMNS)

def _estimator_list(estimators: Iterable[Estimator]) -> list[Estimator]:
    if isinstance(estimators, Estimator):
        return [estimators]
    chosen = list(estimators)
    for item in chosen:
        if not isinstance(item, Estimator):
            raise ValueError(
                "estimators must be marketsim.Estimator objects (e.g. ms.TwoSidedNaive()), "
                f"got {type(item).__name__}"
            )
    if not chosen:
        raise ValueError("estimators must name at least one estimator, got an empty list")
    return chosen


def _labelled_designs(designs: object) -> list[tuple[str, DesignLike]]:
    if isinstance(designs, Mapping):
        items = [(str(k), v) for k, v in designs.items()]
    elif isinstance(designs, Design) or callable(designs):
        items = [(None, designs)]
    elif isinstance(designs, (str, bytes)) or not isinstance(designs, Iterable):
        raise ValueError(
            "designs must be a marketsim.Design, a callable balance -> Design, or a list or "
            f"dict of them, got {type(designs).__name__}"
        )
    else:
        items = [(None, d) for d in designs]
    if not items:
        raise ValueError("designs must name at least one design, got none")
    labelled = []
    for label, design in items:
        if not isinstance(design, Design) and not callable(design):
            raise ValueError(
                "designs must be marketsim.Design objects or callables balance -> Design "
                f"(e.g. ms.TwoSided.for_balance), got {type(design).__name__}"
            )
        if label is None:
            label = design.label if isinstance(design, Design) else _callable_name(design)
        labelled.append((label, design))
    names = [label for label, _ in labelled]
    if len(set(names)) != len(names):
        raise ValueError(f"designs must have distinct labels (pass a dict), got {names}")
    return labelled


def _callable_name(function: Callable) -> str:
    return getattr(function, "__qualname__", None) or getattr(function, "__name__", None) \
        or repr(function)


def _estimate_rows(market: Market, treatment: Treatment, design: Design, label: str,
                   estimators: list[Estimator] | None, metric: str, truth: float,
                   *, strict: bool, balance: float | None = None) -> list[dict]:
    cells = build_cells(market, treatment, design)
    ledger = (switchback_ledger(cells) if isinstance(design, Switchback)
              else long_run_ledger(cells))
    split = cells.split
    if estimators is None:
        estimators = list(default_estimators(design, market))
        if not estimators and strict:
            reasons = []
            for estimator in design_estimators(design):
                try:
                    estimator.fits(design, market)
                except ValueError as error:
                    reasons.append(str(error))
            raise ValueError(
                f"design {label!r} has no estimator that fits it in this market "
                f"({'; '.join(reasons) or 'it names none'}); pass estimators=[...] or use "
                "another design"
            )
    rows = []
    for estimator in estimators:
        try:
            estimator.fits(design, market)
            value = estimator.estimate(ledger, metric).value
        except ValueError:
            if strict:
                raise
            continue
        bias = value - truth
        rows.append({
            "design": label,
            "estimator": estimator.name,
            "metric": metric,
            "balance": market.balance if balance is None else balance,
            "customer_fraction": split.customer_fraction,
            "listing_fraction": split.listing_fraction,
            "truth": truth,
            "expected_estimate": value,
            "bias": bias,
            "relative_bias": bias / truth if truth != 0.0 else math.nan,
        })
    return rows


__all__ = ["DesignLike", "ESTIMATE_COLUMNS", "expected_estimates", "sweep_balance"]
