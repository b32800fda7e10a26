"""What a study found: truth, summary per arm x estimator x metric, per-replication table."""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from marketsim import _validation as check
from marketsim.estimators.batches import t_quantile
from marketsim.power import critical_value
from marketsim.study.replication import VALUE_COLUMNS, Replicated

Z_95 = critical_value(0.05)
"""Two-sided 95% quantile of the standard normal, ``scipy.stats.norm.ppf(0.975)``."""

CAVEAT = (
    "Every figure is a Monte Carlo estimate from a model: read it with its Monte Carlo "
    "standard error (differences smaller than about two of them are noise), and only "
    "as far as the model's assumptions hold (Poisson arrivals, logit choice, "
    "exponential busy times, a stationary market)."
)


SUMMARY_COLUMNS = (
    "arm", "design", "estimator", "metric", "truth", "truth_mc_se", "mean_estimate",
    "bias", "bias_mc_se", "relative_bias", "relative_bias_mc_se", "sd", "rmse",
    "rmse_mc_se", "mean_naive_se", "coverage", "coverage_mc_se", "replications",
    "naive_se_ratio", "mean_batch_se", "batch_se_ratio", "batch_coverage",
    "batch_coverage_mc_se",
)
SE_COLUMNS = {
    "naive": ("mean_naive_se", "naive_se_ratio", "coverage", "coverage_mc_se"),
    "batch means": ("mean_batch_se", "batch_se_ratio", "batch_coverage",
                    "batch_coverage_mc_se"),
}
"""Summary columns of each kind of standard error: mean s.e., mean s.e. over sd,
coverage of the nominal 95% interval and its Monte Carlo standard error."""
REPLICATION_COLUMNS = ("replication", "arm", "design", "estimator", "metric", "estimate",
                       "naive_se", "batch_se", "replication_truth")


