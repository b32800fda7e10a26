"""marketsim: how biased and how noisy will a marketplace A/B test be?

Simulate a two-sided market of customers and listings exactly, run experiment
designs on it and score their estimators against the true global treatment
effect. See the README for a tour.

The package is laid out as stages of one flow, each a subpackage that imports only
the stages before it (``tests/test_layering.py`` checks this):
model -> designs -> engine -> estimators -> meanfield -> calibration -> study ->
planning -> report -> cli.
"""

from marketsim import calibration, meanfield
from marketsim.calibration import Calibration, ExperimentAnalysis, analyze, calibrate
from marketsim.designs import (
    CellSplit,
    CustomerSide,
    Design,
    GlobalControl,
    GlobalTreatment,
    ListingSide,
    Switchback,
    TwoSided,
    TwoSidedFollowingBalance,
)
from marketsim.engine import Ledger, MarketCells, build_cells
from marketsim.estimators import (
    CustomerSideEstimator,
    Estimate,
    Estimator,
    ListingSideEstimator,
    SwitchbackDifference,
    SwitchbackHorvitzThompson,
    TwoSidedCorrected,
    TwoSidedDebiased,
    TwoSidedNaive,
)
from marketsim.model import DemandProfile, Market, Treatment, busy_time, scenarios
from marketsim.planning import (
    DesignChoice,
    HorizonPlan,
    RobustDesignChoice,
    choose_design,
    choose_design_robustly,
    plan_horizon,
    power_table,
    sweep,
)
from marketsim.study import Arm, Study, StudyResult, simulate, simulate_log

__version__ = "0.1.0"

__all__ = [
    "Market",
    "Treatment",
    "DemandProfile",
    "busy_time",
    "Design",
    "CellSplit",
    "GlobalControl",
    "GlobalTreatment",
    "CustomerSide",
    "ListingSide",
    "TwoSided",
    "TwoSidedFollowingBalance",
    "Switchback",
    "MarketCells",
    "build_cells",
    "simulate",
    "simulate_log",
    "calibrate",
    "Calibration",
    "analyze",
    "ExperimentAnalysis",
    "calibration",
    "Ledger",
    "scenarios",
    "meanfield",
    "Estimator",
    "Estimate",
    "CustomerSideEstimator",
    "ListingSideEstimator",
    "TwoSidedNaive",
    "TwoSidedCorrected",
    "TwoSidedDebiased",
    "SwitchbackDifference",
    "SwitchbackHorvitzThompson",
    "Study",
    "Arm",
    "StudyResult",
    "sweep",
    "plan_horizon",
    "HorizonPlan",
    "choose_design",
    "choose_design_robustly",
    "RobustDesignChoice",
    "DesignChoice",
    "power_table",
]
