"""Simulator speed against the simpy reference models, and its memory for ten million
commits, measured in one run.

Run: python tests/benchmarks/bench_simulator.py [COMMITS_PER_STRATEGY]

Case: the shipped ledger case in its normal regime (the regimes are taken out so that both
sides simulate the same steady state). For each strategy it prints the commits the
simulator ran (warm-ups included) per CPU second, the same for the matching simpy model of
tests/reference/simpy_models.py, and their ratio (target: at least 20 x). Each side of
every ratio is run REPEATS = 3 times with the same seed and its best (minimum) time is
taken, so that one noisy moment on a shared machine does not decide the ratio (the same
seed simulates the same commits each time). CPU time (time.process_time) is used because
other work on a shared machine distorts wall time; the best wall time is printed beside
it. Then the peak memory of one run of ten million measured
commits (tracemalloc's peak of Python and numpy allocations, and the process's maximum
resident size).

Not a test (pytest collects test_*.py only); the figures are for the report.
"""

from __future__ import annotations

import resource
import sys
import time
import tomllib
import tracemalloc
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from commitadvisor.case import parse_case  # noqa: E402
from commitadvisor.simulate import simulate_case  # noqa: E402
from tests.reference import simpy_models as sm  # noqa: E402

SIMPY_COMMITS = 60_000
REPEATS = 3  # runs per side of each ratio; the minimum time counts


def _ledger_normal(strategy: str):
    d = tomllib.loads((ROOT / "cases" / "ledger_backup_burst.toml").read_text())
    d["regimes"] = []
    for dev in d["devices"].values():
        dev.pop("stalls", None)
        dev.pop("bandwidth_mb_per_s_during", None)
        dev["latency"] = {"normal": dev["latency"]["normal"]}
    d["strategies"] = [s for s in d["strategies"] if s["name"] == strategy]
    d.pop("expected", None)
    if strategy in ("deferred_array", "dual_first"):
        # the simpy models of these two have no CPU station: leave it out on both sides
        for key in ("cpus", "cpu_ms_per_commit", "cpu_us_per_flush", "wake_us_per_session",
                    "other_cpu_utilisation"):
            d["workload"].pop(key, None)
    return parse_case(d, "ledger, normal regime")


def _simpy_run(strategy: str, case) -> tuple[int, str]:
    """The matching simpy model; returns (commits simulated, what it leaves out)."""
    w = case.workload
    rate = case.commit_rate_per_s()
    dil = 1.0 / (1.0 - w.other_cpu_utilisation)
    overhead = ((w.cpu_us_per_flush * dil if w.cpus else 0.0) + w.handover_us) / 1000.0
    lun = case.devices["array_lun"]
    lat = lun.latency["normal"]
    base = sm.lognormal_sampler(lat.p50_ms, lat.p99_ms)
    bw = lun.bandwidth_mb_per_s * 1000.0  # bytes per ms

    def flush(rng, batch):
        extra = max(0.0, batch * w.log_bytes_per_commit - lun.profile_block_bytes) / bw
        return base(rng) + extra + overhead

    cpu = (dict(cpu_servers=w.cpus, cpu_ms_per_commit=sm.exp_sampler(w.cpu_ms_per_commit * dil))
           if w.cpus else {})
    s = case.strategies[0]
    if s.kind == "synchronous":
        sm.run_open(rate, flush, mode="group", seed=1, commits=SIMPY_COMMITS, **cpu)
        return SIMPY_COMMITS + 2_000, "no wake cost"
    if s.kind == "batched":
        sm.run_open(rate, flush, mode="batched", seed=1, commits=SIMPY_COMMITS,
                    gather_window_ms=s.gather_window_ms, gather_target=s.gather_target_commits,
                    **cpu)
        return SIMPY_COMMITS + 2_000, "no wake cost"
    if s.kind == "deferred":
        duration = SIMPY_COMMITS / rate
        r = sm.run_deferred(rate, flush, flush_every_ms=s.flush_every_ms,
                            buffer_bytes=s.buffer_bytes,
                            log_bytes_per_commit=w.log_bytes_per_commit, seed=1,
                            duration_s=duration)
        return int(r.ack_ms.size), "(both without the CPU station)"
    plp = case.devices["local_plp"].latency["normal"]
    sm.run_dual(rate, sm.lognormal_sampler(plp.p50_ms, plp.p99_ms), flush, seed=1,
                commits=SIMPY_COMMITS)
    return SIMPY_COMMITS + 2_000, "(both without the CPU station)"


def main(commits: int = 2_000_000) -> None:
    names = ["sync_array", "batched_array", "deferred_array", "dual_first"]
    print(f"{'strategy':16s} {'sim commits':>12s} {'sim M/s cpu':>11s} {'(wall)':>7s} "
          f"{'simpy commits':>13s} {'simpy k/s cpu':>13s} {'ratio':>6s}  simpy model leaves out")
    ratios = []
    for name in names:
        case = _ledger_normal(name)
        cpu = wall = cpu_ref = float("inf")
        for _ in range(REPEATS):
            t0, w0 = time.process_time(), time.perf_counter()
            sim = simulate_case(case, seed=1, commits=commits)
            cpu = min(cpu, time.process_time() - t0)
            wall = min(wall, time.perf_counter() - w0)
        n = sim.commits_simulated(name)
        for _ in range(REPEATS):
            t0 = time.process_time()
            n_ref, missing = _simpy_run(name, case)
            cpu_ref = min(cpu_ref, time.process_time() - t0)
        ratio = (n / cpu) / (n_ref / cpu_ref)
        ratios.append(ratio)
        print(f"{name:16s} {n:12,d} {n / cpu / 1e6:11.2f} {n / wall / 1e6:7.2f} "
              f"{n_ref:13,d} {n_ref / cpu_ref / 1e3:13.1f} {ratio:6.1f}  {missing}")
    print(f"best of {REPEATS} runs per side; speed ratio, geometric mean over the strategies: "
          f"{float(np.exp(np.mean(np.log(ratios)))):.1f} x (target >= 20 x)")

    case = _ledger_normal("sync_array")
    tracemalloc.start()
    t0 = time.process_time()
    sim = simulate_case(case, seed=1, commits=10_000_000)
    cpu = time.process_time() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    seg = sim.segments[0]
    print(f"ten million commits (sync_array): {seg.commits_measured:,} measured, "
          f"{seg.commits_simulated:,} simulated in {cpu:.1f} s CPU (under tracemalloc); "
          f"peak traced memory {peak / 2**20:.0f} MiB, process maximum resident size "
          f"{rss_mb:.0f} MiB (target < 1 GiB)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 2_000_000)
