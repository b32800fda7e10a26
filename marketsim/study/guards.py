"""Guards against runaway runs: estimate a run's length early, show it, refuse it.

A single simulation is timed on its second short slice of events (the first
may include compiling the kernel); its events are extrapolated from the
simulated time reached. A study counts the events of its first replication and
times its second (the first includes loading the kernels). Either estimate is
refused with a :class:`RunRefused` (a ``ValueError``) that gives it when it
exceeds ``max_seconds`` or ``max_events``; otherwise a long single run shows it
in a progress bar. Estimates are rough (the early part of a run from an empty start
is busier than its steady state), so leave a margin.
"""

from __future__ import annotations

import time

from marketsim import _validation as check
from marketsim.engine import SliceProgress
from marketsim.study.progress import progress_bar


def limits(max_seconds: float | None, max_events: int | None) -> tuple[float | None, int | None]:
    """Check the two limits (None: no limit)."""
    if max_seconds is not None:
        max_seconds = check.number("max_seconds", max_seconds, low=0.0, low_open=True)
    if max_events is not None:
        max_events = check.whole_number("max_events", max_events, low=1)
    return max_seconds, max_events


class RunRefused(ValueError):
    """A run refused by ``max_seconds`` or ``max_events``; the message gives the estimate."""


def refuse(what: str, events: float, seconds: float | None, basis: str,
           max_seconds: float | None, max_events: int | None) -> None:
    """Raise :class:`RunRefused` if the estimate passes a limit (``seconds=None``: not
    known yet)."""
    timed = "" if seconds is None else f" and {seconds:,.3g} s"
    estimate = f"about {events:,.0f} events{timed}, {basis}"
    if max_events is not None and events > max_events:
        raise RunRefused(f"{what} would simulate {estimate}: more than max_events="
                         f"{max_events:,}; shorten the run or raise max_events")
    if max_seconds is not None and seconds is not None and seconds > max_seconds:
        raise RunRefused(f"{what} would take {estimate}: more than max_seconds="
                         f"{max_seconds:g}; shorten the run or raise max_seconds")


class SliceGuard:
    """``on_slice`` callback of one simulation: estimate, limits, progress bar.

    Parameters
    ----------
    max_seconds, max_events : float, int or None
        Limits on the estimated wall time and events of the whole run.
    progress : bool
        Show a progress bar (simulated time) with the estimate, if the run
        lasts more than a second.
    """

    def __init__(self, max_seconds: float | None, max_events: int | None,
                 progress: bool) -> None:
        self.max_seconds, self.max_events = limits(max_seconds, max_events)
        if not isinstance(progress, bool):
            raise ValueError(f"progress must be True or False, got {progress!r}")
        self.progress = progress
        self.mark: tuple[float, int] | None = None
        self.bar = None

    def __call__(self, state: SliceProgress) -> None:
        now = time.perf_counter()
        if self.mark is None:
            self.mark = (now, state.events)
            return
        if self.bar is None:
            timed = state.events - self.mark[1]
            per_event = (now - self.mark[0]) / max(timed, 1)
            events = state.events / max(state.fraction, 1e-300)
            seconds = (events - state.events) * per_event
            refuse("simulate", events, seconds,
                   f"estimated from a timed slice of {timed:,} events",
                   self.max_seconds, self.max_events)
            self.bar = progress_bar(self.progress, total=100, delay=1.0, leave=False,
                            desc=f"simulate (about {events:.3g} events, {seconds:.3g} s)",
                            unit="%", bar_format="{desc}: {percentage:3.0f}%|{bar}| "
                                                 "{elapsed}<{remaining}")
        if self.max_events is not None and state.events > self.max_events:
            raise RunRefused(f"simulate passed max_events={self.max_events:,} at "
                             f"{state.events:,} events")
        self.bar.update(100 * state.fraction - self.bar.n)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
