"""Figure of a study: relative bias and RMSE per arm and estimator."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from marketsim import _validation as check
from marketsim.meanfield.figures import RELATIVE_BIAS_LABEL, percent_axis

if TYPE_CHECKING:  # pragma: no cover
    from matplotlib.figure import Figure

    from marketsim.study import StudyResult

ERROR_BAR_WIDTH = 2.0
"""Error bars span this many Monte Carlo standard errors on each side."""


def plot_study(result: StudyResult, metric: str | None = None) -> Figure:
    """Relative bias and RMSE of every arm x estimator, with Monte Carlo error bars.

    Two panels side by side, one row per arm x estimator (top to bottom in the
    order of the study): the relative bias (bias / truth, in percent; a dashed
    line marks 0) and the RMSE in the metric's units. Bars span ±2 Monte Carlo standard
    errors (``relative_bias_mc_se`` and ``rmse_mc_se`` of the summary).

    Parameters
    ----------
    result : StudyResult
    metric : str, optional
        Metric to draw (default: the first one of the study).

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> import marketsim as ms
    >>> study = ms.Study(ms.scenarios.rehearsal_rooms(), ms.scenarios.instant_confirmation(),
    ...                  arms=[ms.CustomerSide(0.5)], horizon=50.0)
    >>> figure = study.run(replications=4, seed=1, progress=False).plot()
    >>> len(figure.axes)
    2
    """
    import matplotlib.pyplot as plt

    summary = result.summary
    metrics = list(dict.fromkeys(summary["metric"]))
    metric = metrics[0] if metric is None else check.choice("metric", metric, metrics)
    rows = summary[summary["metric"] == metric].reset_index(drop=True)
    labels = [f"{arm}\n{estimator}" for arm, estimator in zip(rows["arm"], rows["estimator"])]
    y = np.arange(len(rows))[::-1]
    height = 1.2 + 0.55 * len(rows)
    figure, (left, right) = plt.subplots(1, 2, figsize=(11.0, height), sharey=True,
                                         layout="constrained")
    panels = (
        (left, "relative_bias", "relative_bias_mc_se", RELATIVE_BIAS_LABEL),
        (right, "rmse", "rmse_mc_se", f"RMSE ({metric})"),
    )
    arms = list(dict.fromkeys(rows["arm"]))
    for ax, value, error, title in panels:
        values = rows[value].to_numpy(float)
        errors = ERROR_BAR_WIDTH * rows[error].to_numpy(float)
        for k, arm in enumerate(arms):
            mine = (rows["arm"] == arm).to_numpy()
            ax.errorbar(values[mine], y[mine], xerr=np.nan_to_num(errors[mine]), fmt="o",
                        capsize=3, color=f"C{k % 10}")
        ax.set_title(title)
        ax.grid(axis="x", alpha=0.3)
    left.axvline(0.0, linestyle="--", linewidth=1.0, color="0.4")
    percent_axis(left, "x")
    right.set_xlim(left=0.0)
    left.set_yticks(y, labels)
    truth = result.truth.set_index("metric").loc[metric]
    figure.suptitle(
        f"{metric}: global treatment effect {truth['value']:.4g} "
        f"(Monte Carlo s.e. {truth['mc_se']:.2g}), {result.completed} replications; "
        f"bars ±{ERROR_BAR_WIDTH:g} Monte Carlo s.e."
    )
    return figure


__all__ = ["plot_study"]
