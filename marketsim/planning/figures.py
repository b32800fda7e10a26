"""Figures for planning: sweeps of bias, noise and RMSE, and the design comparison."""

from __future__ import annotations

import numpy as np
import pandas as pd

from marketsim.meanfield.figures import RELATIVE_BIAS_LABEL, mark_balance, percent_axis

SYMLOG_BEYOND = 3.0
"""The relative-bias panel turns logarithmic beyond +-100% once values pass +-300%."""


def plot_sweep(table: pd.DataFrame, metric: str | None = None,
               market_value: float | None = None):
    """Bias, noise and RMSE of each arm and estimator against the swept value.

    Parameters
    ----------
    table : pandas.DataFrame
        The result of :func:`marketsim.sweep`.
    metric : str, optional
        Which metric to draw (default: the first in the table).
    market_value : float, optional
        The market's own value of the swept parameter (its balance, for a
        balance sweep), marked on every panel by a dotted vertical line.

    Returns
    -------
    matplotlib.figure.Figure
        Simulation mode: bias, standard deviation and RMSE side by side, with
        +-2 Monte Carlo standard errors. Large-market mode (no noise in the
        limit): bias and relative bias, in percent of the true effect. Where
        relative bias passes +-300% (the effect itself is tiny at the extremes)
        its axis is linear within +-100% and logarithmic beyond (matplotlib's
        ``symlog``), so the region people work in is not flattened; the panel's
        title says so. The x axis is logarithmic when the swept values are
        positive and span more than a factor of 10. The legend sits below the
        panels.
    """
    import matplotlib.pyplot as plt
    from matplotlib.ticker import NullFormatter

    metric = table["metric"].iloc[0] if metric is None else metric
    data = table[table["metric"] == metric]
    parameter = str(data["parameter"].iloc[0])
    noiseless = bool(data["sd"].isna().all())
    if noiseless:
        panels = [("bias", None, "bias"), ("relative_bias", None, RELATIVE_BIAS_LABEL)]
    else:
        panels = [("bias", "bias_mc_se", "bias"), ("sd", None, "standard deviation"),
                  ("rmse", "rmse_mc_se", "RMSE")]
    columns = len(panels)  # legend columns: about one per panel's width
    entries = data[["arm", "estimator"]].drop_duplicates().shape[0] + (market_value is not None)
    legend_rows = -(-entries // columns)
    height = 4.2 + 0.25 * legend_rows
    fig, axes = plt.subplots(1, len(panels), figsize=(5.2 * len(panels), height), sharex=True)
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
        if column == "relative_bias":
            percent_axis(axis)
            if np.nanmax(np.abs(data[column].to_numpy(float))) > SYMLOG_BEYOND:
                axis.set_yscale("symlog", linthresh=1.0)
                percent_axis(axis)
                axis.set_title(f"{title}\nlinear within ±100%, logarithmic beyond",
                               fontsize="medium")
        if market_value is not None:
            mark_balance(axis, float(market_value), label=axis is axes[0])
        if logarithmic:
            axis.set_xscale("log")
            axis.xaxis.set_minor_formatter(NullFormatter())
    handles, labels = axes[0].get_legend_handles_labels()
    if market_value is not None and parameter != "balance":
        labels = [label.replace("this market (balance", f"this market ({parameter}")
                  for label in labels]
    fig.legend(handles, labels, loc="lower center", ncol=columns, fontsize="small",
               frameon=False)
    mode = "large-market limit, no noise" if noiseless else "simulation, +-2 Monte Carlo s.e."
    fig.suptitle(f"{metric} against {parameter} ({mode})")
    fig.tight_layout(rect=(0, (0.2 * legend_rows + 0.1) / height, 1, 1))
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
        Carlo s.e.); the recommended candidate is at the top, candidates
        practically tied with it are labelled "(tied)"; the legend sits below
        the axes.
    """
    import matplotlib.pyplot as plt

    labels = [f"{a}\n{e}" for a, e in zip(table["arm"], table["estimator"])]
    if "tied" in table:
        labels = [f"{label} (tied)" if tied and k else label
                  for k, (label, tied) in enumerate(zip(labels, table["tied"]))]
    labels[0] = f"{labels[0]} (recommended)"
    y = np.arange(len(table))[::-1]
    height = 0.6 * len(table) + 1.8
    fig, axis = plt.subplots(figsize=(9, height))
    axis.barh(y + 0.2, table["bias"].abs(), height=0.4, label="|bias| (does not shrink)")
    axis.barh(y - 0.2, table["sd"], height=0.4, label="standard deviation")
    axis.errorbar(table["rmse"], y, xerr=2.0 * table["rmse_mc_se"], fmt="D", color="black",
                  markersize=4, capsize=2, label="RMSE (+-2 Monte Carlo s.e.)")
    axis.set_yticks(y, labels, fontsize="small")
    axis.set_xlabel(f"{table['metric'].iloc[0]} (same units as the effect)")
    axis.set_title("Design choice at the planned horizon\n(recommended at the top)",
                   fontsize="medium")
    axis.grid(axis="x", alpha=0.3)
    # Below the axes, where it covers no bar.
    fig.legend(*axis.get_legend_handles_labels(), loc="lower center", ncol=3,
               fontsize="small", frameon=False)
    fig.tight_layout(rect=(0, 0.45 / height, 1, 1))
    return fig
