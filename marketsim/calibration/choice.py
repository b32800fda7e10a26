"""Consideration from impressions and the conditional logit of the choices.

A session of a customer of type ``i`` that considered ``c_j`` listings of each type
books one listing of type ``j`` with probability ``c_j e^{u_ij} / (N e^{u_0i} +
sum_k c_k e^{u_ik})`` or leaves with probability ``N e^{u_0i} / (...)``. Only
``theta_ij = u_ij - u_0i`` is identified, so the outside utility is fixed at 0 (the
normalisation) and the utilities are read relative to it. The likelihood of a
session depends only on (customer type, considered counts, chosen type): identical
rows are grouped first, so a million sessions cost a few thousand terms.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize

from marketsim.calibration.tables import CheckedLog

GRADIENT_TOLERANCE = 1e-8
"""Largest gradient component of the per-session negative log-likelihood at the optimum."""


@dataclass(frozen=True, eq=False)
class ConsiderationFit:
    """Consideration ``alpha_ij`` = considered / available, per customer x listing type.

    Attributes
    ----------
    value, se : ndarray, shape (n_customer_types, n_listing_types)
        Estimate and binomial standard error ``sqrt(a (1 - a) / available)``.
    considered, available : ndarray of int, shape (n_customer_types, n_listing_types)
        Impressions, and available listings summed over the sessions.
    """

    value: np.ndarray
    se: np.ndarray
    considered: np.ndarray
    available: np.ndarray


def considered_counts(log: CheckedLog) -> np.ndarray:
    """Listings of each type each session considered, shape (n_sessions, n_listing_types)."""
    n_types = len(log.listing_types)
    key = log.impression_session * n_types + log.listing_type[log.impression_listing]
    counts = np.bincount(key, minlength=log.session_time.size * n_types)
    return counts.reshape(log.session_time.size, n_types)


def fit_consideration(log: CheckedLog, available: np.ndarray,
                      considered: np.ndarray) -> ConsiderationFit:
    """Consideration per customer x listing type from impressions and availability.

    Parameters
    ----------
    log : CheckedLog
    available, considered : ndarray of int, shape (n_sessions, n_listing_types)
    """
    n_customer = len(log.customer_types)
    seen = np.stack([np.bincount(log.session_customer, considered[:, j], minlength=n_customer)
                     for j in range(considered.shape[1])], axis=1)
    offered = np.stack([np.bincount(log.session_customer, available[:, j],
                                    minlength=n_customer)
                        for j in range(available.shape[1])], axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        value = np.where(offered > 0, seen / offered, 0.0)
        se = np.where(offered > 0, np.sqrt(value * (1 - value) / offered), np.nan)
    return ConsiderationFit(value, se, seen.astype(np.int64), offered.astype(np.int64))


@dataclass(frozen=True, eq=False)
class ChoiceGroups:
    """Identical sessions grouped: customer type, considered counts, chosen type, count.

    Attributes
    ----------
    customer : ndarray of int, shape (n_groups,)
    counts : ndarray of int, shape (n_groups, n_listing_types)
        Listings of each type considered (or, without impressions, available).
    chosen : ndarray of int, shape (n_groups,)
        Listing type booked, -1 for leaving.
    weight : ndarray of int, shape (n_groups,)
        Sessions in the group.
    """

    customer: np.ndarray
    counts: np.ndarray
    chosen: np.ndarray
    weight: np.ndarray


def group_choices(customer: np.ndarray, counts: np.ndarray, chosen: np.ndarray) -> ChoiceGroups:
    """Group identical (customer type, counts, chosen type) rows."""
    rows = np.column_stack([customer, chosen + 1, counts]).astype(np.int64)
    radix = rows.max(axis=0) + 1
    if np.sum(np.log2(radix.astype(float))) < 62:
        key = np.zeros(rows.shape[0], dtype=np.int64)
        for column, base in zip(rows.T, radix):
            key = key * base + column
        _, first, weight = np.unique(key, return_index=True, return_counts=True)
        unique = rows[first]
    else:
        unique, weight = np.unique(rows, axis=0, return_counts=True)
    return ChoiceGroups(customer=unique[:, 0], chosen=unique[:, 1] - 1, counts=unique[:, 2:],
                        weight=weight)


@dataclass(frozen=True, eq=False)
class LogitFit:
    """Conditional-logit estimates of ``theta_ij = u_ij - u_0i``.

    Attributes
    ----------
    value : ndarray, shape (n_customer_types, n_listing_types)
        Estimates; 0 where not identified (the customer type never considered the
        listing type, so the value does not matter).
    covariance : ndarray, shape (n_customer_types, n_listing_types, n_listing_types)
        Inverse observed information per customer type (nan where not identified).
    identified : ndarray of bool, shape (n_customer_types, n_listing_types)
    log_likelihood : float
        Maximised log-likelihood, without the constant ``sum log c_chosen``.
    """

    value: np.ndarray
    covariance: np.ndarray
    identified: np.ndarray
    log_likelihood: float

    @property
    def se(self) -> np.ndarray:
        """Standard errors, shape (n_customer_types, n_listing_types)."""
        return np.sqrt(np.diagonal(self.covariance, axis1=1, axis2=2))


def fit_logit(groups: ChoiceGroups, n_listings: int, customer_types: tuple[str, ...],
              listing_types: tuple[str, ...]) -> LogitFit:
    """Maximum likelihood of the conditional logit with outside weight ``N e^{u_0i}``.

    Each customer type is a separate concave problem, solved by
    ``scipy.optimize.minimize(method="trust-exact")`` with the analytic gradient and
    Hessian; the covariance is the inverse of the observed information (the Hessian
    of the negative log-likelihood at the optimum).

    Raises
    ------
    ValueError
        If a customer type considered a listing type but never booked it (the
        estimate would be minus infinity).
    """
    n_customer, n_types = len(customer_types), len(listing_types)
    value = np.zeros((n_customer, n_types))
    covariance = np.full((n_customer, n_types, n_types), np.nan)
    identified = np.zeros((n_customer, n_types), dtype=bool)
    total = 0.0
    for i in range(n_customer):
        mine = groups.customer == i
        counts, chosen, weight = groups.counts[mine], groups.chosen[mine], groups.weight[mine]
        seen = (weight[:, None] * counts).sum(axis=0)
        booked = np.bincount(chosen[chosen >= 0], weight[chosen >= 0], minlength=n_types)
        free = np.flatnonzero(seen > 0)
        never = free[booked[free] == 0]
        if never.size:
            j = int(never[0])
            raise ValueError(
                f"sessions: customer type {customer_types[i]!r} considered listing type "
                f"{listing_types[j]!r} {int(seen[j]):,} times but never booked it, so its "
                "utility is not identified (the estimate would be minus infinity)"
            )
        identified[i, free] = True
        if free.size == 0:
            continue
        c = counts[:, free].astype(float)
        pick = np.zeros((counts.shape[0], free.size))
        for k, j in enumerate(free):
            pick[:, k] = chosen == j
        scale = float(weight.sum())  # per-session scale: gtol is then a relative tolerance
        objective = _NegativeLogLikelihood(c, pick, weight / scale, float(n_listings))
        left = weight[chosen < 0].sum()
        start = np.log(n_listings * booked[free] / np.maximum(
            (weight[chosen < 0, None] * c[chosen < 0]).sum(axis=0), 1.0)) if left else \
            np.zeros(free.size)
        result = optimize.minimize(objective.value, start, jac=objective.gradient,
                                   hess=objective.hessian, method="trust-exact",
                                   options={"gtol": GRADIENT_TOLERANCE / 10, "maxiter": 500})
        # trust-exact may stop on rounding with the gradient already at zero: judge that
        if np.abs(objective.gradient(result.x)).max() > GRADIENT_TOLERANCE:
            raise RuntimeError(f"the conditional logit of customer type "
                               f"{customer_types[i]!r} did not converge: {result.message}")
        value[i, free] = result.x
        covariance[np.ix_([i], free, free)] = np.linalg.inv(scale * objective.hessian(result.x))
        total -= scale * result.fun
    return LogitFit(value, covariance, identified, total)


class _NegativeLogLikelihood:
    """``-sum_g m_g [theta_{y_g} - log(N + sum_j c_gj e^theta_j)]`` and derivatives."""

    def __init__(self, counts, pick, weight, n_listings):
        self.counts, self.pick, self.weight, self.n = counts, pick, weight, n_listings
        self.chosen_total = (weight[:, None] * pick).sum(axis=0)

    def _shares(self, theta):
        numerator = self.counts * np.exp(theta)
        return numerator / (self.n + numerator.sum(axis=1, keepdims=True)), numerator

    def value(self, theta):
        _, numerator = self._shares(theta)
        return float(self.weight @ np.log(self.n + numerator.sum(axis=1))
                     - self.chosen_total @ theta)

    def gradient(self, theta):
        shares, _ = self._shares(theta)
        return self.weight @ shares - self.chosen_total

    def hessian(self, theta):
        shares, _ = self._shares(theta)
        weighted = self.weight[:, None] * shares
        return np.diag(weighted.sum(axis=0)) - shares.T @ weighted
