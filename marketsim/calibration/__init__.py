"""Calibration: platform logs -> a Market with standard errors, fit checks, and the
analysis of a real experiment's logs.

Reads the four log tables (listings, stays, sessions, impressions), rebuilds the
availability every customer saw, estimates every parameter of the market model by
maximum likelihood with standard errors, checks the fit in plain words, draws
plausible markets for robust planning, and analyses an experiment that was run.

May import: the shared helpers, model, designs, engine, estimators, meanfield.
"""

from marketsim.calibration.experiment import ExperimentAnalysis, analyze
from marketsim.calibration.fit import calibrate
from marketsim.calibration.result import Calibration
from marketsim.calibration.tables import CheckedLog, check_log, read_log_folder

__all__ = ["calibrate", "Calibration", "analyze", "ExperimentAnalysis", "check_log", "CheckedLog",
           "read_log_folder"]
