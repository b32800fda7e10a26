"""Calibration in words and in the report: the parameter table, the fit checks, the
design choice over plausible markets, and the scenario file of a calibrated market."""

from __future__ import annotations

import numpy as np

from marketsim.calibration import Calibration, ExperimentAnalysis, calibrate
from marketsim.model import Treatment
from marketsim.model.scenario_file import Scenario
from marketsim.planning import DesignChoice, RobustDesignChoice, choose_design_robustly
from marketsim.randomness import SeedLike, spawn
from marketsim.report.markdown import Report
from marketsim.study import simulate_log

LOG_LENGTH = 500.0
"""Length (in the scenario's time unit) of the log the demo simulates and calibrates."""
PLAUSIBLE_MARKETS = 20
"""Plausible markets the report's robust design choice screens."""


def format_table(fit: Calibration) -> str:
    """The parameter table as text."""
    table = fit.table.copy()
    for column in ("estimate", "se", "low", "high"):
        table[column] = table[column].map(lambda v: "" if not np.isfinite(v) else f"{v:.4g}")
    return table.to_string(index=False)


def calibration_text(fit: Calibration) -> str:
    """Everything ``marketsim calibrate`` prints: table, checks and notes."""
    lines = [repr(fit), "", "Parameters (95% intervals):", format_table(fit), "",
             "Fit checks:", fit.checks.text(), ""]
    lines.extend(f"Note: {note}" for note in fit.notes)
    return "\n".join(lines)


def analysis_text(analysis: ExperimentAnalysis) -> str:
    """Everything ``marketsim analyze`` prints."""
    balance = analysis.balance
    lines = [
        f"Treated share of sessions {analysis.customer_fraction:.3f}; of listings per type "
        f"{np.round(analysis.listing_fraction, 3).tolist()}; market balance "
        f"{balance.attrs['market_balance']:.3g}.", "",
        "Arms:", balance.to_string(index=False), "",
        "Group rates Q_xy (bookings per unit time):",
        analysis.group_rates.to_string(index=False), "",
        "Estimates (naive 95% intervals; batch means over "
        f"{analysis.estimates.attrs['batches']} batches with t intervals):",
        analysis.estimates.to_string(index=False), "",
    ]
    lines.extend(f"Note: {note}" for note in analysis.notes)
    return "\n".join(lines)


def calibrated_scenario(fit: Calibration, name: str, treatment: Treatment, horizon: float,
                        burn_in: float, minimum_effect: float, time_unit: str) -> Scenario:
    """A scenario file's content for the calibrated market (feature and plan as given)."""
    return Scenario(name=name, market=fit.market, treatment=treatment, horizon=horizon,
                    burn_in=burn_in, minimum_effect=minimum_effect, time_unit=time_unit)


def calibration_section(report: Report, scenario: Scenario, replications: int,
                        seed: SeedLike, workers: int,
                        scenario_choice: DesignChoice | None = None) -> Calibration:
    """Simulate a platform log from the scenario's market, calibrate it, check the fit,
    and choose the design over the plausible markets; print and report it all (and,
    given the design choice on the scenario's own market, say whether they agree)."""
    log_seed, draw_seed, choice_seed = spawn(seed, 3)
    unit = scenario.time_unit
    log = simulate_log(scenario.market, horizon=LOG_LENGTH, burn_in=scenario.burn_in,
                       seed=log_seed)
    fit = calibrate(log.sessions, log.stays, log.listings, log.impressions)
    print(f"Calibration from a simulated log ({len(log.sessions):,} sessions over "
          f"{LOG_LENGTH:g} {unit}s):")
    print(calibration_text(fit))
    report.heading("4. Your own market: calibrated from platform logs")
    report.text(
        f"A platform's logs stand in here as a log simulated from the scenario's market: "
        f"{len(log.sessions):,} sessions, {len(log.stays):,} stays and "
        f"{len(log.impressions):,} impressions over {LOG_LENGTH:g} {unit}s. Every "
        "parameter is estimated by maximum likelihood with a standard error (utilities "
        "relative to leaving, the only thing the logs identify)."
    )
    report.table(fit.table, {c: _number for c in ("estimate", "se", "low", "high")})
    report.figure(fit.plot(), "calibration_checks.png",
                  "Fit checks: booking rates, busy-time shape, arrivals by hour")
    report.text("\n".join(f"- {line}" for line in fit.checks.text().split("\n")))
    markets = fit.draw(PLAUSIBLE_MARKETS, seed=draw_seed)
    robust = choose_design_robustly(
        markets, scenario.treatment, horizon=scenario.horizon, burn_in=scenario.burn_in,
        center=fit.market, replications=max(2, min(replications, 40)), seed=choice_seed,
        workers=workers)
    report.text(f"Which design wins over {PLAUSIBLE_MARKETS} markets drawn from the "
                "estimates' sampling distribution (every candidate simulated at the "
                "calibrated market, then screened on each plausible market with the "
                "large-market model corrected by that simulation):")
    report.table(robust.summary.head(8), {"win_share": "{:.0%}", "rmse_median": "{:.3f}",
                                          "rmse_low": "{:.3f}", "rmse_high": "{:.3f}",
                                          "bias_median": "{:+.3f}"})
    report.figure(robust.plot(), "robust_choice.png",
                  "RMSE of each candidate over the plausible markets")
    report.text(robust.report().replace("\n", "\n\n"))
    print(robust.report())
    if scenario_choice is not None:
        agreement = agreement_text(scenario_choice, robust)
        report.text(agreement)
        print(agreement)
    return fit


def agreement_text(scenario_choice: DesignChoice, robust: RobustDesignChoice) -> str:
    """Whether the choice on the scenario's market and the choice over the calibrated
    plausible markets recommend the same candidate, and why they may not."""
    first, second = scenario_choice.recommended, robust.recommended
    mine = f"{first['arm']} with the {first['estimator']} estimator"
    if (first["arm"], first["estimator"]) == (second["arm"], second["estimator"]):
        return (f"Both design choices (section 3 on the scenario's market, this one over "
                f"the calibrated plausible markets) recommend {mine}.")
    at_center = robust.confirmation[(robust.confirmation.arm == first["arm"])
                                    & (robust.confirmation.estimator == first["estimator"])]
    if not len(at_center):
        return (f"Section 3 recommends {mine} on the scenario's market; the choice over the "
                f"calibrated plausible markets, {second['arm']} with the "
                f"{second['estimator']} estimator, did not consider it: the screen over "
                "plausible markets leaves switchbacks out (their block-to-block noise is "
                "not the Poisson noise it scales), so compare the two on the calibrated "
                "market with choose_design.")
    tied = bool(at_center.tied.iloc[0])
    return (
        f"Section 3 recommends {mine} on the scenario's market; over the calibrated "
        f"plausible markets the choice is {second['arm']} with the {second['estimator']} "
        "estimator. Both follow one rule (practical ties on RMSE go to the smaller bias); "
        "they differ because the calibrated market is an estimate of the scenario's and "
        "each simulation carries Monte Carlo error. "
        + ("At the calibrated market the two are practically tied, so either is a sound "
           "choice." if tied else
           "At the calibrated market section 3's choice is worse by more than Monte Carlo "
           "error: the decision depends on parameters the logs estimate.")
    )


def _number(value: float) -> str:
    return "" if not np.isfinite(value) else f"{value:.4g}"


__all__ = ["calibration_text", "analysis_text", "calibrated_scenario",
           "calibration_section", "format_table", "agreement_text"]