@dataclass(frozen=True, eq=False)
class StudyResult:
    """What a :meth:`Study.run` found.

    Attributes
    ----------
    truth : pandas.DataFrame
        One row per metric: ``metric``; ``value``, the global treatment effect
        (mean over replications of global treatment minus global control, both
        worlds sharing their random numbers); ``mc_se``, its Monte Carlo
        standard error; ``global_control`` and ``global_treatment``, the mean
        level of the metric in each world; ``replications``.
    summary : pandas.DataFrame
        One row per arm x estimator x metric (columns below); ``n`` is the
        number of replications, ``e_r`` the estimate, ``s_r`` its naive standard
        error and ``t_r`` the global effect of replication ``r``, ``T`` their
        mean (the truth).

        - ``arm``, ``design``, ``estimator``, ``metric``: what the row scores.
        - ``truth``, ``truth_mc_se``: ``T`` and its Monte Carlo standard error.
        - ``mean_estimate``: mean of ``e_r``.
        - ``bias``: ``mean_estimate - T``; ``bias_mc_se``: standard deviation of
          the paired differences ``e_r - t_r`` over ``sqrt(n)``.
        - ``relative_bias``: ``bias / T`` (NaN when ``T`` is 0);
          ``relative_bias_mc_se``: its delta-method (ratio-estimator) standard
          error, which accounts for the error of ``T`` too.
        - ``sd``: standard deviation of ``e_r`` (the real noise of the estimator).
        - ``rmse``: ``sqrt(mean((e_r - T)**2))``; ``rmse_mc_se`` by the delta method,
          which accounts for the error of ``T`` too (:func:`rmse_influence`).
        - ``mean_naive_se``: mean of ``s_r``, the standard error an analyst who
          treats units as independent would report; compare it with ``sd``.
        - ``coverage``: share of replications whose nominal 95% interval
          ``e_r +- 1.96 s_r`` contains ``T``; ``coverage_mc_se``:
          ``sqrt(c (1 - c) / n)``.
        - ``replications``: ``n``.
        - ``naive_se_ratio``: ``mean_naive_se / sd``: 1 when the naive standard
          error measures the estimator's real spread.
        - ``mean_batch_se``, ``batch_se_ratio``, ``batch_coverage``,
          ``batch_coverage_mc_se``: the same for the batch-means standard error
          ``b_r`` of each replication's run (:mod:`marketsim.estimators.batches`,
          :attr:`Study.batches` batches), whose interval is ``e_r +- t b_r`` with
          ``t`` the 97.5% Student t quantile on ``batches - 1`` degrees of freedom.

        Every figure carries Monte Carlo error and rests on the model's
        assumptions; see :attr:`caveats`.
    replications : pandas.DataFrame
        The raw figures, one row per replication x arm x estimator x metric:
        ``replication`` (index ``r``), ``arm``, ``design``, ``estimator``,
        ``metric``, ``estimate``, ``naive_se``, ``batch_se`` and
        ``replication_truth`` (the global effect ``t_r`` of that replication).
    completed : int
        Replications that finished.
    requested : int
        Replications asked for.
    interrupted : bool
        Whether the run was stopped early (Ctrl-C).
    events_per_replication : float
        Mean number of simulated events per replication (all worlds and arms).
    elapsed : float
        Wall time of the run in seconds.
    workers : int
        Worker processes used.
    batches : int
        Batches behind the batch-means standard errors (:attr:`Study.batches`).
    """

    truth: pd.DataFrame
    summary: pd.DataFrame
    replications: pd.DataFrame
    completed: int
    requested: int
    interrupted: bool
    events_per_replication: float
    elapsed: float
    workers: int
    batches: int

    @property
    def caveats(self) -> str:
        """What the figures are worth, in words (printed by the demo)."""
        notes = [CAVEAT]
        if self.interrupted:
            notes.append(f"The run was interrupted: only {self.completed} of "
                         f"{self.requested} replications are summarized.")
        zero = self.truth.loc[self.truth["value"] == 0.0, "metric"].tolist()
        if zero:
            notes.append(zero_effect_note(zero))
        return " ".join(notes)

    @classmethod
    def from_store(cls, store: str | os.PathLike, study: int = 0) -> StudyResult:
        """The result held in a results store (see ``store=`` of :meth:`Study.run`).

        Parameters
        ----------
        store : str or path
            Folder of a results store.
        study : int
            Which study of the store: 0 for a study or a design choice; the
            point number for a sweep; 0 or 1 for the pilots of a horizon plan.

        Returns
        -------
        StudyResult
            Summary of the replications ``0 .. n - 1`` of the last run into the
            store (``interrupted`` if some of them are missing), with that run's
            wall time and workers.
        """
        from marketsim.study.store import open_existing

        opened = open_existing(store)
        asked = opened.question["studies"]
        study = check.whole_number("study", study, low=0)
        if study >= len(asked):
            raise ValueError(f"study must be below {len(asked)} (the studies in store "
                             f"{str(store)!r}), got {study}")
        labels = pd.DataFrame(asked[study]["rows"],
                              columns=["arm", "design", "estimator", "metric"])
        if "batches" not in asked[study]:
            raise ValueError(f"store {str(store)!r} was made by an earlier marketsim, "
                             "without batch-means standard errors: run the study again "
                             "into a new store")
        metrics = tuple(asked[study]["metrics"])
        runs = opened.manifest["runs"]
        last = runs[-1] if runs else {"replications": 0}
        requested = int(last["replications"])
        done = sorted(i for i in opened.finished(study, len(labels)) if i < requested)
        if len(done) < 2:
            raise ValueError(f"store {str(store)!r} holds {len(done)} finished replications "
                             f"of study {study}; a summary needs at least 2")
        table = opened.read(study, done, len(labels), VALUE_COLUMNS)
        return summarize(metrics, labels, Replicated.from_table(table, labels, metrics),
                         requested, len(done) < requested,
                         float(last.get("elapsed", math.nan)), int(last.get("workers", 0)),
                         batches=int(asked[study]["batches"]))

    def to_frame(self) -> pd.DataFrame:
        """The summary table (a copy)."""
        return self.summary.copy()

    def overview(self, digits: int = 3) -> pd.DataFrame:
        """A compact, rounded view of the summary for printing.

        Columns: ``arm, estimator, metric`` (only when several), ``truth, mean,
        bias, relative bias, sd, rmse, coverage``; numbers to ``digits``
        significant digits.
        """
        digits = check.whole_number("digits", digits, low=1)
        table = self.summary
        columns = {"arm": "arm", "estimator": "estimator"}
        if table["metric"].nunique() > 1:
            columns["metric"] = "metric"
        columns.update({"truth": "truth", "mean_estimate": "mean", "bias": "bias",
                        "relative_bias": "relative bias", "sd": "sd", "rmse": "rmse",
                        "coverage": "coverage"})
        view = table[list(columns)].rename(columns=columns).copy()
        for name in view.columns:
            if pd.api.types.is_float_dtype(view[name]):
                view[name] = [float(f"{x:.{digits}g}") if np.isfinite(x) else x
                              for x in view[name]]
        return view

    def plot(self, metric: str | None = None):
        """Relative bias and RMSE per arm and estimator, with +-2 Monte Carlo s.e.

        Parameters
        ----------
        metric : str, optional
            Which metric to draw (default: the first of the study).

        Returns
        -------
        matplotlib.figure.Figure
        """
        from marketsim.study.figures import plot_study

        return plot_study(self, metric=metric)

    def __repr__(self) -> str:
        state = ", interrupted" if self.interrupted else ""
        return (
            f"StudyResult({self.completed} of {self.requested} replications{state}, "
            f"{len(self.summary)} rows, {self.elapsed:.3g} s on {self.workers} worker(s))"
        )


