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
    minimum_effect: float, alpha: float = 0.05, power: float = 0.8, se_ratio: float = 1.0
) -> float:
    """Standard deviation at which an unbiased estimator's test detects ``minimum_effect``.

    ``sd = |minimum_effect| / (z_{1-alpha/2} * se_ratio + z_{power})``, ignoring
    the far tail of the wrong sign.

    Parameters
    ----------
    minimum_effect : float
        Effect to detect, != 0.
    alpha, power : float
        Two-sided significance level and power, in (0, 1).
    se_ratio : float
        The standard error the test divides by over the estimator's real
        standard deviation, > 0 (1: the ideal test; the naive standard error of
        a listing-side or two-sided estimator is often larger than the real
        spread, so its test needs a smaller spread for the same power).
    """
    effect = check.number("minimum_effect", minimum_effect)
    if effect == 0.0:
        raise ValueError("minimum_effect must be a finite number != 0, got 0.0")
    ratio = check.number("se_ratio", se_ratio, low=0.0, low_open=True)
    return abs(effect) / (critical_value(alpha) * ratio + float(norm.ppf(_power(power))))


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
    """What a two-sided test with a biased estimator will do.

    Attributes
    ----------
    power : float
        Probability that the test declares a significant effect (either sign).
    type_s : float
        Probability that a significant estimate has the wrong sign, given that it
        is significant (NaN when the true effect is 0).
    type_m : float
        Expected ``|estimate| / |effect|`` among significant estimates, the
        exaggeration ratio (NaN when the true effect is 0).
    wrong_sign : float
        Probability that one experiment gives a significant result of the wrong
        sign (``power * type_s``, not conditional on significance; NaN when the
        true effect is 0).
    overstated : float
        Probability that one experiment gives a significant result of the right
        sign that is more than ``overstatement`` times the true effect (NaN when
        the true effect is 0).
    overstatement : float
        The factor behind ``overstated``.
    """

    power: float
    type_s: float
    type_m: float
    wrong_sign: float = math.nan
    overstated: float = math.nan
    overstatement: float = 2.0


def power_with_bias(
    effect: float, bias: float, standard_error: float, alpha: float = 0.05, *,
    test_standard_error: float | None = None, overstatement: float = 2.0,
) -> PowerWithBias:
    """Power and type S / type M errors of a two-sided z-test with a biased estimator.

    Parameters
    ----------
    effect : float
        True effect (the global treatment effect).
    bias : float
        Bias of the estimator (its expectation minus ``effect``).
    standard_error : float
        The real standard deviation of the estimator (its spread from one
        experiment to the next), > 0.
    alpha : float
        Two-sided significance level.
    test_standard_error : float, optional
        The standard error the analyst's test divides by, > 0: the test is
        significant when ``|estimate| > z_{1-alpha/2} * test_standard_error``.
        Default ``standard_error``: the ideal test that knows the real spread.
        Pass the reported (naive) standard error to get the test that is
        actually run.
    overstatement : float
        Factor for :attr:`PowerWithBias.overstated`, > 1.

    Returns
    -------
    PowerWithBias

    Notes
    -----
    With ``mu = effect + bias``, ``s = standard_error`` and ``c = z t`` (``t``
    the test's standard error), the estimate is significant when ``|X| > c``
    with ``X ~ N(mu, s**2)``; ``E[X; X > c] = mu (1 - Phi(a)) + s phi(a)`` with
    ``a = (c - mu) / s``, and symmetrically below ``-c``. The test's standard
    error is taken as fixed (in a study it varies a little from run to run;
    :func:`marketsim.power_table` also reports the rejection rate observed).

    References
    ----------
    Gelman and Carlin, "Beyond power calculations: assessing type S (sign) and
    type M (magnitude) errors", Perspectives on Psychological Science 9(6), 2014.
    """
    effect = check.number("effect", effect)
    bias = check.number("bias", bias)
    s = check.number("standard_error", standard_error, low=0.0, low_open=True)
    t = s if test_standard_error is None else check.number(
        "test_standard_error", test_standard_error, low=0.0, low_open=True)
    factor = check.number("overstatement", overstatement, low=1.0, low_open=True)
    c = critical_value(alpha) * t
    mu = effect + bias
    upper = (c - mu) / s
    lower = (-c - mu) / s
    p_high = float(norm.sf(upper))
    p_low = float(norm.cdf(lower))
    power = p_high + p_low
    if effect == 0.0 or power == 0.0:
        return PowerWithBias(power, math.nan, math.nan, overstatement=factor)
    wrong = p_low if effect > 0 else p_high
    mean_high = mu * p_high + s * float(norm.pdf(upper))
    mean_low = mu * p_low - s * float(norm.pdf(lower))
    far = max(c, factor * abs(effect))
    overstated = float(norm.sf((far - mu) / s) if effect > 0 else norm.cdf((-far - mu) / s))
    return PowerWithBias(power, wrong / power, (mean_high - mean_low) / power / abs(effect),
                         wrong, overstated, factor)
