"""Benchmark review: think time, durable figures, commits at risk and the bounds, each checked
against a law, a published value or a seeded simulation of the mechanism."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from commitadvisor import latency as L
from commitadvisor import writer as W
from commitadvisor.case import load_case, parse_case
from commitadvisor.review import (
    NoBenchmark,
    default_batched,
    deferred_at_risk,
    durable_bounds,
    review_benchmark,
    think_time,
)
from commitadvisor.strategies.context import build_context

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = ROOT / "cases" / "benchmark_deferred_review.toml"

BASE = """
schema_version = 1
title = "Larkspur Mills ledger bench (fictional)"
[workload]
kind = "open"
commit_rate_per_s = 100.0
log_bytes_per_commit = {log_bytes}
{host}
[recovery]
process_crash = {{ per_year = 2.0 }}
host_crash = {{ per_year = 1.0 }}
device_loss = {{ per_year = 0.1 }}
value_per_commit = 3.0
currency = "EUR"
[goals]
commit_p99_ms = 20.0
[devices.d]
cache = "{cache}"
bandwidth_mb_per_s = {bandwidth}
profile_block_bytes = {block}
latency.normal = {{ kind = "lognormal", p50_ms = {p50}, p99_ms = {p99} }}
[[strategies]]
kind = "synchronous"
device = "d"
{benchmark}
"""


def make_case(benchmark: str, *, log_bytes=1, host="", bandwidth=1000.0, block=1048576,
              p50=1.0, p99=10.0, cache="power_loss_protected"):
    text = BASE.format(log_bytes=log_bytes, host=host, bandwidth=bandwidth, block=block,
                       p50=p50, p99=p99, benchmark=benchmark, cache=cache)
    return parse_case(tomllib.loads(text))


def bench(x_per_s, r_ms, n, mode="synchronous", extra=""):
    return (f"[benchmark]\nreported_commits_per_s = {x_per_s!r}\n"
            f"reported_mean_latency_ms = {r_ms!r}\nsessions = {n}\n"
            f"commit_mode = \"{mode}\"\ndevice = \"d\"\n{extra}")


def bounds_of(case):
    """The bounds in the normal regime, without the (slower) durable-figure models."""
    b = case.benchmark
    z = think_time(b.sessions, b.reported_commits_per_s, b.reported_mean_latency_ms).think_ms
    return durable_bounds(build_context(case, "normal", 1.0), "d", b.sessions, z,
                          b.reported_commits_per_s)


def at_risk_of(case):
    return deferred_at_risk(case, build_context(case, "normal", 1.0))


@pytest.fixture(scope="module")
def shipped():
    case = load_case(SHIPPED)
    return case, review_benchmark(case)


# --------------------------------------------------------------------------- think time
def test_think_time_comes_from_the_benchmarks_own_figures(shipped):
    case, r = shipped
    b = case.benchmark
    # interactive response time law Z = N/X - R (Lazowska et al. 1984, ch. 3), by hand
    z = b.sessions / (b.reported_commits_per_s / 1000.0) - b.reported_mean_latency_ms
    assert r.think.think_ms == pytest.approx(z, rel=1e-12)
    assert r.think.consistent and r.think.think_ms >= 0


def test_inconsistent_figures_give_zero_think_time_and_say_so():
    # 10 sessions at 1,000/s leave each 10 ms per commit; a 25 ms mean latency is impossible
    t = think_time(10, 1000.0, 25.0)
    assert t.raw_think_ms == pytest.approx(-15.0)
    assert t.think_ms == 0.0 and not t.consistent
    assert "inconsistent" in t.message
    r = review_benchmark(make_case(bench(1000.0, 25.0, 10)))
    assert r.think.think_ms == 0.0
    assert "inconsistent" in r.verdict


# --------------------------------------------------------------------------- durable figures
def test_durable_figures_satisfy_the_interactive_response_time_law():
    # CHECKS.md (closed workloads, computed; simulation and embedded chain agree): lognormal
    # flush p50 1 ms / p99 10 ms, exponential think time, N = 20, Z = 10 ms -> X = 1491/s,
    # R = 3.39-3.41 ms. The benchmark's figures are chosen so that N/X - R = 10 ms exactly.
    n, x, z = 20, 1491.0, 10.0
    r = review_benchmark(make_case(bench(x, 1000.0 * n / x - z, n)))
    assert r.think.think_ms == pytest.approx(z)
    f = r.durable_figure("synchronous")
    assert f.throughput_per_s == pytest.approx(1491.0, rel=0.01)
    # the chain's mean response, computed separately from its response law (the time left of
    # the flush in progress plus the next flush), against R = N/X - Z from the review's X
    chain = W.closed_group_commit(lambda b: L.Lognormal.from_percentiles(1.0, 10.0), n, z)
    law_ms = n / (f.throughput_per_s / 1000.0) - z
    assert chain.response.mean_ms == pytest.approx(law_ms, rel=0.01)
    assert f.ack_mean_ms == pytest.approx(law_ms, rel=0.01)
    assert 3.39 * 0.99 <= f.ack_mean_ms <= 3.41 * 1.01
    assert f.law_mean_ms == pytest.approx(law_ms, rel=1e-9)


def test_shipped_review_durable_figures_obey_the_law_and_the_bounds(shipped):
    case, r = shipped
    n, z = case.benchmark.sessions, r.think.think_ms
    for f in r.durable:
        assert f.law_mean_ms == pytest.approx(n / (f.throughput_per_s / 1000.0) - z, rel=1e-9)
        if not f.saturated:
            # the CPU wait is folded in by a few fixed-point steps: 5 % covers their residue
            assert f.ack_mean_ms == pytest.approx(f.law_mean_ms, rel=0.05)
        feas = r.feasibility_in(f.regime)
        # operational analysis: no model may beat its asymptotic bound
        assert f.throughput_per_s <= feas.ceiling_per_s * (1 + 1e-9)
    assert {f.strategy for f in r.durable} == {"synchronous", "batched"}
    assert {f.regime for f in r.durable} == set(case.regime_names())


def test_default_batched_settings_are_stated():
    s, why = default_batched(make_case(bench(1491.0, 3.41, 20), p50=0.8, p99=4.0), "d")
    assert "default" in why
    assert s.gather_window_ms == 0.8 and s.gather_target_commits == 16  # median flush, min(16, N)
    s, _ = default_batched(make_case(bench(1491.0, 3.41, 5)), "d")
    assert s.gather_target_commits == 5


# --------------------------------------------------------------------------- feasibility
HOST = ("cpus = 2\ncpu_ms_per_commit = 0.5\ncpu_us_per_flush = 40.0\n"
        "other_cpu_utilisation = 0.1")


def _cpu_ceiling_per_s(n):
    # cpus (1 - other) / (CPU per commit + CPU per flush / batch), batch = N
    # (Lazowska et al. 1984, ch. 5): 2 x 0.9 / (0.5 ms + 0.040 ms / N)
    return 1000.0 * 2 * 0.9 / (0.5 + 0.040 / n)


def test_a_claimed_durable_rate_above_the_cpu_ceiling_is_flagged():
    n = 50
    claimed = 5000.0  # the ceiling is about 3,600/s
    r = review_benchmark(make_case(bench(claimed, 1.0, n), host=HOST))
    feas = r.feasibility_in()
    assert feas.binding == "cpu"
    assert feas.ceiling_per_s == pytest.approx(_cpu_ceiling_per_s(n), rel=1e-9)
    assert not feas.possible
    assert "not reachable" in feas.message and "not reachable" in r.verdict.lower()
    assert r.durable_figure("synchronous").throughput_per_s <= feas.ceiling_per_s


def test_a_rate_below_every_bound_is_not_flagged():
    n = 50
    # Z = 50 / 2,000/s - 20 ms = 5 ms: the sessions bound (about 6,900/s) lies above the CPU's
    feas = bounds_of(make_case(bench(2000.0, 20.0, n), host=HOST))
    assert feas.possible and "not ruled out" in feas.message
    assert feas.ceiling_per_s == pytest.approx(_cpu_ceiling_per_s(n), rel=1e-9)


def test_a_latency_below_the_least_durable_commit_time_is_caught_by_the_sessions_bound():
    # reported R = 0.5 ms, but a durable commit waits at least one whole flush (mean 1.63 ms
    # for lognormal p50 1 ms / p99 10 ms: exp(mu + sigma^2 / 2), scipy below)
    sigma = math.log(10.0) / stats.norm.ppf(0.99)
    mean_flush_ms = stats.lognorm(s=sigma, scale=1.0).mean()
    n, x, r_ms = 20, 2000.0, 0.5
    feas = bounds_of(make_case(bench(x, r_ms, n)))
    z = 1000.0 * n / x - r_ms
    assert feas.least_mean_ms == pytest.approx(mean_flush_ms, rel=1e-6)
    sessions_bound = next(b for b in feas.bounds if b.name == "sessions")
    assert sessions_bound.limit_per_s == pytest.approx(1000.0 * n / (z + mean_flush_ms), rel=1e-6)
    assert feas.binding == "sessions" and not feas.possible


def test_the_bandwidth_bound():
    # 4 MB/s for 2,000-byte commits: 2,000 commits/s at most
    feas = bounds_of(make_case(bench(3000.0, 2.0, 40), log_bytes=2000, bandwidth=4.0))
    bw = next(b for b in feas.bounds if b.name == "bandwidth")
    assert bw.limit_per_s == pytest.approx(2000.0)
    assert feas.binding == "bandwidth" and not feas.possible


# --------------------------------------------------------------------------- at risk
DEFERRED = 'flush_every_ms = 10.0\nbuffer_bytes = 4194304\nduration_s = 600\n'


def _simulated_at_risk(rate_per_ms, interval_ms, p50, p99, log_bytes, block, bw_bytes_per_ms,
                       rng, cycles):
    """Seeded simulation of the mechanism itself: Poisson commits acknowledged at once; the
    writer starts a flush every interval (or when the previous ends, if later) carrying what
    arrived since the previous flush started; a commit is durable when its flush ends.
    Returns the counts of acknowledged-not-durable commits at random instants and just before
    each flush completes, and the exposure windows."""
    horizon = cycles * interval_ms
    arrivals = np.sort(rng.uniform(0, horizon, rng.poisson(rate_per_ms * horizon)))
    sigma = math.log(p99 / p50) / stats.norm.ppf(0.99)
    device_ms = stats.lognorm(s=sigma, scale=p50).rvs(size=cycles, random_state=rng)
    starts = np.empty(cycles)
    ends = np.empty(cycles)
    prev_end, prev_edge = 0.0, 0
    for k in range(cycles):
        starts[k] = max(k * interval_ms, prev_end)
        edge = int(np.searchsorted(arrivals, starts[k]))  # flush k carries [start_k-1, start_k)
        transfer = max(0.0, (edge - prev_edge) * log_bytes - block) / bw_bytes_per_ms
        ends[k] = starts[k] + device_ms[k] + transfer
        prev_end, prev_edge = ends[k], edge
    # a commit arriving in [start_k, start_{k+1}) is carried by flush k + 1
    carrier = np.searchsorted(starts, arrivals, side="right")
    keep = carrier < cycles
    durable = ends[carrier[keep]]
    arrivals = arrivals[keep]
    probes = rng.uniform(interval_ms, horizon - 3 * interval_ms, 100_000)
    acked = np.searchsorted(arrivals, probes, side="right")
    durable_sorted = np.sort(durable)
    done = np.searchsorted(durable_sorted, probes, side="right")
    before = ends[1:-2] - 1e-9
    peaks = (np.searchsorted(arrivals, before, side="right")
             - np.searchsorted(durable_sorted, before, side="right"))
    return acked - done, peaks, durable - arrivals


def test_at_risk_is_rate_times_exposure_and_matches_a_simulation():
    rate_per_s, p50, p99, log_bytes, block, mb_per_s = 5000.0, 1.0, 3.0, 1000, 8192, 100.0
    case = make_case(bench(rate_per_s, 2.0, 50, "deferred", DEFERRED), log_bytes=log_bytes,
                     bandwidth=mb_per_s, block=block, p50=p50, p99=p99)
    a = at_risk_of(case)
    lam, interval = rate_per_s / 1000.0, 10.0
    # E[S]: lognormal mean (scipy) + the transfer of one interval's commits beyond the block
    sigma = math.log(p99 / p50) / stats.norm.ppf(0.99)
    e_s = stats.lognorm(s=sigma, scale=p50).mean() + (lam * interval * log_bytes - block) / (
        mb_per_s * 1000.0)
    assert a.flush_mean_ms == pytest.approx(e_s, rel=1e-6)
    assert a.host_window_mean_ms == pytest.approx(interval / 2 + e_s, rel=1e-9)
    # Little's law (Little, Operations Research 9(3), 1961): L = lambda W
    assert a.host_at_risk_mean == pytest.approx(lam * a.host_window_mean_ms, rel=1e-12)
    assert a.process_at_risk_mean == pytest.approx(lam * interval / 2, rel=1e-12)
    assert a.buffer_bound == 4194304 // log_bytes
    assert a.at_most == a.buffer_bound
    assert a.value_at_most == pytest.approx(3.0 * a.buffer_bound)
    assert a.value_mean == pytest.approx(3.0 * a.host_at_risk_mean)
    counts, peaks, windows = _simulated_at_risk(lam, interval, p50, p99, log_bytes, block,
                                         mb_per_s * 1000.0, np.random.default_rng(20261202),
                                         cycles=20_000)
    # tolerance: 4 standard errors, taking only the 20,000 cycles as independent (the probes
    # within one cycle are correlated), so se = sd(count) / sqrt(20,000)
    se = counts.std() / math.sqrt(20_000)
    assert counts.mean() == pytest.approx(a.host_at_risk_mean, abs=4 * se)
    assert windows.mean() == pytest.approx(a.host_window_mean_ms, rel=0.01)
    # the steady peak is the p99.9 over flush cycles of the count just before a flush ends:
    # P(peak > it) <= 0.001 < P(peak >= it), each side within 4 binomial standard errors
    # over the ~20,000 simulated cycles
    tol = 4 * math.sqrt(0.001 * 0.999 / peaks.size)
    assert (peaks > a.steady_peak).mean() <= 0.001 + tol
    assert (peaks >= a.steady_peak).mean() >= 0.001 - tol


def test_shipped_at_risk_obeys_littles_law_and_the_buffer_bound(shipped):
    case, r = shipped
    a = r.at_risk
    b = case.benchmark
    assert a.applies and a.rate_per_s == b.reported_commits_per_s
    assert a.host_at_risk_mean == pytest.approx(
        b.reported_commits_per_s / 1000.0 * a.host_window_mean_ms, rel=1e-12)
    assert a.cycle_ms == max(b.flush_every_ms, a.flush_mean_ms)
    assert a.host_window_mean_ms == pytest.approx(a.cycle_ms / 2 + a.flush_mean_ms)
    assert a.buffer_bound == b.buffer_bytes // case.workload.log_bytes_per_commit
    assert a.value_at_most == pytest.approx(a.at_most * case.recovery.value_per_commit)
    # the numbers the verdict quotes are the review's own
    from commitadvisor.policy import format_value

    for figure in (a.host_at_risk_mean, a.at_most, a.steady_peak):
        assert format_value(figure, "commits").split()[0] in r.verdict


def test_without_a_buffer_size_the_most_is_one_cycle_plus_the_flush_in_flight():
    extra = "flush_every_ms = 20.0\n"
    case = make_case(bench(2000.0, 2.0, 30, "deferred", extra), p50=1.0, p99=4.0)
    a = at_risk_of(case)
    assert a.buffer_bound is None
    assert a.at_most == a.steady_peak
    # a Poisson count of mean X (C + S): its p99.9 lies above X (C + E[S]) and, for a flush
    # far shorter than the cycle, within a few Poisson deviations of X (C + S_p99.9)
    lam = 2.0
    assert lam * (20.0 + a.flush_mean_ms) < a.at_most
    assert a.at_most <= lam * (20.0 + a.flush_p999_ms) + 4 * math.sqrt(lam * 20.0) + 1
    assert "no buffer size" in a.at_most_basis


def test_a_volatile_device_leaves_the_host_crash_loss_unbounded_and_says_so():
    case = make_case(bench(2000.0, 2.0, 30, "deferred", "flush_every_ms = 20.0\n"),
                     cache="volatile")
    r = review_benchmark(case)
    assert not r.at_risk.host_bounded and not r.device_counts_as_durable
    assert "without bound" in r.verdict and "not count as durable" in r.verdict
    assert any("volatile write cache" in n for n in r.notes)
    assert all(f.copies_at_ack == 0 for f in r.durable)


def test_a_durable_benchmark_has_nothing_at_risk():
    a = at_risk_of(make_case(bench(1491.0, 3.41, 20)))
    assert not a.applies and a.at_most == 0.0 and a.host_at_risk_mean == 0.0
    # ... unless its flushes do not count as durable: then nothing bounds a power loss
    a = at_risk_of(make_case(bench(1491.0, 3.41, 20), cache="volatile"))
    assert not a.host_bounded and a.at_most is None and a.host_at_risk_mean is None
    assert "does not count as durable" in a.at_most_basis


# --------------------------------------------------------------------------- verdict
def test_verdict_says_what_the_numbers_show_without_calling_deferred_wrong(shipped):
    case, r = shipped
    v = r.verdict
    assert "deferred commit" in v and "before it was durable" in v
    assert "wrong" not in v.lower()
    sync = r.durable_figure("synchronous")
    from commitadvisor.policy import format_value

    assert format_value(sync.throughput_per_s, "") in v
    assert format_value(r.feasibility_in().ceiling_per_s, "") in v or r.feasibility_in().possible
    assert "recovery policy" in r.deferral and "regulation" in r.deferral


def test_no_benchmark_section_raises():
    case = load_case(ROOT / "cases" / "ledger_backup_burst.toml")
    assert case.benchmark is None
    with pytest.raises(NoBenchmark, match=r"\[benchmark\]"):
        review_benchmark(case)
