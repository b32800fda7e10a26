"""Findings in words, each derived from a table by a stated rule (so the text cannot drift
from the numbers)."""

from __future__ import annotations

import pandas as pd

NOMINAL = 0.95
"""Nominal coverage of the intervals a study scores."""


def _names(rows: pd.DataFrame) -> str:
    return "; ".join(f"{r.arm}, {r.estimator} ({r.coverage:.2f})"
                     for r in rows.itertuples(index=False))


def coverage_sentence(summary: pd.DataFrame, nominal: float = NOMINAL) -> str:
    """Which estimators' nominal intervals cover the truth less (or more) often than claimed.

    A row under-covers when ``coverage + 2 coverage_mc_se < nominal`` and
    over-covers when ``coverage - 2 coverage_mc_se > nominal``; the others are
    within Monte Carlo error of the nominal level.

    Parameters
    ----------
    summary : pandas.DataFrame
        A study's summary (one metric), with ``arm, estimator, coverage,
        coverage_mc_se``.
    nominal : float

    Returns
    -------
    str

    Examples
    --------
    >>> import pandas as pd
    >>> table = pd.DataFrame({"arm": ["a", "b"], "estimator": ["x", "y"],
    ...                       "coverage": [0.80, 0.94], "coverage_mc_se": [0.02, 0.02]})
    >>> print(coverage_sentence(table))  # doctest: +NORMALIZE_WHITESPACE
    The nominal 95% intervals cover the truth less often than claimed for a, x (0.80).
    Within Monte Carlo error of 95%: b, y (0.94).
    """
    margin = 2.0 * summary["coverage_mc_se"]
    under = summary[summary["coverage"] + margin < nominal]
    over = summary[summary["coverage"] - margin > nominal]
    within = summary.drop(index=under.index.union(over.index))
    level = f"{nominal:.0%}"
    parts = []
    if len(under):
        parts.append(f"The nominal {level} intervals cover the truth less often than claimed "
                     f"for {_names(under)}.")
    else:
        parts.append(f"No nominal {level} interval covers the truth significantly less often "
                     "than claimed.")
    if len(over):
        parts.append(f"More often than claimed (conservative): {_names(over)}.")
    if len(within):
        parts.append(f"Within Monte Carlo error of {level}: {_names(within)}.")
    return " ".join(parts)


__all__ = ["NOMINAL", "coverage_sentence"]
