"""Relative bias against market balance, from :func:`marketsim.meanfield.sweep_balance`."""

from __future__ import annotations

import math
from collections.abc import Sequence

import pandas as pd

from marketsim import _validation as check

REQUIRED_COLUMNS = ("design", "estimator", "balance", "relative_bias")

RELATIVE_BIAS_LABEL = "relative bias (% of the true effect)"
"""Relative bias is drawn in percent of the true effect in every figure of the package."""


def percent_axis(axis, which: str = "y") -> None:
    """Show relative bias (a fraction) as a percentage on one axis of ``axis``."""
    from matplotlib.ticker import PercentFormatter

    (axis.yaxis if which == "y" else axis.xaxis).set_major_formatter(PercentFormatter(xmax=1.0))


def mark_balance(axis, balance: float, label: bool = True) -> None:
    """A dotted vertical line at the market's own balance on a balance axis."""
    axis.axvline(balance, color="0.35", linestyle=":", linewidth=1.4,
                 label=f"this market (balance {balance:.3g})" if label else None)


def plot_balance_sweep(
    frame: pd.DataFrame,
    *,
    designs: Sequence[str] | None = None,
    estimators: Sequence[str] | None = None,
    ylim: tuple[float, float] | None = None,
    title: str | None = None,
    columns: int | None = None,
    market_balance: float | None = None,
):
    """Relative bias of each estimator against balance (log axis), one panel per design.

    Parameters
    ----------
    frame : pandas.DataFrame
        A sweep table with at least the columns ``design, estimator, balance,
        relative_bias`` (as returned by :func:`marketsim.meanfield.sweep_balance`).
    designs, estimators : sequence of str, optional
        Labels to draw, in this order (default: all, in order of appearance).
    ylim : (float, float), optional
        Limits of the relative-bias axis (default: fitted to the data). Relative
        bias can be huge where the global effect is close to 0, so limits help.
    title : str, optional
        Title of the figure.
    columns : int, optional
        Panels per row (default: all in one row up to 3 designs, 2 x 2 for 4,
        rows of 3 beyond).
    market_balance : float, optional
        The balance of the market being planned for, marked on every panel by a
        dotted vertical line (and in the legend).

    Returns
    -------
    matplotlib.figure.Figure
        Relative bias, in percent of the true effect, 0 (an unbiased estimator)
        marked by a horizontal line; a gap in a line means the estimator does not
        fit the design there.

    Examples
    --------
    >>> import marketsim as ms
    >>> from marketsim.meanfield.figures import plot_balance_sweep
    >>> table = ms.meanfield.sweep_balance(
    ...     ms.scenarios.rehearsal_rooms(), ms.Treatment(utility_shift=0.3),
    ...     [ms.CustomerSide(0.5), ms.ListingSide(0.5)], balances=[0.1, 1.0, 10.0])
    >>> figure = plot_balance_sweep(table, ylim=(-1, 3))
    >>> len(figure.axes)
    2
    """
    import matplotlib.pyplot as plt

    if market_balance is not None:
        market_balance = check.number("market_balance", market_balance, low=0.0,
                                      low_open=True)
    if not isinstance(frame, pd.DataFrame):
        raise ValueError(
            f"frame must be a pandas.DataFrame from ms.meanfield.sweep_balance, got "
            f"{type(frame).__name__}"
        )
    missing = [c for c in REQUIRED_COLUMNS if c not in frame.columns]
    if missing:
        raise ValueError(
            f"frame must have the columns {', '.join(REQUIRED_COLUMNS)}, got a frame "
            f"without {', '.join(missing)}"
        )
    if frame.empty:
        raise ValueError("frame must have at least one row, got an empty table")
    if columns is not None and (isinstance(columns, bool) or not isinstance(columns, int)
                                or columns < 1):
        raise ValueError(f"columns must be a whole number >= 1 or None, got {columns!r}")
    design_names = _pick("designs", designs, list(dict.fromkeys(frame["design"])))
    estimator_names = _pick("estimators", estimators,
                            list(dict.fromkeys(frame["estimator"])))

    # One colour per estimator, the same in every panel.
    cycle = plt.rcParams["axes.prop_cycle"].by_key().get("color", ["C0"])
    colours = {name: cycle[k % len(cycle)] for k, name in enumerate(estimator_names)}
    n_panels = len(design_names)
    if columns is None:
        columns = 2 if n_panels == 4 else 3
    n_cols = min(columns, n_panels)
    n_rows = math.ceil(n_panels / n_cols)
    figure, axes = plt.subplots(n_rows, n_cols, figsize=(4.2 * n_cols, 3.4 * n_rows),
                                sharex=True, sharey=True, squeeze=False)
    for k, design in enumerate(design_names):
        ax = axes[k // n_cols][k % n_cols]
        part = frame[frame["design"] == design]
        for estimator in estimator_names:
            rows = part[part["estimator"] == estimator].sort_values("balance")
            if rows.empty:
                continue
            # Reindex on every balance of the panel so that points where the
            # estimator does not fit show as gaps instead of joined lines.
            grid = sorted(part["balance"].unique())
            values = rows.set_index("balance")["relative_bias"].reindex(grid)
            ax.plot(grid, values.to_numpy(), marker="o", markersize=3, label=estimator,
                    color=colours[estimator])
        ax.axhline(0.0, color="black", linewidth=0.8)
        if market_balance is not None:
            mark_balance(ax, market_balance)
        ax.set_xscale("log")
        ax.set_title(design, fontsize="medium")
        percent_axis(ax)
        ax.grid(True, which="major", alpha=0.3)
        if k // n_cols == n_rows - 1 or k + n_cols >= n_panels:
            ax.set_xlabel("balance (arrivals / release capacity)")
        if k % n_cols == 0:
            ax.set_ylabel(RELATIVE_BIAS_LABEL)
        ax.tick_params(labelbottom=True)
    for k in range(n_panels, n_rows * n_cols):
        axes[k // n_cols][k % n_cols].set_visible(False)
    if ylim is not None:
        axes[0][0].set_ylim(*ylim)
    handles, labels = [], []
    for ax in figure.axes:
        for handle, label in zip(*ax.get_legend_handles_labels()):
            if label not in labels:
                handles.append(handle)
                labels.append(label)
    figure.legend(handles, labels, loc="lower center", ncol=min(len(labels), 3),
                  frameon=False)
    if title is not None:
        figure.suptitle(title)
    legend_rows = math.ceil(len(labels) / 3)
    figure.tight_layout(rect=(0, 0.06 * legend_rows / n_rows, 1, 1))
    for ax in figure.axes:
        if not ax.get_visible():
            figure.delaxes(ax)
    return figure


def _pick(name: str, chosen: Sequence[str] | None, available: list[str]) -> list[str]:
    if chosen is None:
        return available
    if isinstance(chosen, str):
        chosen = [chosen]
    chosen = list(chosen)
    if not chosen:
        raise ValueError(f"{name} must name at least one label, got []")
    for item in chosen:
        if item not in available:
            listed = ", ".join(repr(a) for a in available)
            raise ValueError(f"{name} must be among {listed}, got {item!r}")
    return chosen


__all__ = ["RELATIVE_BIAS_LABEL", "mark_balance", "percent_axis", "plot_balance_sweep"]
