"""Long horizons in words: a value in the scenario's time unit, and in larger units."""

from __future__ import annotations

import math

SECONDS = {"second": 1.0, "minute": 60.0, "hour": 3600.0, "day": 86400.0,
           "week": 7 * 86400.0, "year": 365.25 * 86400.0}
"""Length of each known time unit in seconds (a year is 365.25 days)."""

SMALLEST = {"minute": 1.0, "hour": 1.0, "day": 1.0, "week": 2.0, "year": 1.0}
"""A larger unit is used once the duration is at least this many of it
(so 10 days stay days, 14 days become 2 weeks)."""


def _unit_name(unit: str) -> str:
    name = unit.strip().lower()
    return name[:-1] if name.endswith("s") and name[:-1] in SECONDS else name


def _plural(unit: str, value: float) -> str:
    return unit if value == 1.0 or unit.endswith("s") else f"{unit}s"


def _number(value: float) -> str:
    return f"{value:,.0f}" if abs(value) >= 10 else f"{value:.2g}"


def readable_duration(value: float, unit: str) -> str:
    """A duration in ``unit``, followed by the largest sensible larger unit.

    Parameters
    ----------
    value : float
        The duration in ``unit`` (NaN and infinity are written as they are).
    unit : str
        The scenario's time unit (``"hour"``, ``"minute"``, ``"day"``, ...); an
        unknown unit is written without conversion.

    Returns
    -------
    str

    Examples
    --------
    >>> readable_duration(12680.0, "hour")
    '12,680 hours (about 1.4 years)'
    >>> readable_duration(336.0, "hour")
    '336 hours (about 2 weeks)'
    >>> readable_duration(84.0, "hour")
    '84 hours (about 3.5 days)'
    >>> readable_duration(5.0, "hour")
    '5 hours'
    >>> readable_duration(40.0, "shift")
    '40 shifts'
    """
    text = f"{_number(value)} {_plural(unit, value)}"
    name = _unit_name(unit)
    if not math.isfinite(value) or name not in SECONDS:
        return text
    seconds = value * SECONDS[name]
    larger = [u for u in SECONDS if SECONDS[u] > SECONDS[name]
              and abs(seconds) / SECONDS[u] >= SMALLEST[u]]
    if not larger:
        return text
    bigger = larger[-1]
    amount = float(f"{seconds / SECONDS[bigger]:.2g}")
    shown = f"{amount:g}" if amount < 1000 else f"{amount:,.0f}"
    return f"{text} (about {shown} {_plural(bigger, amount)})"


__all__ = ["readable_duration"]
