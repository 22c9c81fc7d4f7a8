"""Invariants of the queueing pieces added for closed sessions and deferred commit, over
generated inputs (hypothesis): the finite-source CPU queue, the deferred phase chain with
skipped turns, and the buffer model."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from commitadvisor import latency as L
from commitadvisor import writer as W
from commitadvisor.strategies.deferred import _starts, tick_phase
from commitadvisor.strategies.log_buffer import buffer_waits


@settings(max_examples=40, deadline=None, derandomize=True)
@given(servers=st.integers(1, 16), service_ms=st.floats(0.01, 20.0),
       sessions=st.integers(1, 200), away_ms=st.floats(0.0, 100.0))
def test_finite_source_cpu_respects_its_bounds(servers, service_ms, sessions, away_ms):
    q = W.finite_source_cpu(servers, service_ms, sessions, away_ms)
    x = q.throughput_per_ms
    # operational bounds (Lazowska et al., Quantitative System Performance, ch. 5): no more
    # than c / S, no more than N / (Z + S); at least the work itself at the station
    assert x <= servers / service_ms * (1 + 1e-9)
    assert x <= sessions / (away_ms + service_ms) * (1 + 1e-9)
    assert q.at_cpu.mean_ms >= service_ms * (1 - 1e-9)
    assert 0 <= q.busy_servers <= min(servers, sessions) + 1e-9
    # Little's law over the whole cycle: N = X (Z + R)
    assert sessions == pytest.approx(x * (away_ms + q.at_cpu.mean_ms), rel=1e-6)


@settings(max_examples=25, deadline=None, derandomize=True)
@given(interval_ms=st.floats(0.2, 20.0), p50_ms=st.floats(0.05, 10.0),
       spread=st.floats(1.2, 20.0), rate_per_ms=st.floats(0.01, 20.0))
def test_deferred_flush_starts_are_consistent(interval_ms, p50_ms, spread, rate_per_ms):
    flush = L.Lognormal.from_percentiles(p50_ms, p50_ms * spread)
    to_start, cycle_ms, skipped = _starts(interval_ms, flush, rate_per_ms)
    # each flush start uses up at least one tick (its own, or the ones a late flush before
    # it ran past), so starts come at most once an interval on average (to the chain's
    # discretisation, 128 phase bins); the wait for the next start is at most the longest
    # stretch between turns
    assert cycle_ms >= interval_ms * (1 - 1e-4)
    assert 0.0 <= skipped <= 1.0
    assert 0.0 <= to_start.mean_ms <= max(interval_ms, float(flush.quantile(0.99999)))
    phase = tick_phase(interval_ms, flush, 16)
    if phase is not None:
        v, p_off = phase
        assert 0.0 <= p_off <= 1.0
        assert all(0.0 <= x <= interval_ms for x in v)


@settings(max_examples=8, deadline=None, derandomize=True)
@given(records=st.integers(4, 24), load=st.floats(0.3, 0.9), p50_ms=st.floats(0.2, 1.0))
def test_a_smaller_buffer_never_waits_less(records, load, p50_ms):
    interval_ms = 2.0
    # below the buffer's capacity: commits per interval at most 0.9 x the buffer, flushes
    # (p99 at most 2 ms) rarely outlast the interval
    rate_per_ms = load * records / interval_ms
    flush = L.Lognormal.from_percentiles(p50_ms, 2 * p50_ms)

    def waits(k):
        return buffer_waits(rate_per_ms, interval_ms, k, lambda b: flush,
                            lambda f, n: tick_phase(interval_ms, f, n))

    small, big = waits(records), waits(2 * records)
    assert 0.0 <= big.blocked_share <= small.blocked_share + 1e-6 <= 1.0 + 1e-6
    assert big.ack_wait.mean_ms <= small.ack_wait.mean_ms + 1e-6
    # Little's law for the flushes: commits per flush = rate x mean gap between starts
    assert small.mean_batch == pytest.approx(rate_per_ms * small.cycle_ms,
                                                           rel=0.02)
    assert math.isfinite(small.durable_wait.mean_ms)


def test_a_buffer_that_cannot_carry_the_rate_is_saturation():
    # 4 records a flush, flushes of about 2 ms at a 2 ms interval: at most about 2 commits
    # per ms leave the buffer; 2.2 per ms arrive
    from commitadvisor.evaluate import evaluate
    from tests.reference.evaluator_cases import make_case

    case = make_case(workload={"commit_rate_per_s": 2200.0, "log_bytes_per_commit": 2048},
                     device_a={"latency": {"normal": {"kind": "lognormal", "p50_ms": 2.0,
                                                      "p99_ms": 4.0}}},
                     strategies=[{"kind": "deferred", "device": "a", "flush_every_ms": 2.0,
                                  "buffer_bytes": 4 * 2048}])
    r = evaluate(case).strategies[0].regimes[0]
    assert r.saturation is not None and r.saturation.resource == "buffer:a"
    assert r.ack_mean_ms is None
    # the buffer stays full: a crash takes all four acknowledged commits it holds, and the
    # advice says so with the figure
    host = r.exposure("host_crash")
    assert host.at_risk_mean == host.at_risk_bound == 4 and host.can_lose
    from commitadvisor.cautions import cautions_for

    texts = [c.text for c in cautions_for(case, evaluate(case).strategies[0])
             if c.topic == "loss"]
    assert any("up to 4" in t and "acknowledged commits can be lost" in t for t in texts)
