"""Power, sample size and type S / type M errors against outside references."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.power import NormalIndPower

from marketsim.power import (
    detectable_standard_error,
    power_with_bias,
    sample_size_per_group,
)


@pytest.mark.parametrize("alpha, power", [(0.05, 0.8), (0.05, 0.9), (0.01, 0.8)])
@pytest.mark.parametrize("sigma, effect", [(1.0, 0.5), (2.0, 0.1), (0.3, -0.05)])
def test_sample_size_matches_statsmodels(alpha, power, sigma, effect):
    """Two-sample normal formula against statsmodels' NormalIndPower (reference library)."""
    ours = sample_size_per_group(sigma, effect, alpha=alpha, power=power)
    reference = NormalIndPower().solve_power(
        effect_size=abs(effect) / sigma, alpha=alpha, power=power, ratio=1.0,
        alternative="two-sided",
    )
    # statsmodels includes the (tiny) far-tail rejection region; agreement to 0.1%.
    assert ours == pytest.approx(reference, rel=1e-3)


def test_van_belle_rule_of_thumb():
    """van Belle, Statistical Rules of Thumb (2nd ed., 2008), rule 2.1: n ~ 16 sigma^2/delta^2
    per group at alpha = 0.05 and power 0.8; the exact constant is 2(1.96+0.84)^2 = 15.7."""
    for sigma, effect in [(1.0, 0.25), (3.0, 1.0)]:
        n = sample_size_per_group(sigma, effect)
        rule = 16 * sigma**2 / effect**2
        assert abs(n - rule) / rule < 0.03


def test_gelman_carlin_published_example():
    """Gelman & Carlin (2014), beauty-and-sex-ratio example: true effect 0.1, s.e. 3.3
    gives power 0.05, type S 0.46 and exaggeration ratio about 77 (values recalled from
    memory of the paper)."""
    result = power_with_bias(effect=0.1, bias=0.0, standard_error=3.3)
    assert result.power == pytest.approx(0.05, abs=0.005)
    assert result.type_s == pytest.approx(0.46, abs=0.01)
    assert 70 < result.type_m < 85


@pytest.mark.parametrize("effect, bias, se", [(1.0, 0.0, 0.5), (1.0, 0.8, 0.6),
                                              (-0.5, 0.3, 0.4), (0.2, -0.5, 0.3)])
def test_power_and_errors_against_monte_carlo(effect, bias, se):
    """Closed forms against direct normal draws (numpy); tolerance 4 Monte Carlo s.e."""
    rng = np.random.default_rng(11)
    draws = rng.normal(effect + bias, se, size=400_000)
    significant = np.abs(draws) > 1.959964 * se
    result = power_with_bias(effect, bias, se)
    p = significant.mean()
    assert abs(result.power - p) < 4 * np.sqrt(p * (1 - p) / draws.size)
    wrong = (np.sign(draws[significant]) != np.sign(effect))
    q = wrong.mean()
    assert abs(result.type_s - q) < 4 * np.sqrt(q * (1 - q) / significant.sum()) + 1e-6
    ratio = np.abs(draws[significant]) / abs(effect)
    assert abs(result.type_m - ratio.mean()) < 4 * ratio.std() / np.sqrt(ratio.size)


def test_bias_raises_power_but_not_truthfully():
    """An upward bias makes a null effect 'significant' more often than alpha."""
    null = power_with_bias(effect=0.0, bias=0.0, standard_error=1.0)
    assert null.power == pytest.approx(0.05, abs=1e-9)
    assert np.isnan(null.type_s) and np.isnan(null.type_m)
    biased = power_with_bias(effect=0.0, bias=1.0, standard_error=1.0)
    assert biased.power > 0.1


@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: sample_size_per_group(0.0, 1.0), "sigma must be a finite number > 0, got 0.0"),
        (lambda: sample_size_per_group(1.0, 0.0), "minimum_effect must be a finite number != 0"),
        (lambda: detectable_standard_error(1.0, alpha=1.5), "alpha must be a finite number in"),
        (lambda: detectable_standard_error(1.0, power=0.0), "power must be a finite number in"),
        (lambda: power_with_bias(1.0, 0.0, -1.0), "standard_error must be a finite number > 0"),
        (lambda: power_with_bias(float("nan"), 0.0, 1.0), "effect must be a finite number"),
    ],
)
def test_bad_input(call, message):
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(".", r"\.")):
        call()


# ----------------------------------------------------------------- invariants (hypothesis)

