"""Scenario files: a market, a feature and a planned experiment in one JSON file.

The command line reads these (``marketsim report my_market.json``);
``marketsim scenario-template`` prints the built-in example to start from::

    {
      "name": "rehearsal-room marketplace (invented)",
      "time_unit": "hour",
      "market": {"listing_types": [...], "listing_counts": [...], ...},
      "treatment": {"utility_shift": 0.3},
      "experiment": {"horizon": 336, "burn_in": 50, "minimum_effect": 0.3}
    }

``market`` takes the arguments of :class:`marketsim.Market`, ``treatment`` those
of :class:`marketsim.Treatment`; ``experiment`` says how long the planned test
runs (``horizon``, in ``time_unit``), how long the simulated market warms up
first (``burn_in``) and the smallest effect on bookings per ``time_unit`` worth
detecting (``minimum_effect``); optionally the candidate ``designs``, the ``target``
of the horizon plan and the number of ``replications``
(:mod:`marketsim.model.plan_spec`). ``marketsim describe`` prints what every key
means.

Two optional market keys describe markets as they are: ``busy_time``, one
shape for every listing type or a list of one per type (``{"family":
"lognormal", "cv": 2}``; families ``exponential``, ``gamma`` and ``lognormal``
with ``cv``, ``fixed``, ``empirical`` with ``stays``), and ``demand``, the
arrival rate over the day or week (``{"multipliers": [24 hourly values],
"period": 24}``, normalised to average 1).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

from marketsim import _validation as check
from marketsim.model import Market, Treatment, plan_spec
from marketsim.model import busy_time as busy_time_shapes
from marketsim.model.demand import DemandProfile

MARKET_KEYS = ("listing_counts", "mean_busy_time", "arrival_rate", "customer_shares",
               "consideration", "utility", "outside_utility", "listing_types",
               "customer_types", "price", "busy_time", "demand")
TREATMENT_KEYS = ("utility_shift", "consideration_factor", "outside_utility_shift")
EXPERIMENT_KEYS = ("horizon", "burn_in", "minimum_effect", "designs", "target", "replications")
TOP_KEYS = ("name", "time_unit", "market", "treatment", "experiment")


@dataclass(frozen=True, eq=False)
class Scenario:
    """A market, the feature under test and the planned experiment.

    Attributes
    ----------
    name : str
        What the market is, for report titles.
    market : Market
    treatment : Treatment
        Must fit the market and change its bookings (:func:`check_feature`).
    horizon : float
        Planned length of the experiment, > 0 (and at least ``1e-9 * burn_in``).
    burn_in : float
        Warm-up simulated before every measurement window, >= 0.
    minimum_effect : float
        Smallest change in bookings per time unit worth detecting, > 0.
    time_unit : str
        Name of the time unit of every rate and time (e.g. ``"hour"``).
    designs : tuple of dict, optional
        Candidate designs as plain specs (:mod:`marketsim.model.plan_spec`);
        None: the standard grid.
    target : (str, float), optional
        What the horizon plan sizes for, a ``plan_horizon`` target name and its
        value; None: ``minimum_effect``.
    replications : int, optional
        Monte Carlo replications of every study (None: the command line's default).
    """

    name: str
    market: Market
    treatment: Treatment
    horizon: float
    burn_in: float
    minimum_effect: float
    time_unit: str = "time unit"
    designs: tuple[dict, ...] | None = None
    target: tuple[str, float] | None = None
    replications: int | None = None

    def __post_init__(self) -> None:
        check.window(self.horizon, self.burn_in)
        check.number("minimum_effect", self.minimum_effect, low=0.0, low_open=True)
        if self.designs is not None:
            object.__setattr__(self, "designs", plan_spec.check_designs(list(self.designs)))
        if self.target is not None:
            object.__setattr__(self, "target", plan_spec.check_target(dict([self.target])))
        if self.replications is not None:
            check.whole_number("replications", self.replications, low=2)
        for name in ("name", "time_unit"):
            value = getattr(self, name)
            if not isinstance(value, str) or not value.strip():
                raise ValueError(f"{name} must be a non-empty string, got {value!r}")
        check_feature(self.market, self.treatment)

    def to_dict(self) -> dict:
        """The scenario as plain JSON-ready data (the file format)."""
        market = self.market
        market_data = {
            "listing_types": list(market.listing_types),
            "listing_counts": market.listing_counts.tolist(),
            "mean_busy_time": market.mean_busy_time.tolist(),
            "arrival_rate": market.arrival_rate,
            "customer_types": list(market.customer_types),
            "customer_shares": market.customer_shares.tolist(),
            "consideration": market.consideration.tolist(),
            "utility": market.utility.tolist(),
            "outside_utility": market.outside_utility.tolist(),
        }
        if market.price is not None:
            market_data["price"] = market.price.tolist()
        if not market.has_exponential_busy_times:
            market_data["busy_time"] = [shape.to_dict() for shape in market.busy_time]
        if market.demand is not None:
            market_data["demand"] = market.demand.to_dict()
        treatment = {
            name: _plain(getattr(self.treatment, name)) for name in TREATMENT_KEYS
        }
        return {
            "name": self.name,
            "time_unit": self.time_unit,
            "market": market_data,
            "treatment": treatment,
            "experiment": self._experiment(),
        }

    def _experiment(self) -> dict:
        experiment = {"horizon": self.horizon, "burn_in": self.burn_in,
                      "minimum_effect": self.minimum_effect}
        if self.designs is not None:
            experiment["designs"] = [dict(spec) for spec in self.designs]
        if self.target is not None:
            experiment["target"] = dict([self.target])
        if self.replications is not None:
            experiment["replications"] = self.replications
        return experiment

    def to_json(self) -> str:
        """The scenario file's text."""
        return json.dumps(self.to_dict(), indent=2) + "\n"


def check_feature(market: Market, treatment: Treatment) -> None:
    """Check that ``treatment`` applies to ``market`` and changes its bookings.

    A scenario is there to measure a feature's effect: a treatment that does not
    fit the market would fail at the first simulation, and one with no effect at
    all (a null treatment, or a market where nobody can book) leaves every
    relative figure of the report undefined.

    Raises
    ------
    ValueError
        Naming the treatment field, or saying that the effect is zero.
    """
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    if not isinstance(treatment, Treatment):
        raise ValueError(
            f"treatment must be a marketsim.Treatment, got {type(treatment).__name__}")
    try:
        treatment.resolve(market)
    except ValueError as error:
        raise ValueError(f"treatment.{error}") from None
    if not treatment.changes_choice(market):
        raise ValueError(
            "treatment must change bookings in the market, got one that leaves every "
            f"customer's choice unchanged: {treatment!r} (a null treatment, or a market where "
            "nobody can book)"
        )


def _plain(value: object) -> object:
    return value.tolist() if hasattr(value, "tolist") else value


def load_scenario(path: str | Path) -> Scenario:
    """Read a scenario file.

    Parameters
    ----------
    path : str or Path
        A JSON file in the format of :mod:`marketsim.model.scenario_file`.

    Returns
    -------
    Scenario

    Raises
    ------
    ValueError
        If the file is not valid JSON, a key is missing or unknown, or a value
        is out of range; the message names the key (``market.arrival_rate must
        be ...``).
    """
    path = Path(path)
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ValueError(f"scenario file {str(path)!r} does not exist") from None
    except json.JSONDecodeError as error:
        raise ValueError(f"scenario file {str(path)!r} is not valid JSON: {error}") from None
    except UnicodeDecodeError as error:
        raise ValueError(f"scenario file {str(path)!r} is not UTF-8 text: {error}") from None
    except OSError as error:
        raise ValueError(
            f"scenario file {str(path)!r} cannot be read: {error.strerror or error}"
        ) from None
    return scenario_from_dict(data)


def scenario_from_dict(data: object) -> Scenario:
    """Build a :class:`Scenario` from the file format's data (see the module notes)."""
    section = _section(data, "scenario", TOP_KEYS,
                       required=("market", "treatment", "experiment"))
    market_data = _section(section["market"], "market", MARKET_KEYS,
                           required=MARKET_KEYS[:7])
    treatment_data = _section(section["treatment"], "treatment", TREATMENT_KEYS,
                              required=())
    experiment = _section(section["experiment"], "experiment", EXPERIMENT_KEYS,
                          required=("horizon", "minimum_effect"))
    for key in ("name", "time_unit"):
        if key in section and (not isinstance(section[key], str) or not section[key].strip()):
            raise ValueError(f"{key} must be a non-empty string, got {section[key]!r}")
    market = _prefixed("market", lambda: Market(**_market_arguments(market_data)))
    treatment = _prefixed("treatment", lambda: Treatment(**treatment_data))
    check_feature(market, treatment)
    return _prefixed("experiment", lambda: Scenario(
        name=section.get("name", "a marketplace"),
        market=market,
        treatment=treatment,
        horizon=experiment["horizon"],
        burn_in=experiment.get("burn_in", 0.0),
        minimum_effect=experiment["minimum_effect"],
        time_unit=section.get("time_unit", "time unit"),
        designs=experiment.get("designs"),
        target=(plan_spec.check_target(experiment["target"]) if "target" in experiment
                else None),
        replications=experiment.get("replications"),
    ))


def _market_arguments(data: dict) -> dict:
    """The market section with ``busy_time`` and ``demand`` read into their classes.

    ``busy_time`` is one shape object (``{"family": "lognormal", "cv": 2}``) for
    every listing type or a list of one per listing type; ``demand`` is a
    profile object (``{"multipliers": [...], "period": 24}``).
    """
    arguments = dict(data)
    if "busy_time" in data:
        value = data["busy_time"]
        if isinstance(value, list):
            arguments["busy_time"] = [busy_time_shapes.from_dict(item, f"busy_time[{k}]")
                                      for k, item in enumerate(value)]
        else:
            arguments["busy_time"] = busy_time_shapes.from_dict(value)
    if "demand" in data:
        arguments["demand"] = DemandProfile.from_dict(data["demand"])
    return arguments


def _section(data: object, name: str, allowed: tuple[str, ...],
             required: tuple[str, ...]) -> dict:
    if not isinstance(data, dict):
        raise ValueError(f"{name} must be a JSON object, got {type(data).__name__}")
    unknown = sorted(set(data) - set(allowed))
    if unknown:
        raise ValueError(
            f"{name} has an unknown key {unknown[0]!r}; allowed keys: {', '.join(allowed)}"
        )
    missing = [key for key in required if key not in data]
    if missing:
        raise ValueError(f"{name} must have the key {missing[0]!r}, got keys {sorted(data)}")
    return data


def _prefixed(section: str, build):
    """Run ``build`` and prefix the section to any error message."""
    try:
        return build()
    except ValueError as error:
        raise ValueError(f"{section}.{error}") from None
