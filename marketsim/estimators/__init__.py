"""Stage 4, estimators: a ledger in, an estimate and the naive standard error out.

May import: model, designs, engine (and the shared helpers).

Every estimator here but the switchback ones (:mod:`marketsim.estimators.switchback`,
which read a switchback's ledger block by block) is a linear combination of the
group rates ``Q_xy``: the metric per unit time produced by customers of treatment status ``x`` with
listings of status ``y`` (1 = treated, 0 = control). A subclass only supplies
the 2 x 2 matrix of coefficients (:meth:`Estimator.weights`) for the design's
treated fractions ``a_C`` (customers) and ``a_L`` (listings); the base class
turns a ledger into an :class:`Estimate`.

Metrics
-------
``"bookings"``
    Bookings per unit time.
``"revenue"``
    Revenue per unit time (needs :attr:`Market.price`).
``"conversion"``
    Bookings per arriving customer. ``Q_xy`` is then the bookings of group
    ``xy`` per arrival, and the customer fraction ``a_C`` in the coefficients is
    the *observed* share of arrivals that were treated (the design probability
    when a group had no arrivals), so that the customer-side estimator is the
    analyst's difference of conversion rates,
    ``bookings_1 / arrivals_1 - bookings_0 / arrivals_0``.

Naive standard error
--------------------
What an analyst who treats units as independent would report. For bookings and
revenue per unit time the counts of each group are independent Poisson
(compound Poisson for revenue), so ``Var(Q_xy) = sum(price**2 * bookings) /
window**2``. For conversion each arriving customer is an independent unit whose
outcome (no booking, or a booking with a control or a treated listing) is
multinomial within its group: the customer-side standard error is the familiar
``sqrt(p_1 (1 - p_1) / n_1 + p_0 (1 - p_0) / n_0)``. Interference between units
makes these wrong, which is exactly what a study measures (interval coverage).

Batch-means standard error
--------------------------
From the one run too, but allowing for the market's memory: a ledger with time
bins (``bins=`` of :func:`marketsim.simulate`; a study uses ``Study.batches``)
gives each estimate ``Estimate.batch_se``, the standard deviation of the
estimator applied to each bin over ``sqrt(bins)``, with a Student t interval
(:mod:`marketsim.estimators.batches`: the method, the rule for the number of
batches and its checks).

Checks
------
Every formula (values and naive standard errors, all three metrics) is checked
against arithmetic done by hand on a made-up ledger in
``tests/test_estimators.py``; the unbiasedness of each estimator without
competition and the bias patterns with it are checked by simulation in
``tests/test_study.py``.
"""

from marketsim.estimators.base import Estimator
from marketsim.estimators.defaults import (
    all_estimators,
    default_estimators,
    design_estimators,
    fitting_estimators,
)
from marketsim.estimators.linear import (
    CustomerSideEstimator,
    ListingSideEstimator,
    TwoSidedCorrected,
    TwoSidedDebiased,
    TwoSidedNaive,
)
from marketsim.estimators.switchback import (
    SwitchbackDifference,
    SwitchbackHorvitzThompson,
    block_totals,
)
from marketsim.estimators.totals import METRICS, Estimate, GroupTotals, group_rates, metric_rate

__all__ = [
    "METRICS",
    "Estimate",
    "GroupTotals",
    "group_rates",
    "metric_rate",
    "Estimator",
    "CustomerSideEstimator",
    "ListingSideEstimator",
    "TwoSidedNaive",
    "TwoSidedCorrected",
    "TwoSidedDebiased",
    "SwitchbackDifference",
    "SwitchbackHorvitzThompson",
    "block_totals",
    "all_estimators",
    "default_estimators",
    "design_estimators",
    "fitting_estimators",
]
