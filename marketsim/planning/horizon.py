"""How long to run: horizon plans from pilot studies, and power tables of a study."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.designs import Design
from marketsim.model import Market, Treatment
from marketsim.planning.sweep import require_market_and_treatment
from marketsim.power import detectable_standard_error, power_with_bias
from marketsim.randomness import SeedLike
from marketsim.study import Arm, Study, StudyResult
from marketsim.study.runs import run_studies


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
    backend: str = "local",
    client: object = None,
    store: str | os.PathLike | None = None,
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
    seed, workers, progress, backend, client, store
        As for :meth:`Study.run`; the pilots get the children of ``seed`` with
        spawn keys 0 and 1 and run together (one store holds both).
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
    require_market_and_treatment(market, treatment)
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
    pilots = [Study(market, treatment, [arm], horizon=horizon, burn_in=burn_in, metric=metric)
              for horizon in (pilot, pilot * factor)]
    runs, interrupted = run_studies(
        pilots, replications, seed, kind="horizon plan", split=True, backend=backend,
        workers=workers, client=client, store=store, progress=progress, desc="pilots")
    if interrupted:
        kept = f" (what finished is kept in {str(store)!r})" if store is not None else ""
        raise KeyboardInterrupt(f"plan_horizon stopped: a plan needs both pilot studies{kept}")
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


__all__ = ["HorizonPlan", "plan_horizon", "power_table"]
