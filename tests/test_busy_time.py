"""Busy-time shapes: parameters against scipy.stats, draws against their laws,
the equilibrium (stationary-excess) law of the warm start, bad input, and the
Market option that holds them."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

import marketsim as ms
from marketsim.engine.kernel_run import busy_time_arrays
from marketsim.model import busy_time as bt

MEAN = 2.5


def scipy_law(shape: bt.BusyTime, mean: float):
    """The same law written with scipy.stats' own parameters."""
    if isinstance(shape, bt.Exponential):
        return stats.expon(scale=mean)
    if isinstance(shape, bt.Gamma):
        return stats.gamma(a=1.0 / shape.cv**2, scale=mean * shape.cv**2)
    if isinstance(shape, bt.LogNormal):
        sigma = np.sqrt(np.log1p(shape.cv**2))
        return stats.lognorm(s=sigma, scale=mean * np.exp(-sigma**2 / 2))
    raise TypeError(shape)


CONTINUOUS = [bt.Exponential(), bt.Gamma(0.4), bt.Gamma(3.0), bt.LogNormal(0.5),
              bt.LogNormal(2.0)]


@pytest.mark.parametrize("shape", CONTINUOUS, ids=repr)
def test_parameters_give_the_mean_and_cv(shape):
    """scipy.stats' closed-form mean and standard deviation of the law we mean."""
    law = scipy_law(shape, MEAN)
    assert law.mean() == pytest.approx(MEAN, rel=1e-12)
    assert law.std() / law.mean() == pytest.approx(shape.cv, rel=1e-12)


@pytest.mark.parametrize("shape", CONTINUOUS, ids=repr)
def test_draws_follow_the_law(shape):
    """Python draws and the kernel's parameters (drawn with the same numpy calls)
    pass a Kolmogorov-Smirnov test against the scipy law."""
    rng = np.random.default_rng(1)
    law = scipy_law(shape, MEAN)
    assert stats.kstest(shape.sample(MEAN, 20_000, rng), law.cdf).pvalue > 1e-3
    code, parameters, _ = busy_time_arrays((shape,), np.array([MEAN]))
    p = parameters[0]
    kernel_like = {0: lambda: p[0] * rng.exponential(size=20_000),
                   1: lambda: rng.gamma(p[0], p[1], 20_000),
                   2: lambda: rng.lognormal(p[0], p[1], 20_000)}[int(code[0])]()
    assert stats.kstest(kernel_like, law.cdf).pvalue > 1e-3


@pytest.mark.parametrize("shape", CONTINUOUS, ids=repr)
def test_residual_times_follow_the_equilibrium_law(shape):
    """Remaining busy times at a warm start follow the equilibrium law, CDF
    ``integral_0^x (1 - F(u)) du / mean`` (renewal theory, e.g. Ross, Stochastic
    Processes, 1996, section 3.4), computed here by quadrature of scipy's
    survival function."""
    law = scipy_law(shape, MEAN)
    residual = shape.residual_sample(MEAN, 20_000, np.random.default_rng(2))

    def equilibrium_cdf(x):
        return integrate.quad(law.sf, 0.0, x, limit=200)[0] / MEAN

    points = law.ppf([0.1, 0.3, 0.5, 0.7, 0.9])
    for x in points:
        expected = equilibrium_cdf(x)
        se = np.sqrt(expected * (1 - expected) / residual.size)
        assert abs(np.mean(residual <= x) - expected) < 4 * se + 1e-12


def test_fixed_and_empirical_draws():
    """Fixed: every draw the mean, residual uniform on (0, mean). Empirical: draws
    are the stays rescaled to the mean, each equally likely; residuals are a
    uniform share of a length-biased stay (mean (1 + cv^2) mean / 2)."""
    rng = np.random.default_rng(3)
    assert np.all(bt.Fixed().sample(MEAN, 5, rng) == MEAN)
    residual = bt.Fixed().residual_sample(MEAN, 20_000, rng)
    assert stats.kstest(residual, stats.uniform(0, MEAN).cdf).pvalue > 1e-3
    stays = bt.Empirical([1.0, 2.0, 3.0, 10.0])
    draws = stays.sample(MEAN * 4, 40_000, rng)
    assert set(np.unique(draws)) == {MEAN * 4 * s / 4.0 for s in (1.0, 2.0, 3.0, 10.0)}
    counts = np.unique(draws, return_counts=True)[1]
    assert stats.chisquare(counts).pvalue > 1e-3
    residual = stays.residual_sample(MEAN, 40_000, rng)
    expected = MEAN * (1 + stays.cv**2) / 2
    assert abs(residual.mean() - expected) < 4 * residual.std() / np.sqrt(residual.size)


@pytest.mark.parametrize(("build", "message"), [
    (lambda: bt.Gamma(0.0), "gamma cv must be a finite number in (0, 10] (use Fixed() for "
                            "cv 0), got 0.0"),
    (lambda: bt.LogNormal(-1.0), "lognormal cv must be a finite number in (0, 10], got -1.0"),
    (lambda: bt.LogNormal(11.0), "lognormal cv must be a finite number in (0, 10], got 11.0"),
    (lambda: bt.Gamma(float("nan")), "gamma cv must be a finite number, got nan"),
    (lambda: bt.Empirical([3.0]), "empirical stays must hold at least 2 values, got 1"),
    (lambda: bt.Empirical([1.0, -1.0]), "empirical stays must contain finite numbers >= 0"),
    (lambda: bt.Empirical([0.0, 0.0]), "empirical stays must have a mean > 0"),
])
def test_bad_shapes_are_refused(build, message):
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(")", r"\)")
                       .replace("[", r"\[").replace("]", r"\]")):
        build()


def test_market_option_per_listing_type():
    """One shape for all types or one per type; carried by replace, scaled and
    with_balance; shown in repr and summary; exponential by default."""
    m = ms.scenarios.rehearsal_rooms()
    assert m.busy_time == (bt.Exponential(), bt.Exponential())
    assert m.has_exponential_busy_times and "busy_time" not in repr(m)
    one = m.replace(busy_time=bt.LogNormal(2.0))
    assert one.busy_time == (bt.LogNormal(2.0),) * 2
    mixed = m.replace(busy_time=[bt.Fixed(), bt.Gamma(0.5)])
    for variant in (mixed.scaled(3.0), mixed.with_balance(2.0),
                    mixed.replace(arrival_rate=1.0)):
        assert variant.busy_time == mixed.busy_time
    assert "busy_time [fixed, gamma (cv 0.5)]" in repr(mixed)
    assert list(mixed.summary().busy_time) == ["fixed", "gamma (cv 0.5)"] * 2
    for bad, text in [(bt.LogNormal, "got <class"), ([bt.Fixed()], "got a list of 1"),
                      ([bt.Fixed(), 2.0], "got 2.0 at index 1"), ("fixed", "got 'fixed'")]:
        with pytest.raises(ValueError, match=f"busy_time must be a busy-time shape.*{text}"):
            m.replace(busy_time=bad)