def zero_effect_note(metrics: list[str]) -> str:
    """Why relative figures are NaN when the global effect is exactly 0."""
    return (f"The global treatment effect is exactly 0 for {', '.join(metrics)} (the "
            "treatment changes nothing there: no customer's choice, or nobody books), so "
            "relative bias, bias / effect, is undefined and shown as NaN; bias, sd, RMSE and "
            "coverage are still in the metric's own units.")


def summarize(metrics: tuple[str, ...], labels: pd.DataFrame, figures: Replicated,
              requested: int, interrupted: bool, elapsed: float,
              workers: int, *, batches: int) -> StudyResult:
    """Score the finished replications (``figures``) against their truths.

    ``labels`` holds the summary's rows in order (:meth:`Study.rows`); ``batches``
    is the number of batches behind the batch-means standard errors.
    """
    n = figures.order.size
    levels, estimates, errors = figures.levels, figures.estimates, figures.errors
    events = float(np.mean(figures.events))
    effects = levels[:, :, 1] - levels[:, :, 0]                   # (n, M)
    root = math.sqrt(n)

    truth_rows = []
    for m, metric in enumerate(metrics):
        truth_rows.append({
            "metric": metric,
            "value": float(effects[:, m].mean()),
            "mc_se": float(effects[:, m].std(ddof=1) / root),
            "global_control": float(levels[:, m, 0].mean()),
            "global_treatment": float(levels[:, m, 1].mean()),
            "replications": n,
        })
    truth = pd.DataFrame(truth_rows)
    zero = truth.loc[truth["value"] == 0.0, "metric"].tolist()
    if zero:
        warnings.warn(zero_effect_note(zero), RuntimeWarning, stacklevel=3)

    metric_index = {metric: m for m, metric in enumerate(metrics)}
    rows = []
    for k, label in enumerate(labels.itertuples(index=False)):
        m = metric_index[label.metric]
        e, s, t = estimates[:, k], errors[:, k], effects[:, m]
        batch = figures.batch_errors[:, k]
        rows.append({**label._asdict(), **_score(e, t),
                     **_se_score(e, s, t, Z_95, SE_COLUMNS["naive"]),
                     **_se_score(e, batch, t, t_quantile(0.95, batches),
                                 SE_COLUMNS["batch means"])})
    summary = pd.DataFrame(rows, columns=list(SUMMARY_COLUMNS))

    raw = figures.table(labels, metrics)[list(REPLICATION_COLUMNS)]
    return StudyResult(truth=truth, summary=summary, replications=raw, completed=n,
                       requested=requested, interrupted=interrupted,
                       events_per_replication=events, elapsed=elapsed, workers=workers,
                       batches=batches)


