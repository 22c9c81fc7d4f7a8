"""The stack model on hand-made cases: saturation reported as such, amplification, the
fan-out chance per regime, the database's saturation, the stall check, and a whole stack
against a seeded simulation."""

from __future__ import annotations

import copy
import math
from dataclasses import FrozenInstanceError

import numpy as np
import pytest
from scipy import stats

from commitadvisor.case import parse_case
from commitadvisor.latency import Fixed, Lognormal
from commitadvisor.stack import evaluate_stack, evaluate_stacks
from tests.reference.test_erlang_fanout import _simulate_fcfs
from tests.unit.test_policy import case_dict, cpu_saturation, regime, strategy


def stack_case(tiers, mutate=None):
    d = copy.deepcopy(case_dict())
    del d["workload"]["commit_rate_per_s"]
    d["stack"] = tiers
    d["goals"]["top_tier_p99_ms"] = 200.0
    if mutate:
        mutate(d)
    return parse_case(d, "stack-case")


def two_tiers(requests_per_s=100.0, bottom_threads=16):
    return [
        {"name": "web", "requests_per_s": requests_per_s, "threads": 32,
         "service": {"kind": "lognormal", "p50_ms": 2.0, "p99_ms": 8.0},
         "calls_per_request": 1},
        {"name": "orders", "threads": bottom_threads,
         "service": {"kind": "lognormal", "p50_ms": 1.0, "p99_ms": 4.0},
         "calls_per_request": 4, "commit_share": 0.5,
         "other_call": {"kind": "lognormal", "p50_ms": 0.3, "p99_ms": 1.5}},
    ]


def sync_result(normal_ack, burst_ack):
    return strategy("s_sync", "synchronous",
                    regime("normal", float(normal_ack.quantile(0.99)), ack=normal_ack),
                    regime("burst", float(burst_ack.quantile(0.99)), ack=burst_ack))


def test_a_constant_delay_passes_through_one_to_one():
    # one tier, one call that always commits, fixed own work, threads to spare: the top-tier
    # response is the commit shifted by 2 ms, so every quantile moves by exactly the commit's
    # own move (a constant shifts quantiles exactly) and the amplification is 1
    tiers = [{"name": "web", "requests_per_s": 50.0, "threads": 200,
              "service": {"kind": "fixed", "ms": 2.0}, "calls_per_request": 1,
              "commit_share": 1.0}]
    case = stack_case(tiers)
    n, b = Lognormal.from_percentiles(1.0, 4.0), Lognormal.from_percentiles(5.0, 40.0)
    res = evaluate_stack(case, sync_result(n, b))
    burst = res.regime("burst")
    assert burst.top_p99_ms == pytest.approx(2.0 + float(b.quantile(0.99)), rel=2e-3)
    assert burst.amplification == pytest.approx(1.0, abs=5e-3)
    assert res.regime("normal").amplification is None


def test_a_busy_tier_amplifies_a_slower_commit():
    # the same slow-down of the commit moves the top p99 more when the threads are busy:
    # the holding time grows and the wait for a thread grows faster than it. (With threads
    # to spare the factor is already above 1, about 1.36 here, because a request makes two
    # commits on average; with the pool three quarters busy it was about 1.49.)
    n, b = Lognormal.from_percentiles(1.0, 4.0), Lognormal.from_percentiles(2.0, 12.0)
    idle = evaluate_stack(stack_case(two_tiers(100.0, 200)), sync_result(n, b))
    busy = evaluate_stack(stack_case(two_tiers(1700.0, 16)), sync_result(n, b))
    assert busy.regime("burst").tiers[1].utilisation > 0.7
    assert idle.regime("burst").amplification > 1.0
    assert busy.regime("burst").amplification > 1.05 * idle.regime("burst").amplification


def test_a_tier_out_of_threads_is_saturated_with_its_rate_not_a_huge_latency():
    n, b = Lognormal.from_percentiles(1.0, 4.0), Lognormal.from_percentiles(20.0, 100.0)
    case = stack_case(two_tiers(100.0, 4))
    res = evaluate_stack(case, sync_result(n, b))
    burst = res.regime("burst")
    assert burst.saturated and burst.saturation.resource == "tier:orders"
    assert burst.top_p99_ms is None and burst.top_mean_ms is None
    assert "saturated" in burst.saturation.message
    assert not res.regime("normal").saturated
    # the reported saturating top rate is where the pool really fills: 1 % below it the
    # stack keeps up, 1 % above it it does not
    rate = burst.saturation.saturating_top_rate_per_s
    assert 0 < rate < 100.0
    below = evaluate_stack(stack_case(two_tiers(rate * 0.99, 4)), sync_result(n, b))
    above = evaluate_stack(stack_case(two_tiers(rate * 1.01, 4)), sync_result(n, b))
    assert not below.regime("burst").saturated
    assert above.regime("burst").saturated


def test_the_fanout_chance_uses_each_regimes_own_commit_tail():
    n, b = Lognormal.from_percentiles(1.0, 4.0), Lognormal.from_percentiles(3.0, 30.0)
    case = stack_case(two_tiers())
    res = evaluate_stack(case, sync_result(n, b))
    goal = case.goals.commit_p99_ms
    for name, (p50, p99) in (("normal", (1.0, 4.0)), ("burst", (3.0, 30.0))):
        # reference tail from scipy.stats.lognorm, not from commitadvisor.latency
        sigma = math.log(p99 / p50) / stats.norm.ppf(0.99)
        q = stats.lognorm(s=sigma, scale=p50).sf(goal)
        got = res.regime(name)
        assert got.slow_commit_share == pytest.approx(q, rel=1e-6)
        # 4 database calls per request, half of them commits (Dean and Barroso, CACM 2013)
        assert got.slow_request_chance == pytest.approx(1 - (1 - 0.5 * q) ** 4, rel=1e-6)
    # a blended q would understate the burst and overstate the normal regime
    blended_q = 0.9 * res.regime("normal").slow_commit_share + \
        0.1 * res.regime("burst").slow_commit_share
    assert res.regime("burst").slow_request_chance > 1 - (1 - 0.5 * blended_q) ** 4


