"""Power of the test the analyst actually runs: the estimate over its reported standard error.

An analyst declares an effect significant when ``|estimate| > z * naive_se``,
dividing by the standard error the estimator reports (``naive_se``, computed as
if units were independent), not by the estimator's real spread (``sd``), which
only a simulation knows. For listing-side and two-sided estimators the reported
standard error is often larger than the real spread, so the real test has less
power than the ideal one; for others it can be smaller. Everything here is for
the real test; the ideal test's power is given only as a labelled comparison.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.power import critical_value, power_with_bias
from marketsim.study import StudyResult

POWER_COLUMNS = (
    "arm", "estimator", "metric", "truth", "bias", "sd", "mean_naive_se", "power",
    "type_s", "type_m", "wrong_sign", "overstated", "observed_power",
    "observed_power_mc_se", "observed_wrong_sign", "ideal_test_power",
)


def power_table(result: StudyResult, alpha: float = 0.05, effect: float | None = None,
                overstatement: float = 2.0) -> pd.DataFrame:
    """Power, type S and type M errors of the analyst's test, for every row of a study.

    The test is the one an analyst runs: significant when ``|estimate| >
    z_{1-alpha/2} * naive_se`` (the reported standard error). Each estimate is
    taken as normal with the row's bias and real spread ``sd``, and the reported
    standard error as fixed at its mean ``mean_naive_se``.

    Parameters
    ----------
    result : StudyResult
    alpha : float
        Two-sided significance level.
    effect : float, optional
        The true effect to plan for (default: the study's global treatment
        effect, ``truth``). The observed columns are for the simulated effect
        only, so they are NaN when ``effect`` is given.
    overstatement : float
        Factor for ``overstated``, > 1.

    Returns
    -------
    pandas.DataFrame
        One row per arm x estimator x metric:

        - ``truth, bias, sd, mean_naive_se``: from the study's summary.
        - ``power``: chance that the test is significant.
        - ``type_s``: chance that a significant result has the wrong sign.
        - ``type_m``: mean ``|estimate| / |truth|`` among significant results.
        - ``wrong_sign``: chance that one experiment gives a significant result
          of the wrong sign (the harm of acting on a sign the feature does not
          have).
        - ``overstated``: chance that one experiment gives a significant
          result of the right sign more than ``overstatement`` times the true
          effect (the harm of a launch sold on an inflated number).
        - ``observed_power`` (with ``observed_power_mc_se``) and
          ``observed_wrong_sign``: the same rates counted directly over the
          study's replications, each with its own reported standard error (a
          check on the normal model).
        - ``ideal_test_power``: power of a test that divides by the real spread
          ``sd`` instead, which no analyst can run; for comparison only.

    Notes
    -----
    There is no "false-positive rate" column: in this model a feature with no
    effect creates no interference and so no bias, so a null feature is
    declared significant at most about ``alpha`` of the time (less when the
    reported standard error is conservative). The harm a bias does is to
    overstate a real effect: ``type_m`` and ``overstated``.

    References
    ----------
    Gelman and Carlin, Perspectives on Psychological Science 9(6), 2014.
    """
    if not isinstance(result, StudyResult):
        raise ValueError(f"result must be a marketsim.StudyResult, got {type(result).__name__}")
    planned = None if effect is None else check.number("effect", effect)
    z = critical_value(alpha)
    raw = result.replications
    rows = []
    for row in result.summary.itertuples(index=False):
        true_effect = row.truth if planned is None else planned
        sd = max(row.sd, 1e-300)
        test_se = max(row.mean_naive_se, 1e-300)
        real = power_with_bias(true_effect, row.bias, sd, alpha, test_standard_error=test_se,
                               overstatement=overstatement)
        ideal = power_with_bias(true_effect, row.bias, sd, alpha)
        observed = observed_power = observed_se = math.nan
        if planned is None:
            mine = raw[(raw["arm"] == row.arm) & (raw["estimator"] == row.estimator)
                       & (raw["metric"] == row.metric)]
            estimate = mine["estimate"].to_numpy(float)
            significant = np.abs(estimate) > z * mine["naive_se"].to_numpy(float)
            observed_power = float(significant.mean())
            observed_se = math.sqrt(observed_power * (1 - observed_power) / significant.size)
            if true_effect != 0.0:
                observed = float(np.mean(significant
                                         & (np.sign(estimate) == -np.sign(true_effect))))
        rows.append({
            "arm": row.arm, "estimator": row.estimator, "metric": row.metric,
            "truth": true_effect, "bias": row.bias, "sd": row.sd,
            "mean_naive_se": row.mean_naive_se,
            "power": real.power, "type_s": real.type_s, "type_m": real.type_m,
            "wrong_sign": real.wrong_sign, "overstated": real.overstated,
            "observed_power": observed_power, "observed_power_mc_se": observed_se,
            "observed_wrong_sign": observed, "ideal_test_power": ideal.power,
        })
    return pd.DataFrame(rows, columns=list(POWER_COLUMNS))


__all__ = ["POWER_COLUMNS", "power_table"]