effects = st.floats(-5, 5).filter(lambda x: abs(x) > 1e-3)
errors = st.floats(0.05, 5)


@settings(max_examples=200, deadline=None)
@given(effect=effects, se=errors, alpha=st.sampled_from([0.01, 0.05, 0.1]))
def test_unbiased_test_properties(effect, se, alpha):
    """Without bias: power is at least alpha, a significant result has the wrong sign
    at most half the time, and significant results never understate on average
    (E[|X| given |X| > c] >= E|X| >= |mu|, Jensen)."""
    result = power_with_bias(effect, 0.0, se, alpha)
    assert alpha - 1e-12 <= result.power <= 1.0
    assert 0.0 <= result.type_s <= 0.5
    assert result.type_m >= 1.0 - 1e-9


@settings(max_examples=200, deadline=None)
@given(effect=effects, bias=st.floats(-3, 3), se=errors)
def test_mirror_symmetry(effect, bias, se):
    """Flipping the sign of effect and bias changes nothing."""
    here = power_with_bias(effect, bias, se)
    mirrored = power_with_bias(-effect, -bias, se)
    assert here.power == pytest.approx(mirrored.power, rel=1e-9, abs=1e-12)
    assert here.type_s == pytest.approx(mirrored.type_s, rel=1e-9, abs=1e-12)
    assert here.type_m == pytest.approx(mirrored.type_m, rel=1e-9, abs=1e-12)


@settings(max_examples=200, deadline=None)
@given(sigma=errors, effect=effects, scale=st.floats(0.1, 10),
       power=st.floats(0.5, 0.95))
def test_sample_size_depends_on_effect_over_sigma_only(sigma, effect, scale, power):
    """n depends on sigma / effect only, and grows with the power asked for."""
    n = sample_size_per_group(sigma, effect, power=power)
    assert n == pytest.approx(sample_size_per_group(scale * sigma, scale * effect,
                                                    power=power), rel=1e-9)
    assert sample_size_per_group(sigma, effect, power=min(power + 0.04, 0.99)) > n


@pytest.mark.parametrize("effect, bias, se, test_se",
                         [(1.0, 0.3, 0.5, 0.7), (-0.6, -0.2, 0.4, 0.3), (0.4, 0.1, 0.3, 0.45),
                          (0.2, -0.3, 0.3, 0.25)])
def test_real_test_and_harm_rates_against_monte_carlo(effect, bias, se, test_se):
    """A test dividing by another standard error than the real spread, and the chances of a
    significant wrong-sign result and of a significant result more than twice the effect,
    against direct normal draws (numpy); tolerance 4 Monte Carlo s.e."""
    rng = np.random.default_rng(12)
    draws = rng.normal(effect + bias, se, size=400_000)
    significant = np.abs(draws) > 1.959964 * test_se
    result = power_with_bias(effect, bias, se, test_standard_error=test_se)

    def close(value, rate):
        p = max(value, rate)  # the binomial error at the larger of the two (one may be 0)
        return abs(value - rate) < 4 * np.sqrt(p * (1 - p) / draws.size) + 1e-6

    assert close(result.power, significant.mean())
    assert close(result.wrong_sign, np.mean(significant & (np.sign(draws) != np.sign(effect))))
    over = significant & (draws * np.sign(effect) > 2 * abs(effect))
    assert close(result.overstated, over.mean())
    assert result.wrong_sign == pytest.approx(result.power * result.type_s)
    ratio = np.abs(draws[significant]) / abs(effect)
    assert abs(result.type_m - ratio.mean()) < 4 * ratio.std() / np.sqrt(ratio.size)


@pytest.mark.parametrize("ratio", [0.8, 1.0, 1.4])
def test_detectable_standard_error_of_the_real_test(ratio):
    """At sd = detectable_standard_error(m, se_ratio=r), the test |X| > 1.96 r sd of
    X ~ N(m, sd^2) has power 0.8 up to the far tail of the wrong sign (scipy normal)."""
    from scipy.stats import norm

    sd = detectable_standard_error(0.3, se_ratio=ratio)
    c = norm.ppf(0.975) * ratio * sd
    power = norm.sf((c - 0.3) / sd) + norm.cdf((-c - 0.3) / sd)
    assert power == pytest.approx(0.8, abs=2e-3)
    assert power >= 0.8 - 1e-12
    with pytest.raises(ValueError, match="se_ratio must be a finite number > 0"):
        detectable_standard_error(0.3, se_ratio=0.0)