def _score(e: np.ndarray, t: np.ndarray) -> dict[str, float]:
    """Summary figures of one estimator's estimates ``e`` against the truths ``t``
    (those of its standard errors: :func:`_se_score`)."""
    n = e.size
    root = math.sqrt(n)
    truth = float(t.mean())
    mean = float(e.mean())
    bias = mean - truth
    paired = e - t
    if truth != 0.0:
        ratio = mean / truth
        relative = ratio - 1.0
        relative_se = float(np.std(e - ratio * t, ddof=1) / (root * abs(truth)))
    else:
        relative, relative_se = math.nan, math.nan
    deviation = e - truth
    rmse = math.sqrt(float(np.mean(deviation**2)))
    rmse_se = float(np.std(rmse_influence(e, t), ddof=1) / root)
    return {
        "truth": truth,
        "truth_mc_se": float(t.std(ddof=1) / root),
        "mean_estimate": mean,
        "bias": bias,
        "bias_mc_se": float(paired.std(ddof=1) / root),
        "relative_bias": relative,
        "relative_bias_mc_se": relative_se,
        "sd": float(e.std(ddof=1)),
        "rmse": rmse,
        "rmse_mc_se": rmse_se,
        "replications": n,
    }


def _se_score(e: np.ndarray, s: np.ndarray, t: np.ndarray, quantile: float,
              columns: tuple[str, str, str, str]) -> dict[str, float]:
    """How one kind of standard error ``s_r`` does, under the names ``columns``: its
    mean, the ratio of that to the standard deviation of ``e_r``, and the coverage
    (with its Monte Carlo error) of ``e_r +- quantile * s_r`` around the truth
    ``mean(t_r)``."""
    n = e.size
    spread = float(e.std(ddof=1))
    covered = float(np.mean(np.abs(e - t.mean()) <= quantile * s))
    ratio = float(s.mean()) / spread if spread > 0 else math.nan
    coverage_se = math.sqrt(covered * (1.0 - covered) / n)
    return dict(zip(columns, (float(s.mean()), ratio, covered, coverage_se)))


def rmse_influence(e: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Per-replication influence values of ``rmse = sqrt(mean((e_r - T)**2))``, ``T =
    mean(t_r)``: their standard deviation over ``sqrt(n)`` is the delta-method Monte
    Carlo standard error of the RMSE, and that of the difference of two rows' values
    is the paired standard error of the difference of their RMSEs.

    The truth ``T`` is itself a Monte Carlo mean, so it enters too:
    ``d(mse)/dT = -2 bias`` gives ``((e_r - T)**2 - 2 bias (t_r - T)) / (2 rmse)``
    (up to a constant). All zero when the RMSE is 0.
    """
    truth = float(t.mean())
    deviation = e - truth
    rmse = math.sqrt(float(np.mean(deviation**2)))
    if rmse == 0.0:
        return np.zeros_like(deviation)
    bias = float(deviation.mean())
    return (deviation**2 - 2.0 * bias * (t - truth)) / (2.0 * rmse)


__all__ = ["StudyResult", "SUMMARY_COLUMNS", "SE_COLUMNS", "CAVEAT", "summarize", "rmse_influence"]
