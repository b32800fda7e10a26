"""Figures for planning: sweeps of bias, noise and RMSE, and the design comparison."""

from __future__ import annotations

import numpy as np
import pandas as pd


def plot_sweep(table: pd.DataFrame, metric: str | None = None):
    """Bias, noise and RMSE of each arm and estimator against the swept value.

    Parameters
    ----------
    table : pandas.DataFrame
        The result of :func:`marketsim.sweep`.
    metric : str, optional
        Which metric to draw (default: the first in the table).

    Returns
    -------
    matplotlib.figure.Figure
        Simulation mode: bias, standard deviation and RMSE side by side, with
        +-2 Monte Carlo standard errors. Large-market mode (no noise in the
        limit): bias and relative bias. The x axis is logarithmic when the swept
        values are positive and span more than a factor of 10.
    """
    import matplotlib.pyplot as plt
    from matplotlib.ticker import NullFormatter

    metric = table["metric"].iloc[0] if metric is None else metric
    data = table[table["metric"] == metric]
    parameter = str(data["parameter"].iloc[0])
    noiseless = bool(data["sd"].isna().all())
    if noiseless:
        panels = [("bias", None, "bias"), ("relative_bias", None, "relative bias")]
    else:
        panels = [("bias", "bias_mc_se", "bias"), ("sd", None, "standard deviation"),
                  ("rmse", "rmse_mc_se", "RMSE")]
    fig, axes = plt.subplots(1, len(panels), figsize=(4.7 * len(panels), 4.2), sharex=True)
    for (arm, estimator), group in data.groupby(["arm", "estimator"], sort=False):
        x = pd.to_numeric(group["value"], errors="coerce").to_numpy(float)
        for axis, (column, error, _) in zip(axes, panels):
            spread = 2.0 * group[error].to_numpy(float) if error in group else None
            axis.errorbar(x, group[column].to_numpy(float), yerr=spread, marker="o",
                          markersize=3, capsize=2, label=f"{arm} | {estimator}")
    x_all = pd.to_numeric(data["value"], errors="coerce").dropna()
    logarithmic = len(x_all) and (x_all > 0).all() and x_all.max() / x_all.min() > 10
    for axis, (column, _, title) in zip(axes, panels):
        axis.set_title(title)
        axis.set_xlabel(parameter)
        axis.grid(alpha=0.3)
        if column in ("bias", "relative_bias"):
            axis.axhline(0.0, color="black", linewidth=0.8)
        if logarithmic:
            axis.set_xscale("log")
            axis.xaxis.set_minor_formatter(NullFormatter())
    handles, labels = axes[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower center", ncol=min(3, max(1, len(labels))),
               fontsize="small", frameon=False)
    mode = "large-market limit, no noise" if noiseless else "simulation, +-2 Monte Carlo s.e."
    fig.suptitle(f"{metric} against {parameter} ({mode})")
    rows = (len(labels) + 2) // 3
    fig.tight_layout(rect=(0, min(0.5, 0.06 * rows), 1, 1))
    return fig


def plot_design_choice(table: pd.DataFrame):
    """RMSE of each candidate design and estimator, split into bias and noise.

    Parameters
    ----------
    table : pandas.DataFrame
        :attr:`marketsim.planning.DesignChoice.table` (sorted by RMSE).

    Returns
    -------
    matplotlib.figure.Figure
        Horizontal bars of ``|bias|`` and ``sd`` with the RMSE marked (+-2 Monte
        Carlo s.e.); the best candidate is at the top.
    """
    import matplotlib.pyplot as plt

    labels = [f"{a} | {e}" for a, e in zip(table["arm"], table["estimator"])]
    y = np.arange(len(table))[::-1]
    fig, axis = plt.subplots(figsize=(9, 0.45 * len(table) + 1.6))
    axis.barh(y + 0.2, table["bias"].abs(), height=0.4, label="|bias| (does not shrink)")
    axis.barh(y - 0.2, table["sd"], height=0.4, label="standard deviation")
    axis.errorbar(table["rmse"], y, xerr=2.0 * table["rmse_mc_se"], fmt="D", color="black",
                  markersize=4, capsize=2, label="RMSE (+-2 Monte Carlo s.e.)")
    axis.set_yticks(y, labels, fontsize="small")
    axis.set_xlabel(f"{table['metric'].iloc[0]} (same units as the effect)")
    axis.set_title("Design choice at the planned horizon (best at the top)")
    axis.grid(axis="x", alpha=0.3)
    axis.legend(fontsize="small", loc="lower right")
    fig.tight_layout()
    return fig
