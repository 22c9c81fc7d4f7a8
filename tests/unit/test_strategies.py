"""Properties and facts of the trade for the strategies, evaluated end to end."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from commitadvisor.case import load_case
from commitadvisor.evaluate import evaluate
from commitadvisor.strategies.context import build_context
from commitadvisor.strategies.synchronous import _one_per_commit_closed
from tests.reference.evaluator_cases import make_case

ROOT = Path(__file__).resolve().parents[2]


def sync_p99(rate, p50, p99):
    case = make_case(workload={"commit_rate_per_s": rate},
                     device_a={"latency": {"normal": {"kind": "lognormal", "p50_ms": p50,
                                                      "p99_ms": p99}}})
    r = evaluate(case).strategies[0].regimes[0]
    return r.ack_mean_ms, r.ack_p99_ms


@settings(max_examples=12, deadline=None)
@given(st.floats(10, 3000), st.floats(1.1, 3.0), st.floats(0.1, 2.0), st.floats(2.0, 20.0))
def test_more_load_never_lowers_and_faster_device_never_raises_sync_latency(rate, more, p50,
                                                                            spread):
    base = sync_p99(rate, p50, p50 * spread)
    loaded = sync_p99(rate * more, p50, p50 * spread)
    faster = sync_p99(rate, p50 / more, p50 * spread / more)
    assert loaded[0] >= base[0] * (1 - 1e-6) and loaded[1] >= base[1] * (1 - 1e-3)
    assert faster[0] <= base[0] * (1 + 1e-6) and faster[1] <= base[1] * (1 + 1e-3)


@settings(max_examples=8, deadline=None)
@given(st.floats(50, 2000), st.floats(0.0, 1.0))
def test_first_of_two_devices_is_never_slower_than_either(rate, shared):
    case = make_case(workload={"commit_rate_per_s": rate}, strategies=[
        {"name": "dual", "kind": "dual_device", "devices": ["a", "b"], "ack_after": "first",
         "shared_cause_share": shared},
        {"name": "only_a", "kind": "synchronous", "device": "a"},
        {"name": "only_b", "kind": "synchronous", "device": "b"}])
    ev = evaluate(case)
    dual, a, b = (ev.strategy(n).regimes[0] for n in ("dual", "only_a", "only_b"))
    for q in ("ack_mean_ms", "ack_p50_ms", "ack_p99_ms"):
        assert getattr(dual, q) <= min(getattr(a, q), getattr(b, q)) * (1 + 2e-3)


def test_exposure_zero_when_waiting_for_a_durable_copy_positive_for_deferred():
    ev = evaluate(load_case(ROOT / "cases" / "ledger_backup_burst.toml"))
    for s in ev.strategies:
        for r in s.regimes:
            host = r.exposure("host_crash")
            if s.kind == "deferred":
                assert host.window_p999_ms > 0 and host.at_risk_mean > 0
                assert r.copies_at_ack == 0
            else:
                assert host.window_p999_ms == 0 and host.at_risk_mean == 0
                assert r.copies_at_ack >= 1


def test_a_volatile_cache_not_declared_honoured_does_not_count():
    ev = evaluate(load_case(ROOT / "cases" / "plp_vs_volatile.toml"))
    cheap = ev.strategy("sync_cheap").regimes[0]
    assert cheap.exposure("host_crash").unbounded
    assert cheap.copies_at_ack == 0
    assert not ev.strategy("sync_plp").regimes[0].exposure("host_crash").can_lose


def test_dual_device_keeps_commit_under_a_millisecond_through_the_burst():
    # common practice, no source: writing to a fast dedicated device and a slow shared one
    # and taking the first keeps the commit wait near the fast device's through the burst.
    case = load_case(ROOT / "cases" / "ledger_backup_burst.toml").model_copy(
        update={"workload": load_case(ROOT / "cases" / "ledger_backup_burst.toml")
                .workload.model_copy(update={"cpus": None})})
    ev = evaluate(case)
    burst = ev.strategy("dual_first").regime("backup_burst")
    sync_burst = ev.strategy("sync_array").regime("backup_burst")
    assert burst.ack_mean_ms < 1.0
    assert sync_burst.ack_p99_ms > 10 * burst.ack_p99_ms


def test_hourly_mean_hides_the_burst():
    # common practice, no source: hourly averages hide a five-minute burst
    ev = evaluate(load_case(ROOT / "cases" / "ledger_backup_burst.toml"))
    s = ev.strategy("sync_array")
    goal = 10.0
    assert s.regime("normal").ack_p99_ms < goal
    assert s.regime("backup_burst").ack_p99_ms > 10 * goal
    assert s.blended.ack_mean_ms < s.regime("backup_burst").ack_p99_ms / 20


def test_deferred_stalls_once_a_long_stall_fills_the_buffer():
    # common practice, no source: deferred commit removes the flush wait but not the
    # bursts: a stall longer than the buffer's fill time blocks commits.
    dev = {"latency": {"normal": {"kind": "lognormal", "p50_ms": 0.5, "p99_ms": 2.0}},
           "stalls": {"normal": {"per_s": 0.2, "duration": {"kind": "lognormal",
                                                            "p50_ms": 800.0, "p99_ms": 2000.0}}}}
    strategy = {"kind": "deferred", "device": "a", "flush_every_ms": 50.0}
    small = make_case(workload={"commit_rate_per_s": 2000.0, "log_bytes_per_commit": 1000},
                      device_a=dev, strategies=[{**strategy, "buffer_bytes": 200_000}])
    large = make_case(workload={"commit_rate_per_s": 2000.0, "log_bytes_per_commit": 1000},
                      device_a=dev, strategies=[{**strategy, "buffer_bytes": 64_000_000}])
    rs, rl = (evaluate(c).strategies[0].regimes[0] for c in (small, large))
    assert rs.ack_p99_ms > 50 * rl.ack_p99_ms  # commits wait for the stall to end
    assert rs.exposure("host_crash").at_risk_bound == 200


def test_one_flush_per_commit_closed_matches_the_finite_source_queue():
    # M/M/1//N (finite population, exponential think and service): P0 = 1 / sum_n N!/(N-n)!
    # (S/Z)^n, X = (1 - P0) / S (Kleinrock, Queueing Systems vol. 1, 1975, section 3.8).
    n, z, s = 8, 20.0, 2.0
    case = make_case(workload={"kind": "closed", "sessions": n, "think_time_ms": z,
                               "log_bytes_per_commit": 100},
                     device_a={"latency": {"normal": {"kind": "exponential", "mean_ms": s}}},
                     strategies=[{"kind": "synchronous", "device": "a", "grouping": "none"}])
    ctx = build_context(case, "normal", 1.0)
    res = _one_per_commit_closed(ctx, ctx.devices["a"], n, z)
    p0 = 1 / sum(math.factorial(n) / math.factorial(n - k) * (s / z) ** k for k in range(n + 1))
    assert res.throughput_per_ms == pytest.approx((1 - p0) / s, rel=1e-9)


def test_closed_throughput_approaches_the_cpu_ceiling():
    # asymptotic bound of operational analysis: X <= 1 / D_max (Lazowska et al., Quantitative
    # System Performance, 1984, ch. 5); with many sessions the CPU sets the ceiling.
    xs = []
    for n in (4, 64, 512):
        case = make_case(workload={"kind": "closed", "sessions": n, "think_time_ms": 1.0,
                                   "log_bytes_per_commit": 100, "cpus": 2,
                                   "cpu_ms_per_commit": 0.5},
                         device_a={"latency": {"normal": {"kind": "lognormal", "p50_ms": 0.05,
                                                          "p99_ms": 0.2}}})
        xs.append(evaluate(case).strategies[0].regimes[0].throughput_per_s)
    ceiling = 2 / 0.5e-3
    assert xs[0] < xs[1] < xs[2] <= ceiling * 1.0001
    assert xs[2] > 0.9 * ceiling


def test_blended_at_risk_quantile_is_that_of_the_time_mixture():
    """Two regimes with fixed windows: the count at a random instant is Poisson(lambda_1 w_1)
    with chance t_1 and Poisson(lambda_2 w_2) otherwise; its p99.9 from scipy.stats.poisson
    directly (no quadrature) must equal the evaluator's."""
    from scipy.stats import poisson

    from commitadvisor import latency as L
    from commitadvisor.strategies.common import at_risk_quantile, mixed_poisson_quantile

    parts = [(0.9, L.Fixed(100.0), 1.2, None), (0.1, L.Fixed(600.0), 1.2, None)]
    n = np.arange(0, 2000)
    cdf = 0.9 * poisson.cdf(n, 120.0) + 0.1 * poisson.cdf(n, 720.0)
    expected = int(n[np.searchsorted(cdf, 0.999)])
    assert at_risk_quantile(parts, 0.999) == expected
    assert mixed_poisson_quantile(L.Fixed(100.0), 1.2, 0.999) == int(poisson.ppf(0.999, 120.0))
    # a hard bound caps its part: never more than 150 commits in the long regime
    capped = [(0.9, L.Fixed(100.0), 1.2, None), (0.1, L.Fixed(600.0), 1.2, 150.0)]
    cdf = 0.9 * poisson.cdf(n, 120.0) + 0.1 * np.where(n >= 150, 1.0, poisson.cdf(n, 720.0))
    assert at_risk_quantile(capped, 0.999) == int(n[np.searchsorted(cdf, 0.999)])
