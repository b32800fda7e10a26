"""How long to run: horizon plans from pilot studies.

The *horizon* is the length of the measured window of the experiment, after the
burn-in: the burn-in is simulated first (the market warms up) and not measured.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.designs import Design
from marketsim.model import Market, Treatment
from marketsim.planning.choice import DesignChoice
from marketsim.planning.durations import readable_duration
from marketsim.planning.sweep import require_market_and_treatment
from marketsim.power import detectable_standard_error, power_with_bias
from marketsim.randomness import SeedLike
from marketsim.study import Arm, Study
from marketsim.study.runs import run_studies

VERDICTS = ("reachable", "unreachable", "undecided")
"""A plan's verdict per estimator: the target is reached at the recommended
horizon; it is out of reach whatever the horizon (an RMSE target below the bias
floor); or the pilots cannot tell (the bias floor is within two Monte Carlo
standard errors of an RMSE target)."""


@dataclass(frozen=True)
class HorizonPlan:
    """How long to run one arm so that its estimators reach a target.

    The horizon is the measured window after the burn-in (the burn-in comes on
    top of it).

    Attributes
    ----------
    table : pandas.DataFrame
        One row per estimator of the arm: ``estimator``; the pilot horizons
        ``pilot_horizon, check_horizon`` and standard deviations ``sd_pilot,
        sd_check`` (with Monte Carlo errors ``sd_pilot_mc_se, sd_check_mc_se``);
        ``scaling_exponent`` (``log(sd_check / sd_pilot) / log(check / pilot)``,
        -0.5 under ``1/sqrt(horizon)`` scaling) with ``scaling_exponent_mc_se``
        and ``scaling_holds``; ``bias`` (the floor) with ``bias_mc_se``;
        ``truth`` (the longer pilot's global treatment effect); ``se_ratio``
        (mean reported standard error over the real spread at the longer pilot);
        ``target_sd`` (the real spread the target needs); ``recommended_horizon``
        (NaN when the target cannot be reached); ``expected_arrivals`` over that
        horizon; ``reachable`` (the point estimate of the bias allows the
        target); ``verdict`` (one of :data:`VERDICTS`); ``power, type_s, type_m,
        wrong_sign, overstated`` at the recommended horizon for the true effect,
        bias included, of the test the analyst runs (estimate over its reported
        standard error; see :func:`marketsim.power.power_with_bias`).
    notes : tuple of str
        Plain statements a decision should not miss (a bias larger than the
        noise, scaling that does not hold, the model's assumptions).
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
        """The plan in words: one verdict, with its reason, per estimator; then the notes."""
        lines = [f"Target: {self.target}. The horizon is the measured window after the "
                 "burn-in."]
        for row in self.table.itertuples(index=False):
            floor = f"{row.bias:+.3g} (Monte Carlo s.e. {row.bias_mc_se:.2g})"
            if row.verdict == "reachable":
                run = readable_duration(row.recommended_horizon, self.time_unit)
                lines.append(
                    f"- {row.estimator}: run {run}, about {row.expected_arrivals:,.0f} "
                    f"arrivals; bias floor {floor}. At the true effect ({row.truth:.3g}) the "
                    "analyst's test (estimate over its reported standard error) has power "
                    f"{row.power:.2f}; the chance of a significant result of the wrong sign is "
                    f"{_chance(row.wrong_sign)}; significant results are x{row.type_m:.2f} "
                    "the true effect on average."
                )
            elif row.verdict == "unreachable":
                lines.append(
                    f"- {row.estimator}: unreachable with this design: its bias floor {floor} "
                    "is above the target whatever the horizon (bias does not shrink with "
                    "time)."
                )
            else:
                horizon = ("" if not row.reachable else
                           "; if it is, the horizon would be "
                           f"{readable_duration(row.recommended_horizon, self.time_unit)}")
                lines.append(
                    f"- {row.estimator}: the pilots cannot tell whether the target is "
                    f"reachable: its bias floor {floor} is within two Monte Carlo standard "
                    f"errors of the target; run the pilots with more replications{horizon}."
                )
        lines.extend(f"Note: {note}" for note in self.notes)
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.report()


def plan_horizon(
    market: Market,
    treatment: Treatment,
    arm: Arm | Design | DesignChoice,
    *,
    pilot_horizon: float,
    burn_in: float = 0.0,
    target_se: float | None = None,
    target_relative_se: float | None = None,
    minimum_effect: float | None = None,
    relative_minimum_effect: float | None = None,
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
    max_seconds: float | None = None,
    max_events: int | None = None,
    time_unit: str = "time unit",
) -> HorizonPlan:
    """Recommend the horizon at which an arm's estimators reach a target.

    The horizon is the length of the measured window, after the burn-in. The
    standard deviation of each estimator is measured by simulation at a pilot
    horizon and at ``check_factor`` times it; if it shrinks like
    ``1/sqrt(horizon)`` between the two (within Monte Carlo error) the plan
    projects it that way from the longer horizon, otherwise it projects with
    the measured exponent and says so. The bias is measured at the longer
    horizon and kept as it is: it does not shrink with time.

    Parameters
    ----------
    market : Market
    treatment : Treatment
    arm : Arm, Design or DesignChoice
        What to size; a :class:`~marketsim.planning.DesignChoice` (from
        :func:`~marketsim.choose_design`) sizes its recommended design and
        estimator.
    pilot_horizon : float
        Length of the shorter pilot's measured window, > 0.
    burn_in : float
        Burn-in of every run (simulated before the window, not measured).
    target_se, target_relative_se, minimum_effect, relative_minimum_effect, target_rmse : float
        Exactly one. ``target_se``: the real standard deviation of the estimate
        to reach. ``target_relative_se``: the same as a fraction of the true
        effect (``0.02``: 2% of the effect; the truth is the longer pilot's
        global treatment effect). ``minimum_effect``: the smallest effect the
        analyst's test (estimate over its reported standard error, for an
        unbiased estimator) must detect with ``power`` at two-sided level
        ``alpha``: ``target_sd = |minimum_effect| / (z_{1-alpha/2} * se_ratio +
        z_{power})``, ``se_ratio`` the reported standard error over the real
        spread measured at the longer pilot. ``relative_minimum_effect``: the
        same as a fraction of the true effect. ``target_rmse``: the root mean
        squared error to reach, bias included (out of reach when ``|bias| >=
        target_rmse``).
    alpha, power : float
        Significance level and power (for the minimum effect and for the power
        columns).
    metric : {"bookings", "revenue", "conversion"}
    replications : int
        Replications of each pilot study.
    check_factor : float
        The second pilot horizon is ``check_factor * pilot_horizon``, > 1.
    seed, workers, progress, backend, client, store, max_seconds, max_events
        As for :meth:`Study.run`; the pilots get the children of ``seed`` with
        spawn keys 0 and 1 and run together (one store holds both).
    time_unit : str
        Name of the market's time unit, used in the plan's report (long
        horizons are also given in days, weeks or years when it is a known unit).

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
    targets = {"target_se": target_se, "target_relative_se": target_relative_se,
               "minimum_effect": minimum_effect,
               "relative_minimum_effect": relative_minimum_effect, "target_rmse": target_rmse}
    given = [name for name, value in targets.items() if value is not None]
    if len(given) != 1:
        raise ValueError(
            "give exactly one of " + ", ".join(targets) + ", got "
            f"{', '.join(given) if given else 'none'}"
        )
    kind = given[0]
    value = check.number(kind, targets[kind], low=0.0, low_open=True)
    pilot = check.number("pilot_horizon", pilot_horizon, low=0.0, low_open=True)
    factor = check.number("check_factor", check_factor, low=1.0, low_open=True)
    arm = as_arm(arm)
    pilots = [Study(market, treatment, [arm], horizon=horizon, burn_in=burn_in, metric=metric)
              for horizon in (pilot, pilot * factor)]
    runs, interrupted = run_studies(
        pilots, replications, seed, kind="horizon plan", split=True, backend=backend,
        workers=workers, client=client, store=store, progress=progress, desc="pilots",
        max_seconds=max_seconds, max_events=max_events)
    if interrupted:
        kept = f" (what finished is kept in {str(store)!r})" if store is not None else ""
        raise KeyboardInterrupt(f"plan_horizon stopped: a plan needs both pilot studies{kept}")
    short, long = runs[0].summary, runs[1].summary
    truth = float(long["truth"].iloc[0])
    if kind in ("target_relative_se", "relative_minimum_effect") and truth == 0.0:
        raise ValueError(f"{kind} needs a non-zero effect, but the pilots' global "
                         "treatment effect is 0")
    target_text = _target_text(kind, value, truth, alpha, power)
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
        ratio = float(long["mean_naive_se"].iloc[k]) / sd2
        name = str(long["estimator"].iloc[k])
        needed, verdict = _needed_sd(kind, value, truth, bias, bias_se, ratio, alpha, power)
        reachable = bool(np.isfinite(needed))
        horizon = pilot * factor * (needed / sd2) ** (1.0 / slope) if reachable else math.nan
        errors = power_with_bias(truth, bias, needed if reachable else sd2, alpha,
                                 test_standard_error=ratio * (needed if reachable else sd2))
        shown = reachable and verdict == "reachable"
        rows.append({
            "estimator": name,
            "pilot_horizon": pilot, "sd_pilot": sd1, "sd_pilot_mc_se": se1,
            "check_horizon": pilot * factor, "sd_check": sd2, "sd_check_mc_se": se2,
            "scaling_exponent": exponent, "scaling_exponent_mc_se": exponent_se,
            "scaling_holds": holds,
            "truth": truth, "bias": bias, "bias_mc_se": bias_se, "se_ratio": ratio,
            "target_sd": needed, "recommended_horizon": horizon,
            "expected_arrivals": market.arrival_rate * horizon,
            "reachable": reachable, "verdict": verdict,
            **{key: getattr(errors, key) if shown else math.nan
               for key in ("power", "type_s", "type_m", "wrong_sign", "overstated")},
        })
        if not holds:
            notes.append(
                f"{name}: the standard deviation does not shrink like 1/sqrt(horizon) "
                f"between the pilots (exponent {exponent:.2f} +- {exponent_se:.2f}, "
                "expected -0.5); the plan projects with the measured exponent. A longer "
                "burn-in or longer pilots may be needed."
            )
        if reachable and abs(bias) > 2.0 * bias_se and abs(bias) > needed:
            notes.append(
                f"{name}: its bias ({bias:+.3g}) is larger than the target standard deviation "
                f"({needed:.3g}); at the recommended horizon the test is precise about the "
                "wrong number. More traffic will not fix that; another design might."
            )
    notes.append(
        "The plan comes from a model of the market (Poisson arrivals, logit choice, "
        "exponential busy times, stationarity) and from Monte Carlo pilots; the recommended "
        "horizon carries the pilots' Monte Carlo error (about "
        f"{100 * 2 * math.sqrt(1 / (2 * (replications - 1))):.0f}% here)."
    )
    return HorizonPlan(table=pd.DataFrame(rows), notes=tuple(notes), target=target_text,
                       time_unit=time_unit)


def as_arm(subject: Arm | Design | DesignChoice) -> Arm:
    """The arm to size: an Arm as it is, a Design with its own estimators, or the
    recommended arm of a design choice (anything with a ``recommended_arm``)."""
    if isinstance(subject, Arm):
        return subject
    if isinstance(subject, Design):
        return Arm(subject)
    recommended = getattr(subject, "recommended_arm", None)
    if isinstance(recommended, Arm):
        return recommended
    raise ValueError("arm must be a marketsim.Arm, a Design or a DesignChoice (from "
                     f"ms.choose_design), got {type(subject).__name__}")


def _target_text(kind: str, value: float, truth: float, alpha: float, power: float) -> str:
    effect = f"the pilots' global treatment effect {truth:.4g}"
    test = (f"with power {power:g} at two-sided level {alpha:g}, by the analyst's test "
            "(estimate over its reported standard error)")
    if kind == "target_se":
        return f"standard deviation of the estimate {value:.4g}"
    if kind == "target_relative_se":
        return (f"standard deviation of the estimate {value:.3g} of the effect "
                f"({value * abs(truth):.4g}; {effect})")
    if kind == "minimum_effect":
        return f"detect an effect of {value:.4g} {test}"
    if kind == "relative_minimum_effect":
        return (f"detect an effect of {value:.3g} of the true effect ({value * abs(truth):.4g}; "
                f"{effect}) {test}")
    return f"RMSE {value:.4g} (bias included)"


def _needed_sd(kind: str, value: float, truth: float, bias: float, bias_se: float,
               ratio: float, alpha: float, power: float) -> tuple[float, str]:
    """The real standard deviation the target needs (NaN if none) and the verdict."""
    if kind == "target_se":
        return value, "reachable"
    if kind == "target_relative_se":
        return value * abs(truth), "reachable"
    if kind in ("minimum_effect", "relative_minimum_effect"):
        effect = value if kind == "minimum_effect" else value * abs(truth)
        return detectable_standard_error(effect, alpha, power, se_ratio=ratio), "reachable"
    needed = math.sqrt(value**2 - bias**2) if abs(bias) < value else math.nan
    if abs(bias) + 2.0 * bias_se < value:
        return needed, "reachable"
    if abs(bias) - 2.0 * bias_se >= value:
        return needed, "unreachable"
    return needed, "undecided"


def _chance(p: float) -> str:
    """A probability in words: two significant digits, or "below 0.001"."""
    return "below 0.001" if p < 0.001 else f"{p:.2g}"


def _sd_error(sd: float, n: int) -> float:
    """Approximate Monte Carlo standard error of a sample standard deviation (normal data)."""
    return sd / math.sqrt(2.0 * (n - 1))


__all__ = ["VERDICTS", "HorizonPlan", "plan_horizon", "as_arm"]
