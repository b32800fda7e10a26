"""Stage 5, meanfield: the large-market (mean-field) model: steady state, paths and bias
without simulation.

May import: model, designs, engine, estimators (and the shared helpers).

As the market grows with the balance held fixed (``N`` listings, arrivals
``N * lambda``), the share of listings of each cell that is available follows an
ordinary differential equation (Kurtz, 1970). Its steady state gives, in
milliseconds, the long-run booking rate of every customer cell with every
listing cell, hence the expected value of every estimator in a large market and
its bias against the global treatment effect.

The model works on the cells of :func:`marketsim.engine.cells.build_cells`, so every
design applies unchanged. With ``N`` the number of listings, per cell:

- ``rho_l = n_l / N`` (share of the listings in listing cell ``l``),
  ``tau_l = 1 / mean_busy_time`` (release rate), ``s_l`` the available share;
- ``lambda_c = arrival_rate * share_c / N`` (arrivals of customer cell ``c``
  per listing);
- ``a_cl = consideration_cl * w_cl`` and ``w0_c = outside_weight_c / N``: the
  outside option grows with the market (its weight is ``N * exp(u_0)``), so in
  share units it is the fixed ``exp(u_0)``. The per-customer-cell scaling of the
  weights in :class:`~marketsim.MarketCells` cancels in every ratio.

The booking probability of a customer of cell ``c`` with cell ``l`` and the
flow of availability are

.. math::

    p_{cl}(s) = \\frac{a_{cl} s_l}{w_{0c} + \\sum_k a_{ck} s_k}, \\qquad
    \\frac{ds_l}{dt} = \\tau_l (\\rho_l - s_l) - \\sum_c \\lambda_c p_{cl}(s).

Every figure this module returns is in *listing units* so that it compares
directly with :func:`marketsim.simulate`: available listings per cell
(``N * s_l``) and bookings per unit time of the whole market
(``N * lambda_c * p_cl``).

References
----------
Kurtz, T. G., "Solutions of ordinary differential equations as limits of pure
jump Markov processes", Journal of Applied Probability 7(1), 1970.

"Experimental design in two-sided platforms: an analysis of bias", Management
Science 68(10), 2022: the large-market view of experiments in this model.
"""

from marketsim.meanfield.crossover import crossover_balances
from marketsim.meanfield.expected import ESTIMATE_COLUMNS, expected_estimates, sweep_balance
from marketsim.meanfield.periodic import PeriodicPath, periodic_path
from marketsim.meanfield.steady import SteadyState, expected_ledger, gte, steady_state
from marketsim.meanfield.switchback import switchback_ledger
from marketsim.meanfield.trajectory import Trajectory, trajectory

__all__ = [
    "SteadyState",
    "PeriodicPath",
    "periodic_path",
    "switchback_ledger",
    "Trajectory",
    "steady_state",
    "expected_ledger",
    "gte",
    "expected_estimates",
    "crossover_balances",
    "sweep_balance",
    "trajectory",
    "ESTIMATE_COLUMNS",
]
