"""Findings in words, each derived from a table by a stated rule (so the text cannot drift
from the numbers)."""

from __future__ import annotations

import math

import pandas as pd

from marketsim.study.result import SE_COLUMNS

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


def coverage_band(replications: int, nominal: float = NOMINAL) -> tuple[float, float]:
    """Central 95% range of the coverage a calibrated interval shows over
    ``replications``: ``scipy.stats.binom.interval(0.95, n, nominal) / n``."""
    from scipy.stats import binom

    low, high = binom.interval(0.95, replications, nominal)
    return float(low) / replications, float(high) / replications


def standard_error_sentence(summary: pd.DataFrame, nominal: float = NOMINAL) -> str:
    """Which standard error to trust for each row, by a stated rule.

    A kind of standard error (naive or batch means, :data:`SE_COLUMNS`) *covers* in a
    row when its interval's coverage is inside :func:`coverage_band`; the one to
    trust is the covering kind whose ratio of mean standard error to the
    estimator's standard deviation is nearest 1 (by ``|log ratio|``); the sentence
    says when a kind nearer the real spread does not cover (the covering one is
    then too wide, which makes up for a bias). When neither covers, the sentence
    names the kind nearest the real spread and says that its intervals still miss
    (coverage is against the truth, so a bias makes every interval miss).

    Parameters
    ----------
    summary : pandas.DataFrame
        A study's summary (one metric).
    nominal : float

    Returns
    -------
    str

    Examples
    --------
    >>> import pandas as pd
    >>> table = pd.DataFrame({"arm": ["a", "b"], "estimator": ["x", "y"],
    ...     "replications": [400, 400], "coverage": [0.99, 0.80],
    ...     "naive_se_ratio": [1.35, 1.0], "batch_coverage": [0.95, 0.81],
    ...     "batch_se_ratio": [1.01, 1.02]})
    >>> print(standard_error_sentence(table))  # doctest: +NORMALIZE_WHITESPACE
    Which standard error to trust (the kind whose 95% intervals cover within the
    binomial band of 95% and whose mean is nearest the estimator's real spread): a, x:
    batch means (coverage 0.95, s.e./sd 1.01; naive 0.99, 1.35). Neither kind covers as
    claimed for b, y (a bias makes every interval miss); the nearest the real spread is
    naive (coverage 0.80, s.e./sd 1.00; batch means 0.81, 1.02).
    """
    trusted, missing = [], []
    for row in summary.to_dict("records"):
        low, high = coverage_band(int(row["replications"]), nominal)
        figures = {kind: (row[columns[2]], row[columns[1]])
                   for kind, columns in SE_COLUMNS.items()
                   if math.isfinite(row[columns[1]]) and row[columns[1]] > 0}
        if not figures:
            continue
        covering = [kind for kind, (c, _) in figures.items() if low <= c <= high]
        best = min(covering or figures, key=lambda kind: abs(math.log(figures[kind][1])))
        others = "; ".join(f"{kind} {c:.2f}, {r:.2f}" for kind, (c, r) in figures.items()
                           if kind != best)
        c, r = figures[best]
        text = f"{best} (coverage {c:.2f}, s.e./sd {r:.2f}" + (f"; {others})" if others
                                                                else ")")
        nearest = min(figures, key=lambda kind: abs(math.log(figures[kind][1])))
        if covering and nearest != best:
            text += (f", whose intervals cover although {nearest} is nearer the real "
                     "spread: its extra width makes up for the bias")
        (trusted if covering else missing).append((f"{row['arm']}, {row['estimator']}",
                                                   text))
    parts = []
    level = f"{nominal:.0%}"
    if trusted:
        parts.append(f"Which standard error to trust (the kind whose {level} intervals "
                     f"cover within the binomial band of {level} and whose mean is nearest "
                     "the estimator's real spread): "
                     + "; ".join(f"{name}: {text}" for name, text in trusted) + ".")
    for name, text in missing:
        parts.append(f"Neither kind covers as claimed for {name} (a bias makes every "
                     f"interval miss); the nearest the real spread is {text}.")
    return " ".join(parts)


__all__ = ["NOMINAL", "coverage_sentence", "coverage_band", "standard_error_sentence"]
