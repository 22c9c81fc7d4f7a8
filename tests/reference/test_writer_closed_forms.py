"""The log-writer laws against closed forms and published check values.

Sources are named beside each check; "computed" values were recomputed from the formula.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from commitadvisor import latency as L
from commitadvisor import writer as W

LOGN_1_10 = L.Lognormal.from_percentiles(1.0, 10.0)


def test_one_flush_per_commit_is_mm1_for_exponential_flushes():
    # M/M/1, lambda = 125/s, S = 2 ms: rho = 0.25, R = S / (1 - rho) = 2.667 ms; the sojourn is
    # exponential with rate mu - lambda, so its p-quantile is R ln(1/(1-p)).
    # (Kleinrock, Queueing Systems vol. 1, 1975, ch. 3; Jain 1991, Example 31.1 — from memory.)
    t = W.one_flush_per_commit(L.Exponential(2.0), 0.125)
    assert t.mean_ms == pytest.approx(2.6667, rel=1e-3)
    for p, expected in ((0.5, 1.848), (0.9, 6.140), (0.99, 12.28), (0.999, 18.42)):
        assert float(t.quantile(p)) == pytest.approx(expected, rel=5e-3)


def test_one_flush_per_commit_md1_pollaczek_khinchine():
    # M/D/1 with rho = 0.8, S = 1: W = S + rho S / (2 (1 - rho)) = 3 (Pollaczek-Khinchine,
    # Kleinrock 1975, ch. 5).
    t = W.one_flush_per_commit(L.Fixed(1.0), 0.8)
    assert t.mean_ms == pytest.approx(3.0, rel=1e-9)
    grid_mean, _ = L._moments_from_cdf(t.base.x_ms, t.base.cdf_at) if hasattr(t, "base") else (
        None, None)
    assert grid_mean is None or grid_mean + 1.0 == pytest.approx(3.0, rel=0.01)


def test_one_flush_per_commit_saturates_at_rho_one():
    assert W.one_flush_per_commit(L.Fixed(2.0), 0.5) is None


@pytest.mark.parametrize("x, factor", [(0.1, 1.0498), (1.0, 1.3655), (5.0, 1.4993)])
def test_natural_group_commit_deterministic_flush(x, factor):
    # Poisson lambda, fixed flush F: E[T] = F (1.5x + e^-x) / (x + e^-x), x = lambda F
    # (CHECKS.md "natural group commit", derived twice and checked by simulation; computed).
    assert factor == pytest.approx((1.5 * x + math.exp(-x)) / (x + math.exp(-x)), abs=1e-4)
    r = W.open_group_commit(L.Fixed(1.0), x)
    assert r.response.mean_ms == pytest.approx(factor, rel=2e-4)
    # the mean batch is lambda F + e^-lambda F (same source)
    assert r.mean_batch == pytest.approx(x + math.exp(-x), rel=1e-6)


@pytest.mark.parametrize("rate_per_s, mean_ms", [(100, 1.98), (800, 3.26), (3000, 3.75)])
def test_natural_group_commit_lognormal(rate_per_s, mean_ms):
    # lognormal p50 1 / p99 10 ms: values computed by quadrature and confirmed by a
    # one-million-commit simulation within 1 % (CHECKS.md).
    r = W.open_group_commit(LOGN_1_10, rate_per_s / 1000)
    assert r.response.mean_ms == pytest.approx(mean_ms, rel=0.01)
    # the distribution's own mean (numeric grid) agrees with the closed-form mean
    assert LOGN_1_10.mean_ms == pytest.approx(1.632, abs=1e-3)


def test_group_commit_mean_exceeds_mean_flush_by_inspection_paradox():
    # common practice, no source: a mean flush under 1 ms can coexist with a few flushes over
    # a second, and commits then wait many times the mean flush.
    heavy = L.mixture([0.9996, 0.0004], [L.Lognormal(math.log(0.5), 0.4),
                                         L.Lognormal(math.log(1000.0), 0.2)])
    assert heavy.mean_ms < 1.0
    r = W.open_group_commit(heavy, 3.0)
    assert r.response.mean_ms > 50 * heavy.mean_ms


@pytest.mark.parametrize("n, z, x_per_s, r_ms, tol", [
    (5, 10.0, 399, 2.53, 0.01),
    (20, 10.0, 1491, 3.40, 0.01),
    (100, 20.0, 4224, 3.66, 0.01),
])
def test_closed_chain_against_published_simulation(n, z, x_per_s, r_ms, tol):
    # CHECKS.md "closed workloads with natural group commit": a 200 k-flush simulation and the
    # embedded chain agree on these values (computed).
    c = W.closed_group_commit(lambda b: LOGN_1_10, n, z)
    assert c.throughput_per_ms * 1000 == pytest.approx(x_per_s, rel=tol)
    assert c.mean_response_ms == pytest.approx(r_ms, rel=0.02)
    # the response distribution carries the same mean as the interactive response time law
    assert c.response.mean_ms == pytest.approx(c.mean_response_ms, rel=0.01)


def test_closed_chain_single_session_no_think_is_one_over_mean_flush():
    # N = 1, Z -> 0: one flush after another, X = 1 / E[S] (operational analysis).
    c = W.closed_group_commit(lambda b: LOGN_1_10, 1, 1e-4)
    assert c.throughput_per_ms == pytest.approx(1 / LOGN_1_10.mean_ms, rel=1e-3)


def test_closed_chain_heavy_tail_is_far_below_the_open_fixed_point():
    # CHECKS.md heavy-tail case: simulation R ~ 15.3 ms, chain ~ 14.5 ms; the open-law fixed
    # point would give ~116 ms. We accept the chain within 10 % of the simulation.
    heavy = L.mixture([0.9996, 0.0004], [L.Lognormal(math.log(0.5), 0.4),
                                         L.Lognormal(math.log(1000.0), 0.2)])
    c = W.closed_group_commit(lambda b: heavy, 100, 20.0)
    assert c.mean_response_ms == pytest.approx(15.3, rel=0.10)
    assert c.throughput_per_ms * 1000 == pytest.approx(2835, rel=0.05)


@pytest.mark.parametrize("c, a, expected", [
    (3, 2.0, 4 / 9), (4, 2.5, 0.3199), (5, 2.5, 0.1304), (6, 2.5, 0.0474), (2, 1.5, 0.6429),
])
def test_erlang_c(c, a, expected):
    # Erlang C values computed from the formula in CHECKS.md (Kleinrock 1975, ch. 3).
    assert W.erlang_c(c, a) == pytest.approx(expected, abs=1e-4)


def test_mmc_wait_jain_example():
    # Jain 1991, Example 31.2 (from memory; computed): lambda = 10/h, S = 20 min, c = 5 ->
    # C = 0.3267, Wq = 3.92 min.
    w = W.mmc_wait(5, 20.0, 10 / 60)
    assert W.erlang_c(5, 10 / 60 * 20) == pytest.approx(0.3267, abs=1e-4)
    assert w.mean_ms == pytest.approx(3.92, rel=2e-3)


def test_min_of_two_exponentials_is_exponential_with_summed_rate():
    # Ross, Introduction to Probability Models, ch. 5 (from memory).
    m = L.minimum(L.Exponential(1.0), L.Exponential(0.5))
    assert m.mean_ms == pytest.approx(1 / 3, rel=1e-3)
    q = np.array([0.5, 0.9, 0.99])
    assert np.allclose(m.quantile(q), -np.log1p(-q) / 3, rtol=5e-3)


def test_min_of_two_lognormals():
    # CHECKS.md: two iid lognormals, median 1 ms, sigma 0.5: min mean 0.820, min median 0.761,
    # the min's p-quantile is F^-1(1 - sqrt(1 - p)) (computed).
    a = L.Lognormal(0.0, 0.5)
    m = L.minimum(a, a)
    assert m.mean_ms == pytest.approx(0.820, abs=2e-3)
    assert float(m.quantile(0.5)) == pytest.approx(0.761, abs=2e-3)
    assert float(m.quantile(0.99)) == pytest.approx(float(a.quantile(1 - math.sqrt(0.01))),
                                                    rel=5e-3)
