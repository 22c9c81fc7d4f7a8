"""The analytic evaluator against the independent simpy reference models.

The reference models (tests/reference/simpy_models.py) share no code with commitadvisor.
Tolerances: the evaluator's own targets are 3 % on the mean and 5 % on p99 (issue 4); the
reference run adds its sampling noise, which we measured across seeds at 100-150 k commits as
about 1 % on the mean and 2-3 % on p99 for these light-tailed profiles, so the checks allow
4 % and 7 %. Heavy-tailed percentiles beyond p99 are too noisy at these sizes to assert.
"""

from __future__ import annotations

import numpy as np
import pytest

from commitadvisor.evaluate import evaluate
from tests.reference import simpy_models as R
from tests.reference.evaluator_cases import make_case

MEAN_TOL, P99_TOL = 0.04, 0.07


def flush_fn(sampler, log_bytes=100, block=8192, bytes_per_ms=1e6):
    """The evaluator's flush law: device time plus the transfer beyond the profiled block."""
    return lambda rng, b: sampler(rng) + max(0.0, b * log_bytes - block) / bytes_per_ms


def close(ours, theirs, tol):
    assert ours == pytest.approx(theirs, rel=tol), f"evaluator {ours:.4g} vs reference {theirs:.4g}"


def lognormal_device(p50, p99):
    return {"latency": {"normal": {"kind": "lognormal", "p50_ms": p50, "p99_ms": p99}}}


@pytest.mark.parametrize("rate", [100, 800, 3000])
def test_synchronous_open_group_commit(rate):
    r = evaluate(make_case(workload={"commit_rate_per_s": float(rate)})).strategies[0].regimes[0]
    sim = R.run_open(rate, flush_fn(R.lognormal_sampler(1.0, 10.0)), mode="group", seed=11,
                     commits=120_000).response_ms
    close(r.ack_mean_ms, sim.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim, 0.99), P99_TOL)


def test_synchronous_with_time_based_stalls():
    dev = {**lognormal_device(0.6, 3.0), "stalls": {"normal": {
        "per_s": 0.5, "duration": {"kind": "lognormal", "p50_ms": 100.0, "p99_ms": 300.0}}}}
    r = evaluate(make_case(workload={"commit_rate_per_s": 1200.0}, device_a=dev)
                 ).strategies[0].regimes[0]
    run = R.run_open(1200, flush_fn(R.lognormal_sampler(0.6, 3.0)), mode="group", seed=2,
                     commits=240_000, stalls=(0.5, R.lognormal_sampler(100.0, 300.0)))
    sim = run.response_ms
    # about 120 stalls in the run: their count's noise (~9 %) dominates, so 10 % here
    close(r.ack_mean_ms, sim.mean(), 0.10)
    close(r.ack_p99_ms, np.quantile(sim, 0.99), 0.10)
    # no flushes while stalled, one for the pile-up, the held flush busy throughout: without
    # that the batch reads 5 % low and the writer 0.03 idle
    close(r.mean_batch_commits, run.batch_sizes.mean(), 0.02)
    assert r.writer_utilisation == pytest.approx(run.writer_busy_share, abs=0.01)


@pytest.mark.parametrize("rate, window, target, p50, p99", [
    (1200, 1.0, 8, 0.6, 3.0), (5000, 2.0, 8, 0.6, 3.0), (300, 1.0, 8, 0.6, 3.0),
])
def test_batched_commit(rate, window, target, p50, p99):
    case = make_case(workload={"commit_rate_per_s": float(rate)},
                     device_a=lognormal_device(p50, p99),
                     strategies=[{"kind": "batched", "device": "a", "gather_window_ms": window,
                                  "gather_target_commits": target}])
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_open(rate, flush_fn(R.lognormal_sampler(p50, p99)), mode="batched", seed=3,
                     commits=120_000, gather_window_ms=window, gather_target=target)
    close(r.ack_mean_ms, sim.response_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)
    close(r.mean_batch_commits, np.mean(sim.batch_sizes), 0.05)


def test_closed_sessions_chain():
    case = make_case(workload={"kind": "closed", "sessions": 20, "think_time_ms": 10.0,
                               "log_bytes_per_commit": 100})
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_closed(20, 10.0, flush_fn(R.lognormal_sampler(1.0, 10.0)), seed=4,
                       commits=120_000)
    close(r.throughput_per_s, sim.throughput_per_s, 0.02)
    close(r.ack_mean_ms, sim.response_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)


def test_closed_sessions_with_a_busy_cpu_station():
    # two CPUs about 80 % busy: the CPU queue of 20 sessions is the finite-source queue, not
    # the open M/M/c at the same rate (which read the mean 17 % high against the simulator)
    case = make_case(workload={"kind": "closed", "sessions": 20, "think_time_ms": 20.0,
                               "log_bytes_per_commit": 100, "cpus": 2,
                               "cpu_ms_per_commit": 2.0})
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_closed(20, 20.0, flush_fn(R.lognormal_sampler(1.0, 10.0)), seed=8,
                       commits=120_000, cpu_servers=2, cpu_ms_per_commit=R.exp_sampler(2.0))
    assert 0.7 < r.cpu_utilisation < 0.9
    close(r.throughput_per_s, sim.throughput_per_s, 0.02)
    close(r.ack_mean_ms, sim.response_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)


