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
    value = _unwrapped(value)
    if isinstance(value, bool) or not isinstance(value, Real):
        raise ValueError(f"{name} must be a finite number{what}, got {_shown(value)}")
    result = float(value)
    if not np.isfinite(result) or not _inside(result, low, high, low_open, high_open):
        raise ValueError(f"{name} must be a finite number{what}, got {_shown(value)}")
    return result


WINDOW_RESOLUTION = 1e-9
"""Shortest horizon, as a multiple of the burn-in, that :func:`window` accepts."""


def window(horizon: object, burn_in: object) -> tuple[float, float]:
    """Return ``(horizon, burn_in)`` checked as a simulation window.

    Besides ``horizon > 0`` and ``burn_in >= 0``, the window must survive
    floating-point rounding: the run ends at ``burn_in + horizon``, so a horizon
    below ``WINDOW_RESOLUTION * burn_in`` would be partly or wholly lost.
    """
    horizon = number("horizon", horizon, low=0.0, low_open=True)
    burn_in = number("burn_in", burn_in, low=0.0)
    if horizon < WINDOW_RESOLUTION * burn_in or not np.isfinite(burn_in + horizon):
        raise ValueError(
            f"horizon must be at least {WINDOW_RESOLUTION:g} times burn_in and burn_in + "
            f"horizon must be finite (else the window is lost to rounding), got "
            f"horizon={horizon!r} with burn_in={burn_in!r}"
        )
    return horizon, burn_in


def whole_number(name: str, value: object, *, low: int = 1) -> int:
    """Return ``value`` as an int ``>= low``."""
    value = _unwrapped(value)
    if isinstance(value, bool) or not isinstance(value, Integral) or value < low:
        raise ValueError(f"{name} must be a whole number >= {low}, got {_shown(value)}")
    return int(value)


ALL_NUMBERS = object()
"""What :func:`first_non_number` returns when every entry is a number."""

_NOT_NUMBERS = (bool, np.bool_, str, bytes, complex, type(None))


def first_non_number(value: object) -> object:
    """The first entry of ``value`` (a number or nested lists / arrays of them) that is
    not a real number, such as a bool, a string, ``None`` or a complex number;
    :data:`ALL_NUMBERS` if there is none.

    numpy would quietly turn ``True`` into 1.0, ``"0.5"`` into 0.5, ``None`` into
    nan and ``1+2j`` into 1.0; the project's rule is to refuse them instead.
    """
    if isinstance(value, np.ndarray):
        if value.dtype.kind in "iuf":
            return ALL_NUMBERS
        if value.dtype.kind != "O":
            return value.flat[0] if value.size else ALL_NUMBERS
        value = value.ravel().tolist()
    if isinstance(value, (list, tuple)):
        for item in value:
            found = first_non_number(item)
            if found is not ALL_NUMBERS:
                return found
        return ALL_NUMBERS
    return value if isinstance(value, _NOT_NUMBERS) else ALL_NUMBERS


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
    shape : tuple of int or None
        Required shape; ``None`` for a length that may be anything.
    shape_text : str
        The shape in words, e.g. ``"(n_customer_types, n_listing_types)"``.
    low, high : float, optional
        Closed bounds every entry must respect (``low`` open if ``low_open``).
    broadcast : bool
        Accept a scalar and repeat it to ``shape``.
    """
    shape_words = shape_text if None in shape else f"{shape_text} = {shape}"
    not_numbers = f"{name} must be an array of numbers of shape {shape_words}, got "
    if first_non_number(value) is not ALL_NUMBERS:
        raise ValueError(not_numbers + _shown(value))
    try:
        values = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(not_numbers + _shown(value)) from None
    if broadcast and values.ndim == 0 and None not in shape:
        values = np.full(shape, float(values))
    if values.ndim != len(shape) or any(
            want is not None and got != want for got, want in zip(values.shape, shape)):
        raise ValueError(f"{name} must have shape {shape_words}, got shape {values.shape}")
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
    try:
        result = tuple(value)
    except TypeError:
        raise ValueError(f"{name} must be a list of {count} names, got {_shown(value)}") \
            from None
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
    return tuple(str(item) for item in result)  # plain str, e.g. from numpy's np.str_


def choice(name: str, value: object, options: Sequence[str]) -> str:
    """Return ``value`` if it is one of ``options``."""
    if not isinstance(value, str) or value not in options:
        listed = ", ".join(repr(o) for o in options)
        raise ValueError(f"{name} must be one of {listed}, got {_shown(value)}")
    return str(value)


def _unwrapped(value: object) -> object:
    """A 0-d numeric array (``np.array(0.5)``) as its number; anything else as is."""
    if isinstance(value, np.ndarray) and value.ndim == 0 and value.dtype.kind in "iuf":
        return value.item()
    return value


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
