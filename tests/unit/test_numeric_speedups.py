"""The evaluator's faster numerics (issue 3) against scipy and direct formulas.

Quantile inversion of mixtures, the remembered quantiles, the stationary law by state
reduction, the blocked binomial rows, the time left of a flush and the dual-device lag are
each checked against scipy (a general-purpose reference library) or the closed form they
compute, evaluated directly.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from commitadvisor import latency as L
from commitadvisor import writer as W
from commitadvisor.strategies.dual_device import lag_distribution

Q = np.array([1e-6, 0.01, 0.05, 0.3, 0.5, 0.9, 0.99, 0.999, 0.9999, 1 - 1e-7])


def _mixture_ppf(weights, dists, q):
    """Reference quantile of a mixture of scipy distributions, by Brent's method."""
    def f(x):
        return sum(w * d.cdf(x) for w, d in zip(weights, dists, strict=True)) - q

    return optimize.brentq(f, 0.0, 1e6, xtol=1e-14, rtol=1e-13)


def test_mixture_quantile_matches_scipy_root_finding():
    ours = L.mixture([0.3, 0.7], [L.Lognormal(0.0, 1.0), L.Lognormal(2.0, 0.3)])
    ref = [stats.lognorm(1.0, scale=1.0), stats.lognorm(0.3, scale=math.exp(2.0))]
    got = ours.quantile(Q)
    want = np.array([_mixture_ppf([0.3, 0.7], ref, q) for q in Q])
    # the issue asks for 1e-4 relative; the inversion stops at 1e-10 relative, the far tail
    # (1 - 1e-7) is limited by the cdf's rounding near 1: 1e-8 covers both
    assert np.allclose(got, want, rtol=1e-8, atol=0)


def test_mixture_quantile_at_an_atom_is_the_atom():
    # a fixed part of weight 1/2 at 3 ms: every q inside the jump of the cdf maps to 3 ms
    ours = L.mixture([0.5, 0.5], [L.Fixed(3.0), L.Exponential(2.0)])
    jump_lo = 0.5 * (1 - math.exp(-1.5))
    q = np.array([jump_lo + 1e-6, 0.6, jump_lo + 0.5 - 1e-9])
    assert np.allclose(ours.quantile(q), 3.0, rtol=1e-10)
    # below the jump: the exponential part alone, F = 0.5 (1 - exp(-x / 2))
    assert float(ours.quantile(0.2)) == pytest.approx(-2.0 * math.log(1 - 0.4), rel=1e-9)
    # an atom at 0 of weight 0.6: the quantile is 0 for q <= 0.6
    zero = L.mixture([0.6, 0.4], [L.Fixed(0.0), L.Exponential(2.0)])
    assert np.all(zero.quantile(np.array([0.1, 0.6])) == 0.0)
    assert float(zero.quantile(0.8)) == pytest.approx(-2.0 * math.log(0.5), rel=1e-9)


def test_remembered_quantiles_equal_fresh_ones():
    def build():
        return L.mixture([0.4, 0.6], [L.Gamma(2.0, 0.5), L.Weibull(1.5, 2.0)])

    warm = build()
    first = warm.quantile(Q)
    again = warm.quantile(Q[::-1])[::-1]
    scalar = np.array([float(warm.quantile(q)) for q in Q])
    fresh = build().quantile(Q)
    assert np.array_equal(first, again)
    assert np.array_equal(first, fresh)
    assert np.allclose(scalar, first, rtol=1e-9)
    # a long request (remembered as a whole) comes back as a copy the caller may modify
    u = (np.arange(100) + 0.5) / 100
    long_first = warm.quantile(u)
    long_first[:] = -1.0
    assert np.all(warm.quantile(u) > 0)


