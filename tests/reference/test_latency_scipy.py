"""Latency profiles against scipy.stats (a general-purpose reference library)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from commitadvisor import latency as L

Q = np.array([0.01, 0.1, 0.5, 0.9, 0.99, 0.999])

PROFILES = [
    (L.Lognormal(math.log(0.6), 0.7), stats.lognorm(0.7, scale=0.6)),
    (L.Exponential(2.0), stats.expon(scale=2.0)),
    (L.Gamma(2.5, 0.4), stats.gamma(2.5, scale=0.4)),
    (L.Weibull(1.3, 0.7), stats.weibull_min(1.3, scale=0.7)),
]


@pytest.mark.parametrize("ours, ref", PROFILES, ids=lambda p: type(p).__name__)
def test_quantiles_cdf_and_moments_match_scipy(ours, ref):
    assert np.allclose(ours.quantile(Q), ref.ppf(Q), rtol=1e-9)
    x = ref.ppf(Q)
    assert np.allclose(ours.cdf(x), Q, atol=1e-9)
    assert ours.mean_ms == pytest.approx(ref.mean(), rel=1e-9)
    assert ours.second_moment_ms2 == pytest.approx(ref.moment(2), rel=1e-9)


def test_two_percentile_lognormal_fit():
    # p50 and p99 fix mu = ln p50 and sigma = ln(p99/p50) / z_0.99 (z from scipy.stats.norm).
    ln = L.Lognormal.from_percentiles(0.6, 3.0)
    assert ln.sigma == pytest.approx(math.log(5.0) / stats.norm.ppf(0.99), rel=1e-12)
    assert float(ln.quantile(0.99)) == pytest.approx(3.0, rel=1e-9)


@pytest.mark.parametrize("ours, ref", PROFILES, ids=lambda p: type(p).__name__)
def test_sample_mean_near_declared_mean(ours, ref):
    rng = np.random.default_rng(7)
    x = ours.sample(rng, 200_000)
    se = math.sqrt(ref.var() / x.size)
    assert abs(x.mean() - ref.mean()) < 5 * se


def test_sum_of_independent_profiles_matches_monte_carlo_and_gamma():
    # the sum of two exponentials of equal mean is Gamma(2) (scipy.stats.gamma reference)
    s = L.convolve(L.Exponential(1.0), L.Exponential(1.0))
    ref = stats.gamma(2.0)
    assert np.allclose(s.quantile(Q[1:]), ref.ppf(Q[1:]), rtol=5e-3)
    assert s.mean_ms == pytest.approx(2.0)


def test_residual_of_exponential_is_the_same_exponential():
    # memorylessness: the equilibrium residual of Exp(mean m) is Exp(mean m)
    r = L.residual(L.Exponential(3.0))
    assert r.mean_ms == pytest.approx(3.0, rel=1e-9)
    assert np.allclose(r.quantile(Q[1:-1]), stats.expon(scale=3.0).ppf(Q[1:-1]), rtol=5e-3)


def test_table_profile_interpolates_and_extends_its_tail():
    t = L.Table((0.5, 0.9, 0.99), (1.0, 2.0, 5.0))
    assert float(t.quantile(0.9)) == pytest.approx(2.0)
    assert float(t.quantile(0.999)) > 5.0  # the last given percentile is not a maximum
    assert np.allclose(t.cdf(t.quantile(Q)), Q, atol=1e-9)


def test_mixture_quantile_inverts_its_cdf():
    m = L.mixture([0.99, 0.01], [L.Lognormal(0.0, 0.3), L.Lognormal(math.log(500), 0.2)])
    assert np.allclose(m.cdf(m.quantile(Q)), Q, atol=1e-6)
