"""Fit checks of a calibration, in numbers and plain words.

Three questions, each answered with what it means for the simulator's answers:
does the calibrated market reproduce the logged booking rates (simulated exactly,
and by the large-market model used to screen designs quickly); do busy times look
exponential (the count-based engine and the large-market model assume they are);
do arrivals look stationary over the window.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim.calibration.arrivals import StationarityTest, stationarity_test
from marketsim.calibration.busy import ExponentialTest, exponential_test
from marketsim.calibration.tables import CheckedLog
from marketsim.engine import build_cells, run_cells
from marketsim.meanfield import steady_state
from marketsim.model import Market
from marketsim.randomness import SeedLike

BOOKING_Z = 3.5
"""A booking rate is flagged when the simulated and logged rates differ by more than
this many standard errors ..."""
BOOKING_TOLERANCE = 0.02
"""... and by more than this relative gap (a statistically clear but tiny gap is not
worth a warning)."""
SIMULATED_BUSY_TIMES = 200.0
"""The calibrated market is simulated for the log's window, and at least this many
of its longest mean busy times."""


@dataclass(frozen=True, eq=False)
class FitChecks:
    """Diagnostics of a calibration.

    Attributes
    ----------
    bookings : pandas.DataFrame
        One row per customer type x listing type: ``logged_rate``, ``logged_se``
        (Poisson), ``simulated_rate`` and ``simulated_se`` (the calibrated market run
        by the exact engine), ``relative_gap`` and ``z`` of simulated against logged,
        ``large_market_rate`` (the large-market model at the calibrated market) and
        ``large_market_gap`` (its relative gap to the simulated rate: how far the fast
        screen of designs is from the finite market of this size).
    busy_times : dict of str to ExponentialTest
        Per listing type.
    arrivals : StationarityTest
    """

    bookings: pd.DataFrame
    busy_times: dict[str, ExponentialTest]
    arrivals: StationarityTest

    def to_frame(self) -> pd.DataFrame:
        """One row per check: ``check, subject, statistic, value, flagged, meaning``."""
        rows = []
        for row in self.bookings.itertuples():
            flagged = abs(row.relative_gap) > BOOKING_TOLERANCE and abs(row.z) > BOOKING_Z
            screen = (f"; the large-market model used to screen designs is "
                      f"{row.large_market_gap:+.0%} off at this market size")
            rows.append({
                "check": "booking rate", "subject": f"{row.customer_type} x {row.listing_type}",
                "statistic": "relative gap (simulated / logged - 1)",
                "value": row.relative_gap, "flagged": flagged,
                "meaning": (
                    f"the calibrated market does not reproduce this booking rate (z = "
                    f"{row.z:.1f}): the model misses something here, so its bias and noise "
                    "for experiments that move this pair are suspect" if flagged else
                    "the calibrated market reproduces this booking rate") + screen,
            })
        for name, test in self.busy_times.items():
            rows.append({
                "check": "exponential busy times", "subject": name,
                "statistic": "coefficient of variation (1 if exponential)",
                "value": test.cv, "flagged": test.flagged,
                "meaning": _busy_meaning(test),
            })
        test = self.arrivals
        unit = "hour of day" if test.by_hour else "1/24 of the window"
        rows.append({
            "check": "stationary arrivals", "subject": f"sessions per {unit}",
            "statistic": f"dispersion chi-square p-value ({test.dof} d.o.f.)",
            "value": test.pvalue, "flagged": test.flagged,
            "meaning": (
                f"the arrival rate changes by {unit} (ratio of highest to lowest "
                f"{np.nanmax(test.rate) / np.nanmin(test.rate):.2f}); the simulator uses one "
                "constant rate, so bias and noise are for an average hour: simulate the busy "
                "and quiet hours as separate markets to see the range" if test.flagged else
                "a constant arrival rate fits the window"),
        })
        return pd.DataFrame(rows)

    def text(self) -> str:
        """The checks as sentences, flagged ones first."""
        frame = self.to_frame().sort_values("flagged", ascending=False, kind="stable")
        lines = []
        for row in frame.itertuples():
            mark = "CHECK" if row.flagged else "ok"
            lines.append(f"[{mark}] {row.check}, {row.subject}: {row.statistic} = "
                         f"{row.value:.3g}; {row.meaning}.")
        return "\n".join(lines)


def _busy_meaning(test: ExponentialTest) -> str:
    if test.count < 5:
        return "too few complete stays to test"
    if not test.flagged:
        return (f"consistent with exponential busy times ({test.count:,} complete stays), "
                "as the engine and the large-market model assume")
    spread = "less" if test.cv < 1 else "more"
    return (f"busy times vary {spread} than exponential ones ({test.count:,} complete stays) "
            "while the simulator assumes exponential ones; long-run booking rates are often "
            "close (in the one-type loss system they depend only on the mean), but how fast "
            "the market recovers after a booking differs, so bias and noise, above all of "
            "short experiments and switchbacks, may differ from what is simulated: "
            "simulate calibration.market_with_logged_busy_times() to see by how much")


def fit_checks(log: CheckedLog, market: Market, stays: dict[str, np.ndarray],
               seed: SeedLike = 0) -> FitChecks:
    """Run the three checks of a calibration of ``log`` at ``market``.

    The calibrated market is simulated exactly (from its large-market steady state,
    for the log's window or ``SIMULATED_BUSY_TIMES`` longest mean busy times, whichever
    is longer) with ``seed``; its standard errors are Poisson approximations.
    """
    state = steady_state(market)
    cells = build_cells(market)
    horizon = max(log.duration, SIMULATED_BUSY_TIMES * float(market.mean_busy_time.max()))
    start = np.clip(np.rint(state.available), 0, cells.listing_count).astype(np.int64)
    simulated = run_cells(cells, horizon=horizon, seed=seed, start=start).bookings
    customer = log.session_customer
    booked = log.session_booked >= 0
    listing_type = log.listing_type[log.session_booked[booked]]
    n_types = len(log.listing_types)
    counts = np.bincount(customer[booked] * n_types + listing_type,
                         minlength=len(log.customer_types) * n_types)
    counts = counts.reshape(len(log.customer_types), n_types)
    rows = []
    for i, customer_name in enumerate(log.customer_types):
        for j, listing_name in enumerate(log.listing_types):
            logged = counts[i, j] / log.duration
            se = np.sqrt(max(counts[i, j], 1)) / log.duration
            rate = simulated[i, j] / horizon
            rate_se = np.sqrt(max(simulated[i, j], 1)) / horizon
            large = float(state.booking_rates[i, j])
            rows.append({
                "customer_type": customer_name, "listing_type": listing_name,
                "logged_rate": logged, "logged_se": se, "simulated_rate": rate,
                "simulated_se": rate_se,
                "relative_gap": rate / logged - 1 if logged > 0 else np.inf,
                "z": (rate - logged) / np.hypot(se, rate_se),
                "large_market_rate": large,
                "large_market_gap": large / rate - 1 if rate > 0 else np.inf,
            })
    busy_times = {name: exponential_test(stays[name]) for name in log.listing_types}
    return FitChecks(pd.DataFrame(rows), busy_times, stationarity_test(log))
