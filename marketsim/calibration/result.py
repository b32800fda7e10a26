"""The result of a calibration: the market at the estimates, the parameter table,
the fit checks and plausible markets drawn from the estimates' sampling distribution."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.calibration.arrivals import ArrivalFit
from marketsim.calibration.busy import BusyFit
from marketsim.calibration.checks import FitChecks
from marketsim.calibration.choice import ConsiderationFit, LogitFit
from marketsim.model import Market
from marketsim.model.busy_time import Empirical
from marketsim.randomness import SeedLike, seed_sequence

Z95 = 1.959963984540054
"""Standard normal 97.5% quantile (scipy.stats.norm.ppf(0.975))."""


@dataclass(frozen=True, eq=False)
class Calibration:
    """A market calibrated from platform logs.

    Attributes
    ----------
    market : Market
        The market at the estimates. Its outside utilities are 0: only utility minus
        outside utility is identified, so utilities are read relative to leaving.
    table : pandas.DataFrame
        One row per parameter: ``parameter, customer_type, listing_type, estimate,
        se, low, high, note`` (95% normal intervals).
    checks : FitChecks
        Fit diagnostics (see :meth:`FitChecks.text`).
    arrivals : ArrivalFit
    busy : BusyFit
    consideration : ConsiderationFit or None
        ``None`` when consideration was given by the user (no impressions).
    utility : LogitFit
    notes : tuple of str
        What the calibration assumed or set aside, in words.
    complete_stays : dict of str to ndarray
        Per listing type, the busy times of the stays seen from start to end (those
        starting at least ``TEST_MARGIN`` mean busy times before the window's end),
        used by the exponential check and :meth:`market_with_logged_busy_times`.
    """

    market: Market
    table: pd.DataFrame
    checks: FitChecks
    arrivals: ArrivalFit
    busy: BusyFit
    consideration: ConsiderationFit | None
    utility: LogitFit
    notes: tuple[str, ...]
    complete_stays: dict[str, np.ndarray]

    def market_with_logged_busy_times(self) -> Market:
        """:attr:`market` with busy times resampled from the logged stays
        (:class:`~marketsim.model.busy_time.Empirical`, rescaled to the estimated mean):
        simulate it (the general engine) when the exponential check is flagged, to see
        how much the busy times' shape changes the answers.

        The complete stays slightly under-represent stays longer than ``TEST_MARGIN``
        mean busy times (they are more often cut by the window's end).
        """
        return self.market.replace(busy_time=[Empirical(self.complete_stays[name])
                                              for name in self.market.listing_types])

    def to_frame(self) -> pd.DataFrame:
        """The parameter table."""
        return self.table.copy()

    def draw(self, n: int, seed: SeedLike = None) -> list[Market]:
        """``n`` plausible markets drawn from the estimates' sampling distribution.

        Arrival rate and mean busy times are drawn on the log scale (normal with the
        relative standard error, and ``exposure / Gamma(ended)`` for busy times),
        customer shares from ``Dirichlet(counts)``, consideration from
        ``Beta(considered + 1/2, unconsidered + 1/2)`` (fixed when given by the user)
        and utilities from the normal with the inverse observed information as
        covariance. Listing counts are those of the log. These are large-sample
        approximations of the sampling distribution, not a full posterior.

        Parameters
        ----------
        n : int
            Number of markets, >= 1.
        seed : int, SeedSequence, Generator or None

        Returns
        -------
        list of Market
        """
        n = check.whole_number("n", n)
        rng = np.random.default_rng(seed_sequence(seed))
        m = self.market
        markets = []
        for _ in range(n):
            rate = self.arrivals.rate * np.exp(rng.normal() * self.arrivals.rate_se
                                               / self.arrivals.rate)
            shares = rng.dirichlet(np.maximum(self.arrivals.counts, 0.5))
            busy = self.busy.exposure / rng.gamma(self.busy.ended)
            consideration = m.consideration
            if self.consideration is not None:
                seen = self.consideration.considered
                unseen = self.consideration.available - seen
                consideration = np.where(self.consideration.available > 0,
                                         rng.beta(seen + 0.5, unseen + 0.5), 0.0)
            utility = np.array(m.utility)
            for i in range(m.n_customer_types):
                free = self.utility.identified[i]
                if free.any():
                    cov = self.utility.covariance[i][np.ix_(free, free)]
                    utility[i, free] = rng.multivariate_normal(
                        self.utility.value[i, free], cov)
            markets.append(m.replace(arrival_rate=rate, customer_shares=shares,
                                     mean_busy_time=busy, consideration=consideration,
                                     utility=utility))
        return markets

    def plot(self):
        """The fit checks as figures: booking rates logged vs predicted, busy-time
        coefficient of variation per type, arrival rate per bin.

        Returns
        -------
        matplotlib.figure.Figure
        """
        import matplotlib.pyplot as plt

        figure, axes = plt.subplots(1, 3, figsize=(13, 3.8))
        bookings = self.checks.bookings
        labels = [f"{c}\n{ell}" for c, ell in zip(bookings.customer_type,
                                                  bookings.listing_type)]
        x = np.arange(len(labels))
        axes[0].bar(x - 0.27, bookings.logged_rate, 0.27, yerr=2 * bookings.logged_se,
                    label="logged (2 s.e.)")
        axes[0].bar(x, bookings.simulated_rate, 0.27, yerr=2 * bookings.simulated_se,
                    label="calibrated market, simulated")
        axes[0].bar(x + 0.27, bookings.large_market_rate, 0.27, label="large-market model")
        axes[0].set_xticks(x, labels, fontsize=8)
        axes[0].set_ylabel("bookings per unit time")
        axes[0].set_title("Booking rates")
        axes[0].legend(fontsize=8)
        names = list(self.checks.busy_times)
        cv = [self.checks.busy_times[k].cv for k in names]
        half = [2 / np.sqrt(max(self.checks.busy_times[k].count, 1)) for k in names]
        axes[1].errorbar(np.arange(len(names)), cv, yerr=half, fmt="o",
                         label="estimate (2 s.e. if exponential)")
        axes[1].axhline(1.0, color="grey", linestyle="--", label="exponential")
        axes[1].set_xticks(np.arange(len(names)), names)
        axes[1].set_ylabel("coefficient of variation")
        axes[1].set_title("Busy times")
        axes[1].legend(fontsize=8)
        test = self.checks.arrivals
        axes[2].bar(np.arange(test.rate.size), test.rate)
        axes[2].axhline(self.arrivals.rate, color="grey", linestyle="--", label="constant rate")
        axes[2].set_xlabel("hour of day" if test.by_hour else "part of the window (1/24)")
        axes[2].set_ylabel("sessions per unit time")
        axes[2].set_title(f"Arrivals (dispersion p = {test.pvalue:.2g})")
        axes[2].legend(fontsize=8)
        figure.tight_layout()
        return figure

    def __repr__(self) -> str:
        flagged = int(self.checks.to_frame().flagged.sum())
        return (f"Calibration({self.market.n_customer_types} customer types x "
                f"{self.market.n_listing_types} listing types, N={self.market.n_listings}, "
                f"balance={self.market.balance:.3g}, {len(self.table)} parameters, "
                f"{flagged} fit checks flagged)")


def parameter_table(market: Market, arrivals: ArrivalFit, busy: BusyFit,
                    consideration: ConsiderationFit | None, utility: LogitFit) -> pd.DataFrame:
    """One row per parameter with its estimate, standard error and 95% interval."""
    rows = [("arrival_rate", "", "", arrivals.rate, arrivals.rate_se, "")]
    for i, name in enumerate(market.customer_types):
        rows.append(("customer_share", name, "", arrivals.shares[i], arrivals.shares_se[i], ""))
    for j, name in enumerate(market.listing_types):
        rows.append(("mean_busy_time", "", name, busy.mean[j], busy.se[j],
                     f"{busy.ended[j]:,} ended, {busy.censored[j]:,} censored"))
    for i, customer in enumerate(market.customer_types):
        for j, listing in enumerate(market.listing_types):
            if consideration is None:
                rows.append(("consideration", customer, listing, market.consideration[i, j],
                             np.nan, "given, not estimated (no impressions)"))
            else:
                rows.append(("consideration", customer, listing, consideration.value[i, j],
                             consideration.se[i, j],
                             f"{consideration.considered[i, j]:,} of "
                             f"{consideration.available[i, j]:,} available"))
    for i, customer in enumerate(market.customer_types):
        for j, listing in enumerate(market.listing_types):
            ok = utility.identified[i, j]
            rows.append(("utility", customer, listing, utility.value[i, j],
                         utility.se[i, j] if ok else np.nan,
                         "relative to the outside option" if ok else
                         "not identified (never considered); irrelevant"))
    for customer in market.customer_types:
        rows.append(("outside_utility", customer, "", 0.0, 0.0,
                     "fixed at 0: only utility - outside utility is identified"))
    table = pd.DataFrame(rows, columns=["parameter", "customer_type", "listing_type",
                                        "estimate", "se", "note"])
    table.insert(5, "low", table.estimate - Z95 * table.se)
    table.insert(6, "high", table.estimate + Z95 * table.se)
    return table