def test_grid_quantile_is_the_inverse_of_its_cdf():
    g = L.convolve(L.Lognormal(0.0, 0.5), L.Exponential(1.0))
    ref_x = np.linspace(0.2, 8.0, 9)
    # the sum's cdf by scipy's quadrature: P(X + Y <= x) = int f_X(t) (1 - e^{-(x - t)}) dt
    logn = stats.lognorm(0.5)
    for x in ref_x:
        want = integrate.quad(lambda t, x=x: logn.pdf(t) * -math.expm1(-(x - t)), 0, x)[0]
        # grid step ~ 1e-4 ms on a smooth cdf: agreement to 1e-5
        assert float(g.cdf(x)) == pytest.approx(want, abs=1e-5)
    q = g.cdf(ref_x)
    assert np.allclose(g.quantile(q), ref_x, rtol=1e-6)
    assert np.array_equal(g.quantile(q), g.quantile(q))


def test_stationary_law_by_state_reduction_matches_scipy():
    from scipy import linalg

    rng = np.random.default_rng(11)
    for size in (2, 7, 60):
        p = rng.random((size, size)) ** 3
        p /= p.sum(axis=1, keepdims=True)
        pi = W._stationary(p)
        # reference: the left eigenvector of eigenvalue 1 (scipy.linalg.eig)
        vals, left = linalg.eig(p, left=True, right=False)
        ref = np.real(left[:, np.argmin(np.abs(vals - 1))])
        ref = ref / ref.sum()
        assert np.allclose(pi, ref, rtol=1e-9, atol=1e-14)
        assert np.allclose(pi @ p, pi, atol=1e-14)


def test_stationary_law_falls_back_where_reduction_cannot_go():
    # state 1 is absorbing: it never leaves for a lower state, so state reduction has nothing
    # to divide by and the linear solve takes over; all the mass ends in state 1
    p = np.array([[0.5, 0.5], [0.0, 1.0]])
    assert np.allclose(W._stationary(p), [0.0, 1.0], atol=1e-15)


@pytest.mark.parametrize("n", [0, 1, 7, 8, 9, 40, 100, 400])
def test_binomial_rows_match_scipy(n):
    p = np.array([0.0, 1e-300, 1e-12, 0.02, 0.3, 0.5, 0.77, 0.999, 1 - 1e-12, 1.0])
    for size in sorted({n + 1, max(1, n - 3)}):
        k = np.arange(size)
        ours = W._binomial_pmf(k, n, p)
        ref = stats.binom.pmf(k[None, :], n, p[:, None])
        # a block whose anchor underflows loses values below ~1e-250: nothing against mass 1
        assert np.allclose(ours, ref, rtol=1e-11, atol=1e-250)


def test_time_left_matches_its_closed_form():
    # cdf of the time left r, mixed over flush lengths s with weights w:
    # sum_s w (e^{r/Z} - 1) / (e^{s/Z} - 1) for r < s, w for r >= s (writer._time_left)
    rng = np.random.default_rng(5)
    s = rng.lognormal(0.0, 0.8, 300)
    w = rng.random(300)
    w /= w.sum()
    for z in (0.05, 0.16, 8.0):
        got = W._time_left(s, w, z)
        r = np.array([0.01, 0.1, 0.5, 1.0, 3.0])
        # the law merges the 300 lengths into groups and reads off a 1500-point grid
        order = np.argsort(s)
        ss, ws = s[order], w[order]
        direct = np.array([
            np.sum(ws * np.where(x >= ss, 1.0, np.exp((x - ss) / z) * -np.expm1(-x / z)
                                 / -np.expm1(-ss / z)))
            for x in r])
        # grouping at most 2 nodes a group near the bulk: agreement to 2e-3
        assert np.allclose(got.cdf(r), direct, atol=2e-3)


