"""Planning an experiment: sweeps, horizon and sample size, power, design choice.

This is what a user finally acts on: which design, which treated fractions,
how long to run, and what the answer will be worth. Everything here builds on
:class:`marketsim.Study` (simulation) and :mod:`marketsim.meanfield` (the
large-market limit).

Two facts shape every plan. The standard deviation of an estimator shrinks
like ``1 / sqrt(horizon)`` (checked at two horizons, never assumed), but its
bias, which comes from interference, does not shrink at all: it is a floor
under the RMSE that no amount of traffic removes.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from tqdm import tqdm

from marketsim import _validation as check
from marketsim import meanfield
from marketsim.designs import (
    CustomerSide,
    Design,
    ListingSide,
    TwoSided,
    TwoSidedFollowingBalance,
)
from marketsim.estimators import METRICS
from marketsim.market import Market, Treatment
from marketsim.power import detectable_standard_error, power_with_bias
from marketsim.randomness import SeedLike, spawn
from marketsim.study import Arm, Study, StudyResult, rmse_influence

ArmLike = Arm | Design | Callable[[float], Design]
"""An arm, a design, or a callable ``balance -> Design`` (e.g. ``ms.TwoSided.for_balance``)."""

MODES = ("large-market", "simulation")

SWEEP_COLUMNS = [
    "parameter", "value", "balance", "arm", "design", "estimator", "metric", "truth",
    "mean_estimate", "bias", "relative_bias", "sd", "rmse", "mode",
]
SIMULATION_COLUMNS = ["truth_mc_se", "bias_mc_se", "rmse_mc_se", "mean_naive_se", "coverage",
                      "coverage_mc_se", "replications"]


# --------------------------------------------------------------------------- sweeps
def sweep(
    market: Market,
    treatment: Treatment,
    arms: Sequence[ArmLike],
    values: Sequence[float] | np.ndarray,
    *,
    parameter: str | Callable[[Market, object], Market] = "balance",
    mode: str = "large-market",
    metric: str = "bookings",
    horizon: float | None = None,
    burn_in: float = 0.0,
    replications: int | None = None,
    seed: SeedLike = None,
    workers: int = 1,
    progress: bool = True,
) -> pd.DataFrame:
    """Bias, standard deviation and RMSE of each arm over a range of one market parameter.

    Parameters
    ----------
    market : Market
        The market at which every parameter not swept stays.
    treatment : Treatment
    arms : sequence of Arm, Design or callable
        What to score at every point. :class:`~marketsim.TwoSidedFollowingBalance`
        follows balance (put it in an ``Arm`` to choose its estimators); a
        callable ``balance -> Design`` (such as ``ms.TwoSided.for_balance``) works
        too.
    values : sequence
        The values of ``parameter`` to visit.
    parameter : str or callable
        ``"balance"`` (default: the arrival rate is rescaled,
        :meth:`Market.with_balance`), the name of any :class:`Market` parameter
        (``"arrival_rate"``, ``"mean_busy_time"``, ``"utility"``, ...; each value
        is passed to :meth:`Market.replace`), or a callable
        ``(market, value) -> Market``.
    mode : {"large-market", "simulation"}
        ``"large-market"`` is instant and exact in the limit of many listings
        (:mod:`marketsim.meanfield`) but has no noise: ``sd`` is NaN and ``rmse``
        equals ``|bias|``, the floor no horizon goes below. ``"simulation"`` runs
        a :class:`Study` at every point (needs ``horizon`` and ``replications``)
        and reports Monte Carlo standard errors.
    metric : {"bookings", "revenue", "conversion"}
    horizon, burn_in, replications, seed, workers
        Passed to the study at each point (simulation mode); the points get
        independent seeds from ``seed``.
    progress : bool
        Progress bar over the points (simulation mode).

    Returns
    -------
    pandas.DataFrame
        One row per point x arm x estimator, columns ``parameter, value,
        balance, arm, design, estimator, metric, truth, mean_estimate, bias,
        relative_bias, sd, rmse, mode`` (and, in simulation mode, the Monte Carlo
        columns ``truth_mc_se, bias_mc_se, rmse_mc_se, mean_naive_se, coverage,
        coverage_mc_se, replications``). Draw it with
        :func:`marketsim.plotting.planning.plot_sweep`.

    Examples
    --------
    >>> import marketsim as ms
    >>> table = ms.sweep(ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3),
    ...                  arms=[ms.CustomerSide(0.5), ms.ListingSide(0.5)],
    ...                  values=[0.1, 1.0, 10.0])
    >>> table.groupby("estimator").size().to_dict()
    {'customer-side': 3, 'listing-side': 3}
    """
    _require(market, treatment)
    check.choice("mode", mode, MODES)
    check.choice("metric", metric, METRICS)
    points = _points(values)
    vary, name = _variation(parameter)
    arm_likes = _arm_likes(arms)
    markets = [vary(market, value) for value in points]
    if mode == "large-market":
        frames = [_large_market_point(at, treatment, arm_likes, metric) for at in markets]
    else:
        if horizon is None or replications is None:
            raise ValueError(
                "mode 'simulation' needs horizon and replications, got "
                f"horizon={horizon!r}, replications={replications!r}"
            )
        frames = _simulate_points(markets, treatment, arm_likes, horizon, burn_in, metric,
                                  replications, seed, workers, progress)
    rows = []
    for value, at, frame in zip(points, markets, frames):
        frame = frame.copy()
        frame.insert(0, "balance", at.balance)
        frame.insert(0, "value", value)
        frame.insert(0, "parameter", name)
        rows.append(frame)
    columns = SWEEP_COLUMNS + (SIMULATION_COLUMNS if mode == "simulation" else [])
    return pd.concat(rows, ignore_index=True)[columns]


def _simulate_points(markets: list[Market], treatment: Treatment, arm_likes: list[ArmLike],
                     horizon: float, burn_in: float, metric: str, replications: int,
                     seed: SeedLike, workers: int, progress: bool) -> list[pd.DataFrame]:
    """One study per point; Ctrl-C keeps the points finished (and a partial last one)."""
    frames = []
    points = tqdm(markets, desc="sweep", unit="point", disable=not progress)
    for at, child in zip(points, spawn(seed, len(markets))):
        study = Study(at, treatment, [_arm_at(a, at) for a in arm_likes],
                      horizon=horizon, burn_in=burn_in, metric=metric)
        try:
            result = study.run(replications, seed=child, workers=workers, progress=False)
        except KeyboardInterrupt:  # fewer than two replications of this point finished
            result = None
        if result is not None:
            frames.append(_simulation_point(result))
        if result is None or result.interrupted:
            if not frames:
                raise KeyboardInterrupt
            warnings.warn(
                f"sweep interrupted: returning {len(frames)} of {len(markets)} points (see "
                "the replications column: the last point may have fewer)",
                RuntimeWarning, stacklevel=3,
            )
            break
    return frames


def _large_market_point(market: Market, treatment: Treatment, arm_likes: list[ArmLike],
                        metric: str) -> pd.DataFrame:
    frames = []
    for arm_like in arm_likes:
        arm = _arm_at(arm_like, market)
        estimators = arm.resolve(market)
        table = meanfield.expected_estimates(market, treatment, arm.design, estimators, metric)
        table = table.rename(columns={"expected_estimate": "mean_estimate"})
        table["design"] = arm.design.label
        table.insert(0, "arm", arm.label)
        frames.append(table)
    frame = pd.concat(frames, ignore_index=True)
    frame["sd"] = math.nan
    frame["rmse"] = frame["bias"].abs()
    frame["mode"] = "large-market"
    return frame.drop(columns=["balance"])


def _simulation_point(result: StudyResult) -> pd.DataFrame:
    frame = result.summary.copy()
    frame["mode"] = "simulation"
    return frame


def _points(values: object) -> list:
    if isinstance(values, (str, bytes)):
        raise ValueError(f"values must be a non-empty list, got {values!r}")
    try:
        points = list(values)  # type: ignore[arg-type]
    except TypeError:
        raise ValueError(f"values must be a non-empty list, got {values!r}") from None
    if not points:
        raise ValueError("values must be a non-empty list, got []")
    return points


def _variation(parameter: object) -> tuple[Callable[[Market, object], Market], str]:
    if callable(parameter):
        return parameter, getattr(parameter, "__name__", "custom")
    if parameter == "balance":
        return (lambda market, value: market.with_balance(value)), "balance"
    allowed = ["balance", "arrival_rate", "listing_counts", "mean_busy_time",
               "customer_shares", "consideration", "utility", "outside_utility", "price"]
    check.choice("parameter", parameter, allowed)
    return (lambda market, value: market.replace(**{parameter: value})), str(parameter)


def _arm_likes(arms: object) -> list[ArmLike]:
    if isinstance(arms, (Arm, Design)) or callable(arms):
        return [arms]
    items = list(arms)  # type: ignore[arg-type]
    if not items:
        raise ValueError("arms must name at least one arm, got []")
    for item in items:
        if not isinstance(item, (Arm, Design)) and not callable(item):
            raise ValueError(
                "arms must contain marketsim.Arm or Design objects or callables "
                f"balance -> Design (e.g. ms.TwoSided.for_balance), got {type(item).__name__}"
            )
    return items


def _arm_at(arm_like: ArmLike, market: Market) -> Arm:
    """The concrete arm of ``arm_like`` in ``market`` (callables follow its balance)."""
    if isinstance(arm_like, Arm):
        return arm_like
    if isinstance(arm_like, Design):
        return Arm(arm_like)
    design = arm_like(market.balance)
    if not isinstance(design, Design):
        raise ValueError(
            f"arm {arm_like!r} must return a marketsim.Design for a balance, got "
            f"{type(design).__name__}"
        )
    return Arm(design, name=_follower_name(arm_like))


def _follower_name(function: Callable[[float], Design]) -> str:
    """Table name of a design that follows balance."""
    if function == TwoSided.for_balance:
        return "two-sided (follows balance)"
    name = getattr(function, "__qualname__", getattr(function, "__name__", "custom design"))
    return f"{name} (follows balance)"


def _require(market: object, treatment: object) -> None:
    if not isinstance(market, Market):
        raise ValueError(f"market must be a marketsim.Market, got {type(market).__name__}")
    if not isinstance(treatment, Treatment):
        raise ValueError(
            f"treatment must be a marketsim.Treatment, got {type(treatment).__name__}"
        )


# --------------------------------------------------------------------------- power
def power_table(result: StudyResult, alpha: float = 0.05,
                effect: float | None = None) -> pd.DataFrame:
    """Power, type S and type M errors of every arm and estimator of a study.

    The estimate of each row is taken as normal with the row's bias and
    standard deviation (``sd``, the real noise, not the naive standard error).

    Parameters
    ----------
    result : StudyResult
    alpha : float
        Two-sided significance level.
    effect : float, optional
        The true effect to plan for (default: the study's global treatment
        effect, ``truth``).

    Returns
    -------
    pandas.DataFrame
        ``arm, estimator, metric, truth, bias, sd, power, type_s, type_m`` and
        ``false_positive_rate``: the chance of a significant result if the
        feature did nothing but the bias stayed.

    References
    ----------
    Gelman and Carlin, Perspectives on Psychological Science 9(6), 2014.
    """
    if not isinstance(result, StudyResult):
        raise ValueError(f"result must be a marketsim.StudyResult, got {type(result).__name__}")
    rows = []
    for row in result.summary.itertuples(index=False):
        true_effect = row.truth if effect is None else check.number("effect", effect)
        errors = power_with_bias(true_effect, row.bias, max(row.sd, 1e-300), alpha)
        null = power_with_bias(0.0, row.bias, max(row.sd, 1e-300), alpha)
        rows.append({
            "arm": row.arm, "estimator": row.estimator, "metric": row.metric,
            "truth": true_effect, "bias": row.bias, "sd": row.sd,
            "power": errors.power, "type_s": errors.type_s, "type_m": errors.type_m,
            "false_positive_rate": null.power,
        })
    return pd.DataFrame(rows)


# --------------------------------------------------------------------------- horizon
@dataclass(frozen=True)
class HorizonPlan:
    """How long to run one arm so that its estimators reach a target.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per estimator of the arm: ``estimator``; the pilot horizons
        ``pilot_horizon, check_horizon`` and standard deviations ``sd_pilot,
        sd_check`` (with Monte Carlo errors ``sd_pilot_mc_se, sd_check_mc_se``);
        ``scaling_exponent`` (``log(sd_check / sd_pilot) / log(check / pilot)``,
        -0.5 under ``1/sqrt(horizon)`` scaling) with ``scaling_exponent_mc_se``
        and ``scaling_holds``; ``bias`` (the floor) with ``bias_mc_se``;
        ``truth``; ``target_sd`` (the standard deviation the target needs);
        ``recommended_horizon`` (NaN when unreachable); ``expected_arrivals``
        over that horizon; ``reachable``; ``power, type_s, type_m`` at the
        recommended horizon for the true effect (bias included).
    notes : tuple of str
        Plain statements a decision should not miss (unreachable targets, a
        bias larger than the noise, scaling that does not hold).
    target : str
        The target in words.
    time_unit : str
        Name of the market's time unit, for the report (``"hour"``, ...).
    """

    table: pd.DataFrame
    notes: tuple[str, ...]
    target: str
    time_unit: str = "time unit"

    def to_frame(self) -> pd.DataFrame:
        """The plan table (a copy)."""
        return self.table.copy()

    def report(self) -> str:
        """The plan in words: one paragraph per estimator and the notes."""
        lines = [f"Target: {self.target}."]
        for row in self.table.itertuples(index=False):
            if row.reachable:
                lines.append(
                    f"- {row.estimator}: run {row.recommended_horizon:.4g} {self.time_unit}s "
                    f"(about {row.expected_arrivals:.0f} arrivals); bias floor "
                    f"{row.bias:+.3g} (Monte Carlo s.e. {row.bias_mc_se:.2g}); at the true effect "
                    f"({row.truth:.3g}) power "
                    f"{row.power:.2f}, wrong-sign risk {row.type_s:.2g}, exaggeration "
                    f"x{row.type_m:.2f}."
                )
            else:
                lines.append(
                    f"- {row.estimator}: the target is unreachable with this design: its "
                    f"bias of {row.bias:+.3g} (Monte Carlo s.e. {row.bias_mc_se:.2g}) does "
                    "not shrink with time."
                )
        lines.extend(f"Note: {note}" for note in self.notes)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.report()


def plan_horizon(
    market: Market,
    treatment: Treatment,
    arm: Arm | Design,
    *,
    pilot_horizon: float,
    burn_in: float = 0.0,
    target_se: float | None = None,
    minimum_effect: float | None = None,
    target_rmse: float | None = None,
    alpha: float = 0.05,
    power: float = 0.8,
    metric: str = "bookings",
    replications: int = 200,
    check_factor: float = 4.0,
    seed: SeedLike = None,
    workers: int = 1,
    progress: bool = True,
    time_unit: str = "time unit",
) -> HorizonPlan:
    """Recommend the horizon at which an arm's estimators reach a target.

    The standard deviation of each estimator is measured by simulation at a
    pilot horizon and at ``check_factor`` times it; if it shrinks like
    ``1/sqrt(horizon)`` between the two (within Monte Carlo error) the plan
    projects it that way from the longer horizon, otherwise it projects with
    the measured exponent and says so. The bias is measured at the longer
    horizon and kept as it is: it does not shrink with time.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    arm : Arm or Design
    pilot_horizon : float
        Length of the shorter pilot window, > 0.
    burn_in : float
        Burn-in of every run.
    target_se, minimum_effect, target_rmse : float
        Exactly one. ``target_se``: the standard deviation to reach.
        ``minimum_effect``: the smallest effect to detect with ``power`` at
        two-sided level ``alpha``, i.e. ``target_se = |minimum_effect| /
        (z_{1-alpha/2} + z_{power})``. ``target_rmse``: the root mean squared
        error to reach, bias included (unreachable when ``|bias| >= target_rmse``).
    alpha, power : float
        Significance level and power (for ``minimum_effect`` and for the power
        columns).
    metric : {"bookings", "revenue", "conversion"}
    replications : int
        Replications of each pilot study.
    check_factor : float
        The second pilot horizon is ``check_factor * pilot_horizon``, > 1.
    seed, workers, progress
        As for :meth:`Study.run`.
    time_unit : str
        Name of the market's time unit, used in the plan's report.

    Returns
    -------
    HorizonPlan

    Examples
    --------
    >>> import marketsim as ms
    >>> plan = ms.plan_horizon(ms.scenarios.rehearsal_rooms(),
    ...                        ms.scenarios.instant_confirmation(), ms.CustomerSide(0.5),
    ...                        pilot_horizon=20.0, burn_in=10.0, target_se=0.05,
    ...                        replications=20, seed=1, progress=False)
    >>> plan.table["estimator"].tolist()
    ['customer-side']
    """
    _require(market, treatment)
    targets = {"target_se": target_se, "minimum_effect": minimum_effect,
               "target_rmse": target_rmse}
    given = [name for name, value in targets.items() if value is not None]
    if len(given) != 1:
        raise ValueError(
            "give exactly one of target_se, minimum_effect and target_rmse, got "
            f"{', '.join(given) if given else 'none'}"
        )
    pilot = check.number("pilot_horizon", pilot_horizon, low=0.0, low_open=True)
    factor = check.number("check_factor", check_factor, low=1.0, low_open=True)
    if target_se is not None:
        goal = check.number("target_se", target_se, low=0.0, low_open=True)
        target_text = f"standard error {goal:.4g}"
    elif minimum_effect is not None:
        goal = detectable_standard_error(minimum_effect, alpha, power)
        target_text = (f"detect an effect of {abs(minimum_effect):.4g} with power {power:g} at "
                       f"two-sided level {alpha:g} (standard error {goal:.4g})")
    else:
        goal = check.number("target_rmse", target_rmse, low=0.0, low_open=True)
        target_text = f"RMSE {goal:.4g} (bias included)"
    arm = arm if isinstance(arm, Arm) else Arm(arm)
    first, second = spawn(seed, 2)
    runs = []
    for horizon, child in ((pilot, first), (pilot * factor, second)):
        study = Study(market, treatment, [arm], horizon=horizon, burn_in=burn_in,
                      metric=metric)
        run = study.run(replications, seed=child, workers=workers, progress=progress)
        if run.interrupted:
            raise KeyboardInterrupt("plan_horizon stopped: a plan needs both pilot studies")
        runs.append(run)
    short, long = runs[0].summary, runs[1].summary
    log_ratio = math.log(factor)
    rows, notes = [], []
    for k in range(len(long)):
        sd1, sd2 = float(short["sd"].iloc[k]), float(long["sd"].iloc[k])
        n1, n2 = int(short["replications"].iloc[k]), int(long["replications"].iloc[k])
        se1, se2 = _sd_error(sd1, n1), _sd_error(sd2, n2)
        exponent = math.log(sd2 / sd1) / log_ratio
        exponent_se = math.hypot(se1 / sd1, se2 / sd2) / log_ratio
        holds = abs(exponent + 0.5) <= max(3.0 * exponent_se, 0.1)
        slope = -0.5 if holds else min(exponent, -1e-3)
        bias = float(long["bias"].iloc[k])
        bias_se = float(long["bias_mc_se"].iloc[k])
        truth = float(long["truth"].iloc[k])
        name = str(long["estimator"].iloc[k])
        needed = goal
        if target_rmse is not None:
            needed = math.sqrt(goal**2 - bias**2) if abs(bias) < goal else math.nan
        reachable = bool(np.isfinite(needed))
        horizon = pilot * factor * (needed / sd2) ** (1.0 / slope) if reachable else math.nan
        errors = power_with_bias(truth, bias, needed if reachable else sd2, alpha)
        rows.append({
            "estimator": name,
            "pilot_horizon": pilot, "sd_pilot": sd1, "sd_pilot_mc_se": se1,
            "check_horizon": pilot * factor, "sd_check": sd2, "sd_check_mc_se": se2,
            "scaling_exponent": exponent, "scaling_exponent_mc_se": exponent_se,
            "scaling_holds": holds,
            "truth": truth, "bias": bias, "bias_mc_se": bias_se,
            "target_sd": needed, "recommended_horizon": horizon,
            "expected_arrivals": market.arrival_rate * horizon,
            "reachable": reachable,
            "power": errors.power if reachable else math.nan,
            "type_s": errors.type_s if reachable else math.nan,
            "type_m": errors.type_m if reachable else math.nan,
        })
        if not holds:
            notes.append(
                f"{name}: the standard deviation does not shrink like 1/sqrt(horizon) "
                f"between the pilots (exponent {exponent:.2f} +- {exponent_se:.2f}, "
                "expected -0.5); the plan projects with the measured exponent. A longer "
                "burn-in or longer pilots may be needed."
            )
        significant_bias = abs(bias) > 2.0 * bias_se
        if reachable and significant_bias and abs(bias) > needed:
            notes.append(
                f"{name}: its bias ({bias:+.3g}) is larger than the target standard error "
                f"({needed:.3g}); at the recommended horizon the test is precise about the "
                "wrong number. More traffic will not fix that; another design might."
            )
        if not reachable:
            notes.append(
                f"{name}: target RMSE {goal:.3g} is unreachable: the bias floor is "
                f"{bias:+.3g} (Monte Carlo s.e. {bias_se:.2g}) whatever the horizon."
            )
            if abs(bias) - 2.0 * bias_se < goal:
                notes.append(
                    f"{name}: the bias is within two Monte Carlo standard errors of the "
                    "target, so the pilots cannot tell whether the target is reachable; "
                    "run them with more replications."
                )
    notes.append(
        "The plan comes from a model of the market (Poisson arrivals, logit choice, "
        "exponential busy times, stationarity) and from Monte Carlo pilots; the recommended "
        "horizon carries the pilots' Monte Carlo error (about "
        f"{100 * 2 * math.sqrt(1 / (2 * (replications - 1))):.0f}% here)."
    )
    return HorizonPlan(table=pd.DataFrame(rows), notes=tuple(notes), target=target_text,
                       time_unit=time_unit)


def _sd_error(sd: float, n: int) -> float:
    """Approximate Monte Carlo standard error of a sample standard deviation (normal data)."""
    return sd / math.sqrt(2.0 * (n - 1))


# --------------------------------------------------------------------------- design choice
@dataclass(frozen=True)
class DesignChoice:
    """The designs compared at the planned horizon, and the one recommended.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per arm x estimator, sorted by RMSE: the study's summary columns
        plus ``bias_share`` (the share of the mean squared error that is bias)
        and ``rank``.
    recommended : pandas.Series
        The row with the smallest RMSE.
    notes : tuple of str
        Whether the runner-up is within Monte Carlo error, and the caveats.
    result : StudyResult
        The study behind the table.
    """

    table: pd.DataFrame
    recommended: pd.Series
    notes: tuple[str, ...]
    result: StudyResult

    def to_frame(self) -> pd.DataFrame:
        """The ranked table (a copy)."""
        return self.table.copy()

    def report(self) -> str:
        """The recommendation in words."""
        best = self.recommended
        lines = [
            f"Recommended: {best['arm']} with the {best['estimator']} estimator: RMSE "
            f"{best['rmse']:.3g} (bias {best['bias']:+.3g}, sd {best['sd']:.3g})."
        ]
        lines.extend(f"Note: {note}" for note in self.notes)
        return "\n".join(lines)

    def plot(self):
        """RMSE of every candidate split into bias and noise; returns a Figure."""
        from marketsim.plotting.planning import plot_design_choice

        return plot_design_choice(self.table)

    def __str__(self) -> str:
        return self.report()


def default_candidates() -> list[Arm]:
    """A grid of designs and treated fractions to compare (the default of :func:`choose_design`)."""
    arms = [Arm(CustomerSide(a)) for a in (0.25, 0.5, 0.75)]
    arms += [Arm(ListingSide(a)) for a in (0.25, 0.5, 0.75)]
    arms.append(Arm(TwoSided(0.5, 0.5)))
    arms.append(Arm(TwoSidedFollowingBalance()))
    return arms


def choose_design(
    market: Market,
    treatment: Treatment,
    *,
    horizon: float,
    burn_in: float = 0.0,
    candidates: Sequence[Arm | Design] | None = None,
    metric: str = "bookings",
    replications: int = 100,
    seed: SeedLike = None,
    workers: int = 1,
    progress: bool = True,
) -> DesignChoice:
    """Compare designs and treated fractions by their RMSE at the planned horizon.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    horizon : float
        The planned length of the experiment.
    burn_in : float
    candidates : sequence of Arm or Design, optional
        Default :func:`default_candidates`: customer-side and listing-side at
        25%, 50% and 75% treated, two-sided 50/50 and two-sided following balance.
    metric : {"bookings", "revenue", "conversion"}
    replications, seed, workers, progress
        As for :meth:`Study.run`.

    Returns
    -------
    DesignChoice
    """
    _require(market, treatment)
    arms = default_candidates() if candidates is None else list(candidates)
    study = Study(market, treatment, arms, horizon=horizon, burn_in=burn_in, metric=metric)
    result = study.run(replications, seed=seed, workers=workers, progress=progress)
    table = result.summary.sort_values("rmse", kind="stable").reset_index(drop=True)
    mse = table["rmse"] ** 2
    table["bias_share"] = np.where(mse > 0, table["bias"] ** 2 / mse, 0.0)
    table["rank"] = np.arange(1, len(table) + 1)
    best = table.iloc[0]
    notes = []
    if len(table) > 1:
        runner = table.iloc[1]
        gap = runner["rmse"] - best["rmse"]
        noise = _rmse_difference_error(result, best, runner)
        if gap < 2.0 * noise:
            notes.append(
                f"The runner-up ({runner['arm']}, {runner['estimator']}) is within Monte "
                f"Carlo error (RMSE {runner['rmse']:.3g} against {best['rmse']:.3g}, "
                f"difference {gap:.2g}, paired Monte Carlo s.e. {noise:.2g}); more "
                "replications would separate them."
            )
    if best["bias_share"] > 0.5:
        notes.append(
            "Most of the best RMSE is bias: a longer experiment will not help much; the "
            "bias comes from interference between treated and control units."
        )
    notes.append(result.caveats)
    return DesignChoice(table=table, recommended=best, notes=tuple(notes), result=result)


def _rmse_difference_error(result: StudyResult, first: pd.Series, second: pd.Series) -> float:
    """Monte Carlo standard error of the difference of two rows' RMSEs.

    Every arm of a study shares its replication's random numbers with the global
    worlds and the other arms (and estimators on one arm share its ledger), so the
    two RMSEs are correlated: the error is computed from the paired per-replication
    influence values (:func:`marketsim.study.rmse_influence`), not as if the rows
    were independent.
    """
    raw = result.replications

    def influence(row: pd.Series) -> np.ndarray:
        mine = raw[(raw["arm"] == row["arm"]) & (raw["estimator"] == row["estimator"])
                   & (raw["metric"] == row["metric"])].sort_values("replication")
        return rmse_influence(mine["estimate"].to_numpy(float),
                              mine["replication_truth"].to_numpy(float))

    difference = influence(first) - influence(second)
    return float(np.std(difference, ddof=1) / math.sqrt(difference.size))


__all__ = [
    "sweep",
    "power_table",
    "HorizonPlan",
    "plan_horizon",
    "DesignChoice",
    "choose_design",
    "default_candidates",
]
