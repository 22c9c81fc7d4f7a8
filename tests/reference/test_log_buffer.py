"""Deferred commit with a log buffer that fills between flushes
(commitadvisor.strategies.log_buffer) against the independent simpy model and the
project's simulator.

A record holds its space until the flush that writes it completes; a commit that finds the
buffer full waits for a flush to end. The simpy model (tests/reference/simpy_models.py,
``run_deferred``) shares no code with the package. Tolerances as in
test_evaluator_vs_simpy.py: 4 % on means and 7 % on p99 (the evaluator's 3 % and 5 % plus
the reference run's noise, about 1 % at these sizes for light-tailed flushes).
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from commitadvisor.evaluate import evaluate
from commitadvisor.simulate import simulate_case
from tests.reference import simpy_models as R
from tests.reference.evaluator_cases import make_case
from tests.reference.test_evaluator_vs_simpy import (
    MEAN_TOL,
    P99_TOL,
    close,
    flush_fn,
    lognormal_device,
)


def _case(rate, interval, buffer_bytes, log_bytes, p50, p99):
    dev = {"bandwidth_mb_per_s": 400.0, **lognormal_device(p50, p99)}
    return make_case(workload={"commit_rate_per_s": rate, "log_bytes_per_commit": log_bytes},
                     device_a=dev,
                     strategies=[{"kind": "deferred", "device": "a", "flush_every_ms": interval,
                                  "buffer_bytes": buffer_bytes}])


@pytest.mark.parametrize("rate,interval,buffer_bytes,log_bytes,p50,p99", [
    (4000.0, 1.5, 16384, 2048, 1.0, 2.0),  # 8 records, about 6 a cycle: half the commits wait
    (9000.0, 1.0, 8192, 512, 0.5, 1.5),  # 16 records, about 9 a cycle: one in nine waits
])
def test_buffer_that_fills_between_flushes(rate, interval, buffer_bytes, log_bytes, p50, p99):
    # 20 s of simulated time (80,000-180,000 commits)
    r = evaluate(_case(rate, interval, buffer_bytes, log_bytes, p50, p99)
                 ).strategies[0].regimes[0]
    run = R.run_deferred(rate, flush_fn(R.lognormal_sampler(p50, p99), log_bytes=log_bytes,
                                        bytes_per_ms=400e3),
                         flush_every_ms=interval, buffer_bytes=buffer_bytes,
                         log_bytes_per_commit=log_bytes, seed=12, duration_s=20)
    note = next(n for n in r.notes if "fills between flushes" in n)
    # the share of commits that wait for space, as the note prints it, against simpy's
    waiting = float(re.search(r"([0-9.]+)% of commits wait for space", note).group(1)) / 100
    close(waiting, float((run.ack_ms > 1e-9).mean()), MEAN_TOL)
    close(r.ack_mean_ms, run.ack_ms.mean(), MEAN_TOL)
    close(r.ack_p99_ms, np.quantile(run.ack_ms, 0.99), P99_TOL)
    durable = run.ack_ms + run.exposure_ms
    close(r.durable_mean_ms, durable.mean(), MEAN_TOL)
    close(r.durable_p99_ms, np.quantile(durable, 0.99), P99_TOL)
    close(r.exposure("process_crash").window_mean_ms, run.handed_ms.mean(), MEAN_TOL)
    close(r.exposure("host_crash").window_mean_ms, run.exposure_ms.mean(), MEAN_TOL)
    close(r.mean_batch_commits, run.batch_sizes.mean(), 0.02)


def test_without_the_buffer_model_the_wait_would_read_zero():
    # the first case above with a buffer that never fills: nobody waits, which is what the
    # evaluator reported before it modelled the wait for space (the simpy run says 0.35 ms)
    r = evaluate(_case(4000.0, 1.5, 1 << 22, 2048, 1.0, 2.0)).strategies[0].regimes[0]
    assert r.ack_mean_ms == 0.0
    assert not any("fills between flushes" in n for n in r.notes)


def test_known_limit_heavy_tail_with_frequent_late_flushes():
    # p99/p50 = 10 and 8 % of flushes outlasting the interval: the evaluator's wait for space
    # reads about 18 % high (0.564 ms against the simulator's 0.479 +- 0.016 ms at seed 3;
    # simpy at 960,000 commits: 0.456 ms), its p99 about 11 % high (8.49 against 7.66). The
    # README lists it; this pins that it is still beyond the 3 % tolerance, so a model that
    # comes to agree fails here and must leave the README's list. 4,000,000 simulated
    # commits (about 6 s): the simulator's standard error of the mean is 3.4 % of it (the
    # wait comes from rare long flushes).
    case = _case(12000.0, 2.0, 16384, 512, 0.5, 5.0)
    r = evaluate(case).strategies[0].regimes[0]
    sim = simulate_case(case, seed=3, commits=4_000_000)
    s = sim.evaluation.strategies[0].regimes[0]
    se = sim.segments[0].ack_mean_se_ms
    assert r.ack_mean_ms > s.ack_mean_ms + 3 * se
    assert r.ack_mean_ms > 1.03 * s.ack_mean_ms