def test_a_saturated_database_saturates_the_stack():
    n = Lognormal.from_percentiles(1.0, 4.0)
    sr = strategy("s_sync", "synchronous", regime("normal", 4.0, ack=n),
                  regime("burst", None, saturation=cpu_saturation()))
    res = evaluate_stack(stack_case(two_tiers()), sr)
    burst = res.regime("burst")
    assert burst.saturated and burst.saturation.resource == "database"
    assert "cpu" in burst.saturation.message.lower() or "CPU" in burst.saturation.message
    assert res.worst.regime == "burst"
    assert res.regime("normal").top_p99_ms is not None


def test_a_device_stall_that_outlasts_the_threads_is_cautioned():
    def stalls(d):
        d["regimes"][0]["name"] = "burst"
        d["devices"]["dev_a"]["stalls"] = {"burst": {
            "per_s": 0.5, "duration": {"kind": "lognormal", "p50_ms": 500.0, "p99_ms": 900.0}}}

    case = stack_case(two_tiers(200.0, 16), stalls)
    n, b = Lognormal.from_percentiles(1.0, 4.0), Lognormal.from_percentiles(2.0, 12.0)
    sync = evaluate_stack(case, sync_result(n, b))
    # 200 requests/s x 0.5 s x P(a request commits) ~ 94 requests held, against 16 threads
    text = " ".join(sync.regime("burst").cautions)
    assert "tier orders" in text and "16 threads" in text and "500 ms" in text
    assert sync.regime("normal").cautions == ()
    dual = strategy("s_dual", "dual_device", regime("normal", 1.0, ack=n),
                    regime("burst", 1.0, ack=n))
    assert evaluate_stack(case, dual).regime("burst").cautions == ()


def test_stack_results_are_frozen_and_empty_without_a_stack():
    n = Lognormal.from_percentiles(1.0, 4.0)
    res = evaluate_stack(stack_case(two_tiers()), sync_result(n, n))
    with pytest.raises(FrozenInstanceError):
        res.regimes[0].top_p99_ms = 1.0  # type: ignore[misc]
    assert isinstance(res.regimes, tuple) and isinstance(res.regimes[0].tiers, tuple)
    from tests.unit.test_policy import make_case

    assert evaluate_stacks(make_case(), (sync_result(n, n),)) == ()
    with pytest.raises(ValueError, match="no stack"):
        evaluate_stack(make_case(), sync_result(n, n))


def test_one_tier_stack_against_a_seeded_simulation():
    # one tier, 12 threads, own work lognormal, 3 database calls that all commit: the model's
    # top-tier p99 against a first-come first-served simulation of the same tier drawing the
    # same distributions. At this load (about 45 % of the threads) the thread wait is small,
    # so the Erlang C approximation should be within 3 % (sampling error of a p99 from
    # 150,000 correlated responses: about 1 %, seen over seeds while writing the test).
    tiers = [{"name": "web", "requests_per_s": 500.0, "threads": 12,
              "service": {"kind": "lognormal", "p50_ms": 4.0, "p99_ms": 20.0},
              "calls_per_request": 3, "commit_share": 1.0}]
    case = stack_case(tiers)
    ack = Lognormal.from_percentiles(1.5, 9.0)
    res = evaluate_stack(case, sync_result(ack, ack)).regime("normal")
    service = Lognormal.from_percentiles(4.0, 20.0)

    class Holding:
        def sample(self, rng, size):
            return service.sample(rng, size) + ack.sample(rng, size * 3).reshape(size, 3).sum(1)

    sim = _simulate_fcfs(np.random.default_rng(3), 0.5, 12, Holding(), 150_000)[3_000:]
    assert res.tiers[0].utilisation == pytest.approx(0.5 * res.tiers[0].holding_mean_ms / 12)
    assert 0.3 < res.tiers[0].utilisation < 0.6
    assert res.top_p99_ms == pytest.approx(float(np.quantile(sim, 0.99)), rel=0.03)
    assert res.top_mean_ms == pytest.approx(float(sim.mean()), rel=0.02)


def test_fixed_holding_keeps_its_atom():
    # a tier whose holding is a constant: with threads to spare its p99 is that constant
    tiers = [{"name": "web", "requests_per_s": 10.0, "threads": 50,
              "service": {"kind": "fixed", "ms": 3.0}, "calls_per_request": 1,
              "commit_share": 1.0}]
    res = evaluate_stack(stack_case(tiers), sync_result(Fixed(1.0), Fixed(1.0)))
    assert res.regime("normal").top_p99_ms == pytest.approx(4.0, rel=1e-3)


def test_no_amplification_factor_when_the_commit_p99_barely_moves():
    # a burst that leaves the commit p99 where it was (1e-4 ms apart) gives no factor, not
    # the ratio of two rounding-level differences
    n = Lognormal.from_percentiles(1.0, 4.0)
    b = Lognormal(n.mu + 2e-5, n.sigma)
    res = evaluate_stack(stack_case(two_tiers()), sync_result(n, b))
    assert abs(res.regime("burst").commit_p99_ms - res.regime("normal").commit_p99_ms) < 1e-3
    assert res.regime("burst").amplification is None
