"""The optional planning keys of a scenario file, and what every key of the file means.

The ``experiment`` section of a scenario file may say, besides the horizon, burn-in
and minimum effect:

- ``designs``: the candidate designs to compare, a list of objects such as
  ``{"design": "customer-side", "treated": 0.5}``,
  ``{"design": "switchback", "block_length": 12, "burn_in": 3, "assignment": "random"}``,
  ``{"design": "listing-side", "treated": 0.25}``,
  ``{"design": "two-sided", "customers": 0.5, "listings": 0.5}`` or
  ``{"design": "two-sided-following-balance"}`` (default: the standard grid of
  :func:`marketsim.planning.default_candidates`);
- ``target``: what the horizon is sized for, one key of
  :func:`marketsim.plan_horizon` (``{"target_relative_se": 0.02}``; default:
  ``minimum_effect``);
- ``replications``: Monte Carlo replications of every study (the command line's
  ``--replications`` overrides it).

Only plain data is checked here (the model stage comes before the designs); the
report builds the design objects from these specs.
"""

from __future__ import annotations

from marketsim import _validation as check

DESIGN_KINDS = {
    "customer-side": ("treated",),
    "listing-side": ("treated",),
    "two-sided": ("customers", "listings"),
    "two-sided-following-balance": ("customers", "listings"),
    "switchback": ("block_length", "burn_in", "assignment"),
}
"""Design names of a scenario file and the keys each takes (all optional: fractions
default to 0.5; a switchback needs ``block_length``, its ``burn_in`` defaults to 0 and
its ``assignment`` to ``"random"``)."""

SWITCHBACK_ASSIGNMENTS = ("random", "alternating")
"""The ``assignment`` values of a switchback spec (those of ``marketsim.Switchback``)."""

TARGETS = ("minimum_effect", "relative_minimum_effect", "target_se", "target_relative_se",
           "target_rmse")
"""The targets a scenario file's ``target`` may name (those of ``plan_horizon``)."""

KEY_HELP = {
    "name": "what the market is, for report titles",
    "time_unit": "name of the unit of every rate and time (hour, day, ...); horizons in the "
                 "report are also given in days, weeks or years when it is a known unit",
    "market.listing_types": "names of the listing types",
    "market.listing_counts": "number of listings of each type",
    "market.mean_busy_time": "mean time a booked listing of each type stays busy",
    "market.arrival_rate": "customers arriving per time unit (Poisson)",
    "market.customer_types": "names of the customer types",
    "market.customer_shares": "share of arriving customers of each type (sums to 1)",
    "market.consideration": "probability that a customer of type i considers an available "
                            "listing of type j (customer types x listing types)",
    "market.utility": "logit utility of booking a listing of type j for a customer of type i",
    "market.outside_utility": "logit utility of leaving without booking, per customer type "
                              "(its weight grows with the number of listings)",
    "market.price": "optional price of each listing type (for the revenue metric)",
    "market.busy_time": "optional shape of busy times ({\"family\": \"lognormal\", \"cv\": 2}, "
                        "one for all types or a list of one per type)",
    "market.demand": "optional arrival rate over the day or week "
                     "({\"multipliers\": [...], \"period\": 24})",
    "treatment.utility_shift": "change in the utility of treated customer-listing pairs",
    "treatment.consideration_factor": "optional factor on the consideration probability of "
                                      "treated pairs",
    "treatment.outside_utility_shift": "optional change in the outside utility of treated "
                                       "customers",
    "experiment.horizon": "planned length of the experiment: the measured window, after the "
                          "burn-in, in time units",
    "experiment.burn_in": "warm-up simulated before every measured window and not measured "
                          "(default 0)",
    "experiment.minimum_effect": "smallest change in bookings per time unit worth detecting "
                                 "(80% power, 5% level, with the reported standard error)",
    "experiment.designs": "optional candidate designs, e.g. [{\"design\": \"customer-side\", "
                          "\"treated\": 0.5}, {\"design\": \"two-sided\", \"customers\": 0.5, "
                          "\"listings\": 0.5}, {\"design\": \"two-sided-following-balance\"}, "
                          "{\"design\": \"switchback\", \"block_length\": 12, \"burn_in\": 3, "
                          "\"assignment\": \"random\"}]; a switchback's burn_in is dropped at "
                          "the start of every block and must be shorter than block_length; "
                          f"design names: {', '.join(DESIGN_KINDS)}",
    "experiment.target": "optional target of the horizon plan instead of minimum_effect, one "
                         f"of {', '.join(TARGETS)} (e.g. {{\"target_relative_se\": 0.02}})",
    "experiment.replications": "optional Monte Carlo replications of every study (>= 2; "
                               "--replications overrides it)",
}
"""Every key of a scenario file, in words (``marketsim describe`` prints them)."""


