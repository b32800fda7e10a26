"""Utilities from choices when impressions are missing (consideration given by the user).

Without impressions the considered counts are unobserved: a customer of type ``i``
who found ``a_j`` available listings of type ``j`` considered a binomial
``(a_j, alpha_ij)`` number of them. Consideration and utility are then NOT separately
identified (more consideration and lower utility fit the same bookings), so
``alpha`` must come from the user and only the utilities are estimated.

The choice probabilities average the logit over the binomial counts. In the race
form of the logit (each considered listing fires at rate ``w_ij``, the outside
option at rate ``N`` after dividing by ``e^{u_0i}``) they are one-dimensional
integrals over time,

    P(leave) = int_0^inf N e^{-N t} prod_k S_k(t) dt,
    P(type j) = int_0^inf f_j(t) e^{-N t} prod_{k != j} S_k(t) dt,

with ``S_k(t) = (1 - alpha_k + alpha_k e^{-w_k t})^{a_k}`` the chance that no considered
listing of type ``k`` has fired by ``t`` and ``f_j = -S_j'``. After scaling time by the
expected total rate ``R = N + sum_k alpha_k a_k w_k`` the integrands are close to
``e^{-x}`` and Gauss-Laguerre quadrature is accurate.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize

from marketsim.calibration.choice import GRADIENT_TOLERANCE, ChoiceGroups, LogitFit

NODES = 64
"""Gauss-Laguerre nodes of the choice-probability integrals."""
STEP = 1e-4
"""Step of the central differences for the gradient and the observed information."""


def choice_log_probability(theta: np.ndarray, alpha: np.ndarray, available: np.ndarray,
                           chosen: np.ndarray, n_listings: float) -> np.ndarray:
    """Log-probability of each group's choice, averaged over the binomial consideration.

    Parameters
    ----------
    theta, alpha : ndarray, shape (n_types,)
        ``u_ij - u_0i`` and consideration of one customer type.
    available : ndarray of int, shape (n_groups, n_types)
    chosen : ndarray of int, shape (n_groups,)
        Listing type booked, -1 for leaving.
    n_listings : float

    Returns
    -------
    ndarray, shape (n_groups,)
    """
    x, omega = np.polynomial.laguerre.laggauss(NODES)
    w = np.exp(theta)
    rate = n_listings + available @ (alpha * w)  # (G,)
    t = x[None, :, None] / rate[:, None, None]  # (G, Q, 1)
    log_none = np.log1p(alpha * np.expm1(-w * t))  # log(1 - a + a e^{-wt}), (G, Q, J)
    log_survive = (available[:, None, :] * log_none).sum(axis=2)  # (G, Q)
    base = x[None, :] - n_listings * t[..., 0] + log_survive  # e^{x} cancels the weight
    pick = np.maximum(chosen, 0)
    rows = np.arange(chosen.size)
    extra = np.where(
        chosen[:, None] >= 0,
        np.log(np.maximum(available[rows, pick], 1) * alpha[pick] * w[pick])[:, None]
        - w[pick][:, None] * t[:, :, 0] - log_none[rows, :, pick],
        np.log(n_listings) + np.zeros_like(base),
    )
    terms = base + extra + np.log(omega)[None, :] - np.log(rate)[:, None]
    peak = terms.max(axis=1, keepdims=True)
    return peak[:, 0] + np.log(np.exp(terms - peak).sum(axis=1))


def fit_logit_given_consideration(groups: ChoiceGroups, consideration: np.ndarray,
                                  n_listings: int, customer_types: tuple[str, ...],
                                  listing_types: tuple[str, ...]) -> LogitFit:
    """Maximum likelihood of ``theta_ij`` with consideration known, per customer type.

    ``groups.counts`` are the AVAILABLE listings per type. The gradient and the
    observed information come from central differences of the quadrature likelihood
    (step ``STEP``); the optimiser is ``scipy.optimize.minimize(method="BFGS")``.
    """
    n_customer, n_types = len(customer_types), len(listing_types)
    value = np.zeros((n_customer, n_types))
    covariance = np.full((n_customer, n_types, n_types), np.nan)
    identified = np.zeros((n_customer, n_types), dtype=bool)
    total = 0.0
    for i in range(n_customer):
        mine = groups.customer == i
        available, chosen, weight = groups.counts[mine], groups.chosen[mine], groups.weight[mine]
        booked = np.bincount(chosen[chosen >= 0], weight[chosen >= 0], minlength=n_types)
        free = np.flatnonzero((consideration[i] > 0) & ((weight[:, None] * available).sum(0) > 0))
        never = free[booked[free] == 0]
        if never.size:
            raise ValueError(
                f"sessions: customer type {customer_types[i]!r} never booked listing type "
                f"{listing_types[int(never[0])]!r}, so its utility is not identified"
            )
        impossible = np.flatnonzero((booked > 0) & (consideration[i] == 0))
        if impossible.size:
            raise ValueError(
                f"consideration must be > 0 where customers booked: customer type "
                f"{customer_types[i]!r} booked listing type "
                f"{listing_types[int(impossible[0])]!r} {int(booked[impossible[0]]):,} times"
            )
        identified[i, free] = True
        if free.size == 0:
            continue
        scale = float(weight.sum())
        theta = np.zeros(n_types)

        def negative(x, free=free, available=available, chosen=chosen, weight=weight,
                     theta=theta, i=i, scale=scale):
            theta[free] = x
            log_p = choice_log_probability(theta, consideration[i], available, chosen,
                                           float(n_listings))
            return -float(weight @ log_p) / scale

        result = optimize.minimize(negative, np.zeros(free.size),
                                   jac=lambda x, f=negative: _central_gradient(f, x),
                                   method="BFGS", options={"gtol": GRADIENT_TOLERANCE * 10})
        gradient = _central_gradient(negative, result.x)
        if np.abs(gradient).max() > 100 * GRADIENT_TOLERANCE:
            raise RuntimeError(f"the choice model of customer type {customer_types[i]!r} "
                               f"did not converge: {result.message}")
        hessian = np.array([_central_gradient(negative, result.x + STEP * e)
                            - _central_gradient(negative, result.x - STEP * e)
                            for e in np.eye(free.size)]) / (2 * STEP)
        hessian = (hessian + hessian.T) / 2
        value[i, free] = result.x
        covariance[np.ix_([i], free, free)] = np.linalg.inv(scale * hessian)
        total -= scale * result.fun
    return LogitFit(value, covariance, identified, total)


def _central_gradient(function, x: np.ndarray) -> np.ndarray:
    steps = STEP * np.eye(x.size)
    return np.array([(function(x + e) - function(x - e)) / (2 * STEP) for e in steps])