@pytest.mark.parametrize("strategy", [
    {"kind": "synchronous", "device": "a"},
    {"kind": "batched", "device": "a", "gather_window_ms": 1.0, "gather_target_commits": 8},
    {"kind": "batched", "device": "a", "gather_window_ms": 0.5, "gather_target_commits": 64},
])
def test_fixed_think_time_falls_into_lock_step(strategy):
    # 20 sessions, fixed think time, nothing random between a flush and the next commit:
    # every flush carries all 20 (the window runs out when the target is above 20)
    case = make_case(workload={"kind": "closed", "sessions": 20, "think_time_ms": 3.0,
                               "think_time_distribution": "fixed",
                               "log_bytes_per_commit": 100},
                     device_a=lognormal_device(1.0, 2.0), strategies=[strategy])
    r = evaluate(case).strategies[0].regimes[0]
    mode = "group" if strategy["kind"] == "synchronous" else "batched"
    sim = R.run_closed(20, 3.0, flush_fn(R.lognormal_sampler(1.0, 2.0)), think="fixed",
                       mode=mode, seed=9, commits=60_000,
                       gather_window_ms=strategy.get("gather_window_ms"),
                       gather_target=strategy.get("gather_target_commits"))
    assert sim.batch_sizes.mean() == pytest.approx(20, rel=0.01)
    assert r.mean_batch_commits == pytest.approx(20)
    close(r.throughput_per_s, sim.throughput_per_s, 0.02)
    close(r.ack_mean_ms, sim.response_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)


@pytest.mark.parametrize("interval", [1.48, 0.62])
def test_deferred_flush_starts_late_flushes_and_skipped_turns(interval):
    # 2 commits per ms, flush p50 1 ms, p99 2 ms: at 1.48 ms about 12 % of flushes outlast
    # the wait to the next tick and 5 % of turns find nothing buffered; at 0.62 ms nearly
    # every flush is late and the writer is still idle 10 % of the time (empty turns). The
    # flush count and the process-crash window (the wait for the next start). simpy: 40 s,
    # 26,000-35,000 flushes (batch mean noise about 0.4 %): 1.5 % on the batch
    case = make_case(workload={"commit_rate_per_s": 2000.0}, device_a=lognormal_device(1.0, 2.0),
                     strategies=[{"kind": "deferred", "device": "a", "flush_every_ms": interval,
                                  "buffer_bytes": 1 << 22}])
    r = evaluate(case).strategies[0].regimes[0]
    run = R.run_deferred(2000.0, flush_fn(R.lognormal_sampler(1.0, 2.0)),
                         flush_every_ms=interval, buffer_bytes=1 << 22,
                         log_bytes_per_commit=100, seed=14, duration_s=40)
    close(r.mean_batch_commits, run.batch_sizes.mean(), 0.015)
    assert r.writer_utilisation == pytest.approx(run.writer_busy_share, abs=0.01)
    close(r.exposure("process_crash").window_mean_ms, run.handed_ms.mean(), MEAN_TOL)
    close(r.exposure("host_crash").window_mean_ms, run.exposure_ms.mean(), MEAN_TOL)


def test_dual_device_first_of_two_and_second_copy_lag():
    case = make_case(strategies=[{"kind": "dual_device", "devices": ["a", "b"],
                                  "ack_after": "first", "shared_cause_share": 0.0}])
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_dual(1000, flush_fn(R.lognormal_sampler(1.0, 10.0)),
                     flush_fn(R.lognormal_sampler(0.3, 2.0)), seed=5, commits=120_000)
    close(r.ack_mean_ms, sim.response_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)
    lag = r.exposure("device_loss")
    close(lag.window_mean_ms, sim.lag_ms.mean(), 0.05)
    close(lag.window_p99_ms, np.quantile(sim.lag_ms, 0.99), 0.08)


def test_deferred_exposure_and_littles_law():
    case = make_case(workload={"commit_rate_per_s": 2000.0}, device_a=lognormal_device(1.0, 4.0),
                     strategies=[{"kind": "deferred", "device": "a", "flush_every_ms": 20.0,
                                  "buffer_bytes": 1_000_000}])
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_deferred(2000, flush_fn(R.lognormal_sampler(1.0, 4.0)), flush_every_ms=20.0,
                         buffer_bytes=1_000_000, log_bytes_per_commit=100, seed=7, duration_s=40)
    e = r.exposure("host_crash")
    close(e.window_mean_ms, sim.exposure_ms.mean(), 0.03)
    close(e.window_p99_ms, np.quantile(sim.exposure_ms, 0.99), 0.05)
    # Little's law (Little, Operations Research 1961): the reference measures the time
    # average of acknowledged-not-durable commits directly, not through the formula
    close(e.at_risk_mean, sim.at_risk_time_avg, 0.03)
    assert r.ack_p99_ms < 0.01 * e.window_p99_ms  # acknowledged long before durable


