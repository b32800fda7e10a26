"""Checks shared by every public constructor.

Each helper raises ``ValueError`` with a message that names the parameter, says
what it must be and shows what it got, for example
``arrival_rate must be a finite number > 0, got -3.0``.
"""

from __future__ import annotations

from collections.abc import Sequence
from numbers import Integral, Real

import numpy as np


def _shown(value: object) -> str:
    """Short text of a value for an error message."""
    text = repr(value.tolist() if isinstance(value, (np.ndarray, np.generic)) else value)
    return text if len(text) <= 80 else text[:77] + "..."


def number(
    name: str,
    value: object,
    *,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    high_open: bool = False,
) -> float:
    """Return ``value`` as a finite float inside the given bounds.

    Parameters
    ----------
    name : str
        Parameter name used in the error message.
    value : object
        The value to check.
    low, high : float, optional
        Bounds; ``None`` means unbounded on that side.
    low_open, high_open : bool
        Whether the bound itself is excluded.

    Returns
    -------
    float
    """
    what = _bounds_text(low, high, low_open, high_open)
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"{name} must be a finite number{what}, got {_shown(value)}")
    result = float(value)
    if not np.isfinite(result) or not _inside(result, low, high, low_open, high_open):
        raise ValueError(f"{name} must be a finite number{what}, got {_shown(value)}")
    return result


def whole_number(name: str, value: object, *, low: int = 1) -> int:
    """Return ``value`` as an int ``>= low``."""
    if isinstance(value, bool) or not isinstance(value, Integral) or value < low:
        raise ValueError(f"{name} must be a whole number >= {low}, got {_shown(value)}")
    return int(value)


def array(
    name: str,
    value: object,
    shape: tuple[int, ...],
    shape_text: str,
    *,
    low: float | None = None,
    high: float | None = None,
    low_open: bool = False,
    broadcast: bool = False,
) -> np.ndarray:
    """Return ``value`` as a read-only float array of ``shape``.

    Parameters
    ----------
    name : str
        Parameter name used in error messages.
    value : array_like
        The values to check.
    shape : tuple of int
        Required shape.
    shape_text : str
        The shape in words, e.g. ``"(n_customer_types, n_listing_types)"``.
    low, high : float, optional
        Closed bounds every entry must respect (``low`` open if ``low_open``).
    broadcast : bool
        Accept a scalar and repeat it to ``shape``.
    """
    try:
        values = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(
            f"{name} must be an array of numbers of shape {shape_text} = {shape}, "
            f"got {_shown(value)}"
        ) from None
    if broadcast and values.ndim == 0:
        values = np.full(shape, float(values))
    if values.shape != shape:
        raise ValueError(
            f"{name} must have shape {shape_text} = {shape}, got shape {values.shape}"
        )
    what = _bounds_text(low, high, low_open, False)
    bad = ~np.isfinite(values)
    if low is not None:
        bad |= (values <= low) if low_open else (values < low)
    if high is not None:
        bad |= values > high
    if bad.any():
        where = tuple(int(i) for i in np.argwhere(bad)[0])
        raise ValueError(
            f"{name} must contain finite numbers{what}, got {_shown(values[where])} at index "
            f"{where if len(where) > 1 else where[0]}"
        )
    values = values.copy()
    values.flags.writeable = False
    return values


def names(name: str, value: Sequence[str] | None, count: int, default: str) -> tuple[str, ...]:
    """Return ``count`` distinct, non-empty type names (``default 0``, ... if ``None``)."""
    if value is None:
        return tuple(f"{default} {k}" for k in range(count))
    if isinstance(value, str):
        raise ValueError(f"{name} must be a list of {count} names, got the string {value!r}")
    result = tuple(value)
    if len(result) != count:
        raise ValueError(f"{name} must name all {count} types, got {len(result)} names")
    for item in result:
        if not isinstance(item, str) or not item.strip():
            raise ValueError(f"{name} must contain non-empty strings, got {_shown(item)}")
    seen: set[str] = set()
    for item in result:
        if item in seen:
            raise ValueError(f"{name} must not repeat a name, got {item!r} twice")
        seen.add(item)
    return result


def choice(name: str, value: object, options: Sequence[str]) -> str:
    """Return ``value`` if it is one of ``options``."""
    if value not in options:
        listed = ", ".join(repr(o) for o in options)
        raise ValueError(f"{name} must be one of {listed}, got {_shown(value)}")
    return str(value)


def _inside(x: float, low, high, low_open: bool, high_open: bool) -> bool:
    if low is not None and (x <= low if low_open else x < low):
        return False
    return not (high is not None and (x >= high if high_open else x > high))


def _bounds_text(low, high, low_open: bool, high_open: bool) -> str:
    parts = []
    if low is not None:
        parts.append(f"{'>' if low_open else '>='} {low:g}")
    if high is not None:
        parts.append(f"{'<' if high_open else '<='} {high:g}")
    if len(parts) == 2:
        lo_bracket = "(" if low_open else "["
        hi_bracket = ")" if high_open else "]"
        return f" in {lo_bracket}{low:g}, {high:g}{hi_bracket}"
    return f" {parts[0]}" if parts else ""