def describe_keys() -> str:
    """The keys of a scenario file and what each means, one per line."""
    width = max(len(key) for key in KEY_HELP)
    return "\n".join(f"{key.ljust(width)}  {text}" for key, text in KEY_HELP.items())


def check_designs(specs: object) -> tuple[dict, ...]:
    """Check a ``designs`` list (plain data); returns the specs with defaults filled in."""
    if not isinstance(specs, list) or not specs:
        raise ValueError(f"designs must be a non-empty list of design objects, got {specs!r}")
    checked = []
    for k, spec in enumerate(specs):
        name = f"designs[{k}]"
        if not isinstance(spec, dict) or "design" not in spec:
            raise ValueError(f"{name} must be an object with a 'design' key, got {spec!r}")
        kind = spec["design"]
        if kind not in DESIGN_KINDS:
            raise ValueError(f"{name}.design must be one of {', '.join(DESIGN_KINDS)}, "
                             f"got {kind!r}")
        allowed = DESIGN_KINDS[kind]
        unknown = sorted(set(spec) - {"design", *allowed})
        if unknown:
            raise ValueError(f"{name} has an unknown key {unknown[0]!r}; a {kind} design takes "
                             f"{', '.join(allowed)}")
        if kind == "switchback":
            values = _switchback_spec(name, spec)
        else:
            values = {key: check.number(f"{name}.{key}", spec.get(key, 0.5), low=0.0,
                                        high=1.0, low_open=True, high_open=True)
                      for key in allowed}
        checked.append({"design": kind, **values})
    return tuple(checked)


def _switchback_spec(name: str, spec: dict) -> dict:
    """The keys of a switchback spec, checked (the design repeats the checks)."""
    if "block_length" not in spec:
        raise ValueError(f"{name} (a switchback) needs block_length, the length of each "
                         f"block in time units, got {spec!r}")
    length = check.number(f"{name}.block_length", spec["block_length"], low=0.0,
                          low_open=True)
    burn_in = check.number(f"{name}.burn_in", spec.get("burn_in", 0.0), low=0.0)
    if burn_in >= length:
        raise ValueError(f"{name}.burn_in must be shorter than block_length, got burn_in="
                         f"{burn_in:g} with block_length={length:g}")
    assignment = check.choice(f"{name}.assignment", spec.get("assignment", "random"),
                              SWITCHBACK_ASSIGNMENTS)
    return {"block_length": length, "burn_in": burn_in, "assignment": assignment}


def check_target(target: object) -> tuple[str, float]:
    """Check a ``target`` object: exactly one of :data:`TARGETS` with a value > 0."""
    if not isinstance(target, dict) or len(target) != 1:
        raise ValueError(f"target must be an object with exactly one of {', '.join(TARGETS)}, "
                         f"got {target!r}")
    (key, value), = target.items()
    if key not in TARGETS:
        raise ValueError(f"target must name one of {', '.join(TARGETS)}, got {key!r}")
    return key, check.number(f"target.{key}", value, low=0.0, low_open=True)


__all__ = ["DESIGN_KINDS", "KEY_HELP", "TARGETS", "check_designs", "check_target",
           "describe_keys"]
