"""The CPU station of closed sessions (commitadvisor.writer.finite_source_cpu) against
outside references: the exact mean value analysis for one server, and a small simpy model
of the finite-source queue with several servers."""

from __future__ import annotations

import numpy as np
import pytest
import simpy

from commitadvisor import writer as W


def mva_one_queue(sessions: int, think_ms: float, service_ms: float) -> tuple[float, float]:
    """Exact MVA for a delay station and one FCFS exponential queue (Reiser and Lavenberg,
    Mean-value analysis of closed multichain queuing networks, JACM 1980):
    R(k) = S (1 + Q(k - 1)), X(k) = k / (Z + R(k)), Q(k) = X(k) R(k)."""
    q = 0.0
    for k in range(1, sessions + 1):
        r = service_ms * (1 + q)
        x = k / (think_ms + r)
        q = x * r
    return r, x


@pytest.mark.parametrize("sessions,think_ms,service_ms", [(1, 5.0, 1.0), (12, 10.0, 2.0),
                                                           (60, 3.0, 0.1)])
def test_one_cpu_matches_exact_mva(sessions, think_ms, service_ms):
    r, x = mva_one_queue(sessions, think_ms, service_ms)
    got = W.finite_source_cpu(1, service_ms, sessions, think_ms)
    assert got.at_cpu.mean_ms == pytest.approx(r, rel=1e-9)
    assert got.throughput_per_ms == pytest.approx(x, rel=1e-9)


def simpy_finite_source(servers: int, service_ms: float, sessions: int, away_ms: float,
                        away: str, seed: int, jobs: int) -> tuple[float, np.ndarray]:
    """(throughput per ms, times at the station) of N sessions that are away (fixed or
    exponential time) and then queue FIFO for one of c servers (exponential work)."""
    rng = np.random.default_rng(seed)
    env = simpy.Environment()
    cpu = simpy.Resource(env, capacity=servers)
    times: list[float] = []
    warm = jobs // 10

    def session():
        while True:
            yield env.timeout(away_ms if away == "fixed" else rng.exponential(away_ms))
            t0 = env.now
            with cpu.request() as req:
                yield req
                yield env.timeout(rng.exponential(service_ms))
            times.append(env.now - t0)

    for _ in range(sessions):
        env.process(session())
    while len(times) < warm:
        env.step()
    t_warm = env.now
    while len(times) < warm + jobs:
        env.step()
    return jobs / (env.now - t_warm), np.array(times[warm:warm + jobs])


@pytest.mark.parametrize("away", ["exponential", "fixed"])
def test_several_cpus_match_simpy(away):
    # 3 CPUs 86 % busy (where the open M/M/c formula at the same rate reads the mean 62 %
    # high); the stationary law is the same for a fixed time away (insensitivity of the
    # finite-source queue: Bunday and Scraton, The G/M/r machine interference model, EJOR
    # 1980; citation from memory). 200,000 jobs: the mean's noise is well under 1 % (batch
    # means over the run), so 2 % on the mean and 3 % on p99
    servers, service_ms, sessions, away_ms = 3, 1.0, 20, 6.0
    x_ref, t = simpy_finite_source(servers, service_ms, sessions, away_ms, away, seed=7,
                                   jobs=200_000)
    got = W.finite_source_cpu(servers, service_ms, sessions, away_ms)
    assert got.throughput_per_ms == pytest.approx(x_ref, rel=0.01)
    assert got.at_cpu.mean_ms == pytest.approx(t.mean(), rel=0.02)
    assert float(got.at_cpu.quantile(0.99)) == pytest.approx(np.quantile(t, 0.99), rel=0.03)
    assert got.busy_servers == pytest.approx(x_ref * service_ms, rel=0.01)
