"""Built-in example scenario (invented numbers, for demos and examples only)."""

from __future__ import annotations

from marketsim.model import Market, Treatment
from marketsim.model.scenario_file import Scenario


def rehearsal_rooms(balance: float | None = None) -> Market:
    """An invented marketplace for renting music rehearsal rooms by the hour.

    Two room types (30 small rooms booked for 2 hours on average, 10 large
    studios for 3 hours) and two kinds of customers (solo musicians, 60% of
    arrivals, and bands). Solo musicians mostly look at small rooms, bands at
    studios. Time is in hours. Every number is made up.

    Parameters
    ----------
    balance : float, optional
        Rescale the arrival rate to this arrival-to-supply balance (default
        about 0.87: 16 arrivals per hour).

    Returns
    -------
    Market
    """
    market = Market(
        listing_types=["small room", "large studio"],
        listing_counts=[30, 10],
        mean_busy_time=[2.0, 3.0],
        price=[25.0, 60.0],
        customer_types=["solo musician", "band"],
        customer_shares=[0.6, 0.4],
        arrival_rate=16.0,
        consideration=[[0.30, 0.10], [0.10, 0.40]],
        utility=[[0.5, -0.5], [-1.0, 0.8]],
        outside_utility=[-1.4, -1.2],
    )
    return market if balance is None else market.with_balance(balance)


def instant_confirmation() -> Treatment:
    """The invented feature under test: instant booking confirmation, which
    makes every room a little more attractive (utility + 0.3)."""
    return Treatment(utility_shift=0.3)


def rehearsal_rooms_scenario() -> Scenario:
    """The demo's whole scenario: the rehearsal-room market, instant confirmation,
    and a planned two-week experiment (336 hours after a 50-hour warm-up) that
    must detect 0.3 more bookings per hour. Every number is made up."""
    return Scenario(
        name="a rehearsal-room marketplace (invented)",
        market=rehearsal_rooms(),
        treatment=instant_confirmation(),
        horizon=336.0,
        burn_in=50.0,
        minimum_effect=0.3,
        time_unit="hour",
    )
