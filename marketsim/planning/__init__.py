"""Stage 7, planning: sweeps, horizon and sample size, power, design choice.

May import: model, designs, engine, estimators, meanfield, calibration, study (and the
shared helpers).

This is what a user finally acts on: which design, which treated fractions,
how long to run, and what the answer will be worth. Everything here builds on
:class:`marketsim.Study` (simulation) and :mod:`marketsim.meanfield` (the
large-market limit).

Two facts shape every plan. The standard deviation of an estimator shrinks
like ``1 / sqrt(horizon)`` (checked at two horizons, never assumed), but its
bias, which comes from interference, does not shrink at all: it is a floor
under the RMSE that no amount of traffic removes.
"""

from marketsim.planning.analyst_test import power_table
from marketsim.planning.choice import DesignChoice, choose_design, default_candidates
from marketsim.planning.durations import readable_duration
from marketsim.planning.horizon import HorizonPlan, plan_horizon
from marketsim.planning.robust import RobustDesignChoice, choose_design_robustly
from marketsim.planning.sweep import sweep

__all__ = ["sweep", "plan_horizon", "HorizonPlan", "power_table", "choose_design",
           "DesignChoice", "default_candidates", "readable_duration", "choose_design_robustly",
           "RobustDesignChoice"]
