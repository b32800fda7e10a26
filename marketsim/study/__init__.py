"""Stage 6, study: run the market, once (simulate, with warm starts) or in Monte Carlo
replications that score experiment designs and estimators against the truth.

May import: model, designs, engine, estimators, meanfield (and the shared helpers).

A :class:`Study` runs, in each replication, the two global worlds (nobody
treated, everybody treated) and one simulated experiment per :class:`Arm`, all
over the same window. The difference of the two worlds is the global treatment
effect (the truth); each arm's estimators are scored against it: bias, standard
deviation, RMSE, coverage of the nominal 95% interval, each with its Monte Carlo
standard error.

Randomness
----------
``seed`` gives a root :class:`numpy.random.SeedSequence`; replication ``r``
uses the child with spawn key ``r`` (the same whatever the number of
replications or workers), so the same seed gives identical tables for any
``workers``. Within a replication the two global worlds *and every arm* start
from the same seed. The engine draws arrivals, choices and releases from three
separate streams (:func:`marketsim.randomness.engine_streams`), so the two
global worlds see the same customers arriving at the same times (common random
numbers): on the rehearsal-room scenario this cuts the variance of the
per-replication global effect about eight-fold (standard deviation 0.078
against 0.218 bookings per hour with independent seeds, 400 replications).
Sharing the seed with the arms as well neither helps nor hurts the Monte Carlo
error of the biases (measured: standard deviation of ``estimate_r - truth_r``
0.379 against 0.394 for customer-side, 0.288 against 0.289 for listing-side,
1,000 replications; correlation of estimate and truth about 0), but it makes
an arm's figures independent of which other arms are in the study: the same
seed gives the same numbers for an arm however the list of arms changes. The
Monte Carlo error of each bias is computed from the paired differences
``estimate_r - truth_r``, which is valid in either case.
"""

from marketsim.study.arms import Arm
from marketsim.study.replication import default_workers
from marketsim.study.result import CAVEAT, SUMMARY_COLUMNS, StudyResult, rmse_influence
from marketsim.study.single_run import simulate, simulate_log
from marketsim.study.study import Study

__all__ = ["Arm", "Study", "StudyResult", "SUMMARY_COLUMNS", "CAVEAT", "default_workers",
           "rmse_influence", "simulate", "simulate_log"]
