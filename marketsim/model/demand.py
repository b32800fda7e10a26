"""Demand that follows the clock: the arrival rate as a profile over a repeating period.

A :class:`DemandProfile` cuts a period (a day, a week) into pieces and gives
each piece a rate multiplier; the profile repeats for as long as the run lasts,
and time 0 of a run is the start of a period (for a daily profile in hours:
midnight). The arrival rate at time ``t`` is ``arrival_rate * m(t mod period)``.

**Normalisation.** The multipliers are relative: they are divided by their
time-weighted mean over the period, so that they average 1. The market's
``arrival_rate`` therefore stays the *mean* arrival rate over a period, and its
``balance`` keeps its meaning (mean arrivals over release capacity). Give the
shape in any units you like, for example the sessions counted in each hour of
a typical day.

A one-off schedule (the rate changes at given times and never repeats) is a
profile whose period is at least as long as the whole run.

Examples
--------
>>> from marketsim.model.demand import DemandProfile
>>> evening_peak = DemandProfile([1, 1, 2, 4], period=24.0)  # four 6-hour pieces
>>> evening_peak.multipliers.tolist()
[0.5, 0.5, 1.0, 2.0]
>>> float(evening_peak.multiplier_at(20.0))
2.0
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from marketsim import _validation as check


@dataclass(frozen=True, eq=False, init=False)
class DemandProfile:
    """Piecewise-constant arrival-rate multipliers over a repeating period.

    Parameters
    ----------
    multipliers : array_like, shape (n_pieces,)
        Relative arrival rate in each piece; finite, >= 0, not all 0. They are
        rescaled to a time-weighted mean of 1 (see the module notes).
    period : float, optional
        Length of the period in the market's time unit, > 0 (24 for a day in
        hours, 168 for a week). Give ``period``, ``piece_length`` or both.
    piece_length : float, optional
        Length of each piece when the pieces are equal, > 0; the period is then
        ``n_pieces * piece_length`` and must equal ``period`` if both are given.
    starts : array_like, shape (n_pieces,), optional
        Start of each piece within the period for unequal pieces (a
        piecewise-constant schedule): starting at 0, strictly increasing, below
        ``period``. Needs ``period``; excludes ``piece_length``.

    Attributes
    ----------
    multipliers : ndarray, shape (n_pieces,)
        The multipliers after normalisation (time-weighted mean 1).
    starts : ndarray, shape (n_pieces,)
        Start of each piece within the period.
    period : float
    """

    multipliers: np.ndarray
    starts: np.ndarray
    period: float

    def __init__(self, multipliers: ArrayLike, period: float | None = None, *,
                 piece_length: float | None = None, starts: ArrayLike | None = None) -> None:
        values = check.array("multipliers", multipliers, (None,), "(n_pieces,)", low=0.0)
        if values.size == 0:
            raise ValueError("multipliers must hold at least one value, got []")
        if not values.any():
            raise ValueError(
                f"multipliers must not all be 0 (no customer would ever arrive), got "
                f"{check._shown(values)}"
            )
        n = values.size
        if starts is not None:
            if piece_length is not None:
                raise ValueError("give piece_length for equal pieces or starts for unequal "
                                 "ones, not both")
            if period is None:
                raise ValueError("starts needs period (the length of the whole cycle)")
            length = check.number("period", period, low=0.0, low_open=True)
            begins = check.array("starts", starts, (n,), "(n_pieces,)", low=0.0)
            if begins[0] != 0.0 or (np.diff(begins) <= 0.0).any() or begins[-1] >= length:
                raise ValueError(
                    f"starts must begin at 0, increase strictly and stay below period "
                    f"{length:g}, got {check._shown(begins)}"
                )
        else:
            if period is None and piece_length is None:
                raise ValueError("give period (e.g. 24.0 for a day in hours) or piece_length")
            if piece_length is not None:
                piece = check.number("piece_length", piece_length, low=0.0, low_open=True)
                length = n * piece
                if period is not None:
                    given = check.number("period", period, low=0.0, low_open=True)
                    if not np.isclose(given, length, rtol=1e-12, atol=0.0):
                        raise ValueError(
                            f"period must be the number of pieces times piece_length "
                            f"({n} x {piece:g} = {length:g}), got {given:g}"
                        )
                    length = given
            else:
                length = check.number("period", period, low=0.0, low_open=True)
            begins = np.arange(n) * (length / n)
        lengths = np.diff(np.append(begins, length))
        mean = float(values @ lengths / length)
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            normalised = values / mean
        if not np.isfinite(normalised).all():
            raise ValueError(
                f"multipliers must have a mean over the period that they can be divided by "
                f"(> 0 in floating point), got a mean of {mean:g} from "
                f"{check._shown(values)}"
            )
        set_ = object.__setattr__
        normalised.flags.writeable = False
        begins = np.array(begins, dtype=float)
        begins.flags.writeable = False
        set_(self, "multipliers", normalised)
        set_(self, "starts", begins)
        set_(self, "period", float(length))

    @property
    def n_pieces(self) -> int:
        """Number of pieces in one period."""
        return int(self.multipliers.size)

    @property
    def ends(self) -> np.ndarray:
        """End of each piece within the period, shape (n_pieces,); the last is ``period``."""
        return np.append(self.starts[1:], self.period)

    @property
    def is_flat(self) -> bool:
        """True when every multiplier is 1 (the same as no profile)."""
        return bool(np.all(self.multipliers == 1.0))

    def multiplier_at(self, time: ArrayLike) -> np.ndarray:
        """Rate multiplier at ``time`` (any shape; time 0 is the start of a period)."""
        phase = np.mod(np.asarray(time, dtype=float), self.period)
        piece = np.searchsorted(self.starts, phase, side="right") - 1
        return self.multipliers[piece]

    def mean_multiplier(self, start: float, end: float) -> float:
        """Time-average multiplier over ``[start, end)`` (1 over whole periods).

        A measurement window that does not cover whole periods sees more or
        less demand than the mean: its booking rates describe part of the cycle.
        """
        return (self.cumulative(end) - self.cumulative(start)) / (end - start)

    def cumulative(self, time: float) -> float:
        """Integral of the multiplier from 0 to ``time``."""
        whole, phase = divmod(float(time), self.period)
        lengths = np.clip(phase - self.starts, 0.0, np.diff(np.append(self.starts,
                                                                      self.period)))
        return whole * self.period + float(self.multipliers @ lengths)

    def to_dict(self) -> dict:
        """The profile as plain JSON-ready data (the scenario-file format)."""
        data: dict = {"multipliers": self.multipliers.tolist(), "period": self.period}
        equal = np.allclose(self.starts, np.arange(self.n_pieces) * self.period / self.n_pieces,
                            rtol=0.0, atol=1e-12 * self.period)
        if not equal:
            data["starts"] = self.starts.tolist()
        return data

    @classmethod
    def from_dict(cls, data: object, name: str = "demand") -> DemandProfile:
        """Read a profile from scenario-file data (``multipliers``, ``period``, ``starts``)."""
        keys = ("multipliers", "period", "piece_length", "starts")
        if not isinstance(data, dict):
            raise ValueError(f"{name} must be an object with keys {', '.join(keys)}, got "
                             f"{check._shown(data)}")
        unknown = sorted(set(data) - set(keys))
        if unknown:
            raise ValueError(f"{name} takes the keys {', '.join(keys)}, got {unknown[0]!r}")
        if "multipliers" not in data:
            raise ValueError(f"{name} must have 'multipliers'")
        try:
            return cls(data["multipliers"], data.get("period"),
                       piece_length=data.get("piece_length"), starts=data.get("starts"))
        except ValueError as error:
            raise ValueError(f"{name}: {error}") from None

    def describe(self) -> str:
        """A few words for tables, e.g. ``"24 pieces over 24, multipliers 0.2 to 1.9"``."""
        return (f"{self.n_pieces} pieces over {self.period:g}, multipliers "
                f"{self.multipliers.min():.2g} to {self.multipliers.max():.2g}")

    def __repr__(self) -> str:
        return f"DemandProfile({self.describe()})"


def checked_profile(value: object) -> DemandProfile | None:
    """The ``demand=`` option of :class:`~marketsim.Market`: a profile or ``None`` (flat)."""
    if value is None or isinstance(value, DemandProfile):
        return value
    raise ValueError(
        "demand must be a marketsim.DemandProfile (e.g. DemandProfile(hourly, period=24.0)) "
        f"or None for a constant arrival rate, got {check._shown(value)}"
    )


__all__ = ["DemandProfile", "checked_profile"]