def test_deferred_exposure_through_stalls():
    """A stall holds the flush at the tick it spans, so commits acknowledged in it wait for
    the stall's end, not for the end plus another interval. The reference measures each
    commit's hand-over to the device (process crash) and its durable time (host crash)
    directly, with stalls that never overlap (the system model's semantics)."""
    stalls = {"normal": {"per_s": 0.5, "duration": {"kind": "lognormal", "p50_ms": 150.0,
                                                     "p99_ms": 375.0}}}
    case = make_case(workload={"commit_rate_per_s": 1000.0, "log_bytes_per_commit": 200},
                     device_a={**lognormal_device(1.0, 4.0), "stalls": stalls},
                     strategies=[{"kind": "deferred", "device": "a", "flush_every_ms": 50.0,
                                  "buffer_bytes": 16_777_216}])
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_deferred(1000, flush_fn(R.lognormal_sampler(1.0, 4.0), log_bytes=200),
                         flush_every_ms=50.0, buffer_bytes=16_777_216, log_bytes_per_commit=200,
                         seed=1, duration_s=1200,
                         stalls=(0.5, R.lognormal_sampler(150.0, 375.0), "drop"))
    # about 600 stalls in the run; across seeds at 300 stalls the mean moved 1 % and the p99
    # 6 % (the p99 rests on the stalled commits), so 3 % and 6 % at twice the stalls. The
    # model that adds a whole interval after the stall reads 12 % and 33 % high here.
    proc, host = r.exposure("process_crash"), r.exposure("host_crash")
    close(proc.window_mean_ms, sim.handed_ms.mean(), 0.03)
    close(proc.window_p99_ms, np.quantile(sim.handed_ms, 0.99), 0.06)
    close(host.window_mean_ms, sim.exposure_ms.mean(), 0.03)
    close(host.window_p99_ms, np.quantile(sim.exposure_ms, 0.99), 0.06)
    assert r.writer_utilisation == pytest.approx(sim.writer_busy_share, abs=0.01)


def test_cpu_station_erlang_c():
    case = make_case(workload={"commit_rate_per_s": 3000.0, "cpus": 2, "cpu_ms_per_commit": 0.5})
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_open(3000, flush_fn(R.lognormal_sampler(1.0, 10.0)), mode="group", seed=7,
                     commits=120_000, cpu_servers=2, cpu_ms_per_commit=R.exp_sampler(0.5))
    close(r.ack_mean_ms, sim.response_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)


@pytest.mark.parametrize("sessions, think, window, target", [(100, 2.76, 0.5, 16),
                                                              (20, 5.0, 1.0, 8)])
def test_batched_commit_closed_sessions_chain(sessions, think, window, target):
    # a device with 3 % slow flushes: where the open-law fixed point read ~20 % high
    mix = {"kind": "mixture", "parts": [
        {"share": 0.97, "profile": {"kind": "lognormal", "p50_ms": 1.5, "p99_ms": 5.0}},
        {"share": 0.03, "profile": {"kind": "lognormal", "p50_ms": 10.0, "p99_ms": 40.0}}]}
    case = make_case(workload={"kind": "closed", "sessions": sessions, "think_time_ms": think,
                               "log_bytes_per_commit": 100},
                     device_a={"latency": {"normal": mix}},
                     strategies=[{"kind": "batched", "device": "a", "gather_window_ms": window,
                                  "gather_target_commits": target}])
    r = evaluate(case).strategies[0].regimes[0]
    sampler = R.mixture_sampler([(0.97, R.lognormal_sampler(1.5, 5.0)),
                                 (0.03, R.lognormal_sampler(10.0, 40.0))])
    sim = R.run_closed(sessions, think, flush_fn(sampler), mode="batched", seed=3,
                       commits=80_000, gather_window_ms=window, gather_target=target)
    close(r.throughput_per_s, sim.throughput_per_s, 0.03)
    close(r.ack_mean_ms, sim.mean_response_ms, MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)


def test_batched_commit_heavy_tailed_device_big_records():
    """Batched commit where many flushes are short enough to leave some window, on a
    heavy-tailed device (p99/p50 = 6) with records whose batch lengthens the flush."""
    dev = {"bandwidth_mb_per_s": 150.0, **lognormal_device(2.0, 12.0)}
    case = make_case(workload={"commit_rate_per_s": 1200.0, "log_bytes_per_commit": 2048},
                     device_a=dev,
                     strategies=[{"kind": "batched", "device": "a", "gather_window_ms": 1.0,
                                  "gather_target_commits": 8}])
    r = evaluate(case).strategies[0].regimes[0]
    sim = R.run_open(1200, flush_fn(R.lognormal_sampler(2.0, 12.0), log_bytes=2048,
                                    bytes_per_ms=150e3),
                     mode="batched", seed=5, commits=150_000, gather_window_ms=1.0,
                     gather_target=8)
    close(r.ack_mean_ms, sim.response_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(sim.response_ms, 0.99), P99_TOL)
    # a rest of the window taken at the mean flush put the flushes 5 % high here
    close(r.mean_batch_commits, np.mean(sim.batch_sizes), 0.02)