def test_lag_matches_scipy_quadrature():
    a = L.Lognormal(math.log(0.5), 0.6)
    b = L.Lognormal(math.log(0.8), 0.4)
    lag = lag_distribution(a, b)
    fa, fb = stats.lognorm(0.6, scale=0.5), stats.lognorm(0.4, scale=0.8)
    for x in (0.05, 0.3, 1.0, 3.0):
        want = integrate.quad(lambda y, x=x: fb.pdf(y) * (fa.cdf(y + x) - fa.cdf(y - x)),
                              0, np.inf, limit=200)[0]
        # 600-node midpoint rule over T_b's quantiles: agreement to 1e-3
        assert float(lag.cdf(x)) == pytest.approx(want, abs=1e-3)
    # E|Ta - Tb| by scipy's quadrature: |X - Y| is the length of [min, max), so for
    # independent X, Y, E|X - Y| = int F_X (1 - F_Y) + F_Y (1 - F_X) dt
    mean = integrate.quad(lambda t: fa.cdf(t) * fb.sf(t) + fb.cdf(t) * fa.sf(t), 0, np.inf,
                          limit=200)[0]
    assert lag.mean_ms == pytest.approx(mean, rel=5e-3)


def test_lag_with_a_shared_cause_mixes_in_the_comonotone_lag():
    # two exponentials driven by one uniform: Q(u) = -m ln(1 - u) on both, so their
    # difference is exponential with mean |m_a - m_b| (closed form); independent, the mean
    # is (m_a^2 + m_b^2) / (m_a + m_b) (E|X - Y| for independent exponentials, closed form)
    m_a, m_b = 2.0, 0.5
    a, b = L.Exponential(m_a), L.Exponential(m_b)
    co = lag_distribution(a, b, 1.0)
    assert co.mean_ms == pytest.approx(m_a - m_b, rel=0.02)
    for q in (0.5, 0.9, 0.99):
        want = stats.expon(scale=m_a - m_b).ppf(q)
        assert float(co.quantile(q)) == pytest.approx(want, rel=0.02)
    independent = (m_a ** 2 + m_b ** 2) / (m_a + m_b)
    half = lag_distribution(a, b, 0.5)
    assert half.mean_ms == pytest.approx(0.5 * independent + 0.5 * (m_a - m_b), rel=0.02)
    assert lag_distribution(a, b).mean_ms == pytest.approx(independent, rel=0.01)


def test_open_group_commit_builds_its_response_once():
    flush = L.add_constant(L.Lognormal.from_percentiles(0.3, 2.0), 0.02)
    og = W.open_group_commit(flush, 2.0)
    first = og.response
    assert og.response is first
    # E[T] = E[S] + rho_w E[S^2] / (2 E[S]) (the docstring's formula; Kleinrock 1975, 5.2)
    want = flush.mean_ms + og.writer_busy * flush.second_moment_ms2 / (2 * flush.mean_ms)
    assert first.mean_ms == pytest.approx(want, rel=1e-12)


@pytest.mark.parametrize("n", [0, 1, 8, 9, 100])
def test_binomial_mixture_matches_scipy(n):
    rng = np.random.default_rng(8)
    p = np.concatenate([[0.0, 1.0, 1 - 1e-12], rng.random(40)])
    w = rng.random(len(p))
    w /= w.sum()
    ref = w @ stats.binom.pmf(np.arange(n + 1)[None, :], n, p[:, None])
    assert np.allclose(W._binomial_mixture(w, n, p), ref, rtol=1e-11, atol=1e-250)


def test_from_points_keeps_the_moments_and_the_quantiles():
    # the weighted points' own mean, second moment and quantiles (numpy on the sorted points)
    rng = np.random.default_rng(3)
    v = rng.exponential(2.0, 5000)
    w = rng.random(5000)
    law = L.from_points(v, w)
    p = w / w.sum()
    assert law.mean_ms == pytest.approx(float(p @ v), rel=1e-12)
    assert law.second_moment_ms2 == pytest.approx(float(p @ v**2), rel=1e-12)
    order = np.argsort(v)
    cum = np.cumsum(p[order])
    for q in (0.5, 0.9, 0.99):
        want = v[order][np.searchsorted(cum, q)]
        # masses sit on a grid of 2048 steps over [0, max]: one step of slack
        assert abs(float(law.quantile(q)) - want) <= v.max() / 2048 + 1e-12
