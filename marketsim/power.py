"""Power, sample size and the errors of significant estimates, for a biased estimator.

The estimate is taken as normal: ``estimate ~ N(effect + bias, standard_error**2)``.
Bias is what interference adds; it does not shrink with more traffic.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from scipy.stats import norm

from marketsim import _validation as check


def _alpha(alpha: float) -> float:
    return check.number("alpha", alpha, low=0.0, high=1.0, low_open=True, high_open=True)


def _power(power: float) -> float:
    return check.number("power", power, low=0.0, high=1.0, low_open=True, high_open=True)


def critical_value(alpha: float = 0.05) -> float:
    """Two-sided critical value ``z_{1 - alpha/2}``."""
    return float(norm.ppf(1.0 - _alpha(alpha) / 2.0))


def detectable_standard_error(
    minimum_effect: float, alpha: float = 0.05, power: float = 0.8
) -> float:
    """Standard error at which an unbiased test detects ``minimum_effect`` with ``power``.

    ``se = |minimum_effect| / (z_{1-alpha/2} + z_{power})``.
    """
    effect = check.number("minimum_effect", minimum_effect)
    if effect == 0.0:
        raise ValueError("minimum_effect must be a finite number != 0, got 0.0")
    return abs(effect) / (critical_value(alpha) + float(norm.ppf(_power(power))))


def sample_size_per_group(
    sigma: float, minimum_effect: float, alpha: float = 0.05, power: float = 0.8
) -> float:
    """Two-sample normal formula: units per group to detect ``minimum_effect``.

    ``n = (z_{1-alpha/2} + z_{power})**2 * 2 * sigma**2 / minimum_effect**2``
    (not rounded up).

    Parameters
    ----------
    sigma : float
        Standard deviation of one unit's outcome, > 0.
    minimum_effect : float
        Difference in means to detect, != 0.
    alpha, power : float
        Two-sided significance level and power, in (0, 1).

    References
    ----------
    van Belle, *Statistical Rules of Thumb*, 2nd ed., Wiley 2008, rule 2.1
    (``n ~ 16 sigma**2 / delta**2`` at alpha = 0.05, power = 0.8).
    """
    sigma = check.number("sigma", sigma, low=0.0, low_open=True)
    per_unit = detectable_standard_error(minimum_effect, alpha, power)
    return 2.0 * sigma**2 / per_unit**2


@dataclass(frozen=True)
class PowerWithBias:
    """What a test with a biased estimator will do.

    Attributes
    ----------
    power : float
        Probability that the test declares a significant effect.
    type_s : float
        Probability that a significant estimate has the wrong sign (NaN when
        the true effect is 0).
    type_m : float
        Expected ``|estimate| / |effect|`` among significant estimates, the
        exaggeration ratio (NaN when the true effect is 0).
    """

    power: float
    type_s: float
    type_m: float


def power_with_bias(
    effect: float, bias: float, standard_error: float, alpha: float = 0.05
) -> PowerWithBias:
    """Power and type S / type M errors of a two-sided z-test with a biased estimator.

    Parameters
    ----------
    effect : float
        True effect (the global treatment effect).
    bias : float
        Bias of the estimator (its expectation minus ``effect``).
    standard_error : float
        Standard deviation of the estimator, > 0.
    alpha : float
        Two-sided significance level.

    Returns
    -------
    PowerWithBias

    Notes
    -----
    With ``mu = effect + bias``, ``s = standard_error`` and ``c = z s``, the
    estimate is significant when ``|X| > c`` with ``X ~ N(mu, s**2)``;
    ``E[X; X > c] = mu (1 - Phi(a)) + s phi(a)`` with ``a = (c - mu) / s``, and
    symmetrically below ``-c``.

    References
    ----------
    Gelman and Carlin, "Beyond power calculations: assessing type S (sign) and
    type M (magnitude) errors", Perspectives on Psychological Science 9(6), 2014.
    """
    effect = check.number("effect", effect)
    bias = check.number("bias", bias)
    s = check.number("standard_error", standard_error, low=0.0, low_open=True)
    z = critical_value(alpha)
    mu = effect + bias
    upper = (z * s - mu) / s
    lower = (-z * s - mu) / s
    p_high = float(norm.sf(upper))
    p_low = float(norm.cdf(lower))
    power = p_high + p_low
    if effect == 0.0 or power == 0.0:
        return PowerWithBias(power, math.nan, math.nan)
    wrong = p_low if effect > 0 else p_high
    mean_high = mu * p_high + s * float(norm.pdf(upper))
    mean_low = mu * p_low - s * float(norm.pdf(lower))
    return PowerWithBias(power, wrong / power, (mean_high - mean_low) / power / abs(effect))
