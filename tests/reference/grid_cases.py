"""The evaluator-versus-simulator grid: generated cases (test data, not demo data: every
figure here is a test input chosen to cover the model's ground, not a scenario).

Coverage (issue 4): writer busy share from 10 % to 90 %, CPU utilisation up to 90 %,
light-tailed flush profiles (exponential; lognormal with p99/p50 = 2) and heavy-tailed ones
(lognormal with p99/p50 = 10 and 30; a mixture with a 1 % slow share), time-based device
stalls, open and closed workloads (exponential and fixed think time), every strategy
(synchronous with natural grouping and with one flush per commit, batched, deferred,
dual device acknowledging after the first and after both).

Each :class:`GridSpec` is one case. Its ``busy_share`` is the writer busy share its load
was calibrated to (the commit rate for open arrivals, the think time for closed sessions,
the flush interval for deferred commit; calibrated once against the simulator at 100,000
commits by bisection and written down here as fixed numbers, so the grid is deterministic);
``cpu_share`` likewise for the CPU utilisation where the case has a CPU station. The test
checks that the simulated busy share and CPU utilisation are within
``BUSY_SHARE_SLACK`` of these nominal values, so a name such as ``busy90`` is a fact about
the case, not a wish. ``commits`` is the number of simulated commits per case, chosen so
that the simulator's own noise stays well below the tolerance (see the test module).

``CI_GRID`` is the grid the test runs; ``bench_grid(seed, count)`` draws a larger grid from
a seeded generator for tests/benchmarks/bench_grid.py.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass, replace

import numpy as np

from commitadvisor.case import Case, parse_case

__all__ = [
    "GridSpec",
    "CI_GRID",
    "PROFILES",
    "bench_grid",
    "case_dict",
    "build_case",
    "BUSY_SHARE_SLACK",
]

BUSY_SHARE_SLACK = 0.05  # absolute, on the writer busy share and on the CPU utilisation

# Flush profiles of the device under test ("a"). Light: exponential, lognormal p99/p50 = 2.
# Heavy: lognormal p99/p50 = 10 and 30, and a body with a 1 % share of flushes 20 x slower.
PROFILES: dict[str, dict] = {
    "exp": {"kind": "exponential", "mean_ms": 1.0},
    "ln2": {"kind": "lognormal", "p50_ms": 1.0, "p99_ms": 2.0},
    "ln10": {"kind": "lognormal", "p50_ms": 0.5, "p99_ms": 5.0},
    "ln20": {"kind": "lognormal", "p50_ms": 0.3, "p99_ms": 6.0},
    "ln30": {"kind": "lognormal", "p50_ms": 0.3, "p99_ms": 9.0},
    "mix1": {
        "kind": "mixture",
        "parts": [
            {"share": 0.99, "profile": {"kind": "lognormal", "p50_ms": 0.5, "p99_ms": 1.0}},
            {"share": 0.01, "profile": {"kind": "lognormal", "p50_ms": 10.0, "p99_ms": 20.0}},
        ],
    },
    # second devices for dual_device cases
    "fast": {"kind": "lognormal", "p50_ms": 0.3, "p99_ms": 0.6},
    "exp_fast": {"kind": "exponential", "mean_ms": 0.4},
}

# time-based stalls: 2 per second, each lognormal with p50 4 ms and p99 12 ms (about 1 % of
# the time stalled)
STALLS = {"per_s": 2.0, "duration": {"kind": "lognormal", "p50_ms": 4.0, "p99_ms": 12.0}}

STRATEGY_LABELS = {
    "sync": "sync",
    "sync_none": "sync1pc",
    "batched": "batched",
    "deferred": "deferred",
    "dual_first": "dual-first",
    "dual_both": "dual-both",
}
WORKLOAD_LABELS = {"open": "open", "closed_exp": "closed-exp", "closed_fixed": "closed-fixed"}


@dataclass(frozen=True)
class GridSpec:
    """One grid case. Loads: ``rate_per_s`` (open arrivals) or ``sessions`` and
    ``think_ms`` (closed); ``flush_every_ms`` and ``buffer_bytes`` for deferred commit;
    ``gather_window_ms`` / ``gather_target_commits`` for batched commit (None = no limit
    on that side). With ``cpu_share`` set the host has ``cpus`` CPUs, ``cpu_ms_per_commit``
    of commit work, 20 us of writer work per flush, 10 us hand-over and 5 us per wake.
    ``big_records``: 2048-byte commits on a 400 MB/s device with an 8 KiB profiled block,
    so that a batch of more than four commits lengthens its flush."""

    strategy: str
    workload: str
    profile: str
    busy_share: float
    rate_per_s: float = 0.0
    sessions: int = 0
    think_ms: float = 0.0
    profile_b: str = "fast"
    stalls: bool = False
    cpu_share: float | None = None
    cpus: int = 2
    cpu_ms_per_commit: float = 0.0
    gather_window_ms: float | None = 1.0
    gather_target_commits: int | None = 8
    flush_every_ms: float = 0.0
    buffer_bytes: int = 1 << 22
    big_records: bool = False
    commits: int = 400_000

    @property
    def name(self) -> str:
        parts = [STRATEGY_LABELS[self.strategy], WORKLOAD_LABELS[self.workload]]
        prof = self.profile
        if self.strategy.startswith("dual"):
            prof += "+" + self.profile_b
        parts.append(prof)
        if self.strategy == "batched":
            w = "inf" if self.gather_window_ms is None else f"{self.gather_window_ms:g}ms"
            t = "inf" if self.gather_target_commits is None else str(self.gather_target_commits)
            parts.append(f"gather{w}x{t}")
        if self.strategy == "deferred":
            parts.append(f"buf{self.buffer_bytes // 1024}k")
        if self.stalls:
            parts.append("stalls")
        if self.big_records:
            parts.append("bigrec")
        if self.cpu_share is not None:
            parts.append(f"cpu{round(self.cpu_share * 100):02d}")
        parts.append(f"busy{round(self.busy_share * 100):02d}")
        return "-".join(parts)

    @property
    def is_open(self) -> bool:
        return self.workload == "open"


def _strategy_entry(g: GridSpec) -> dict:
    if g.strategy == "sync":
        return {"kind": "synchronous", "device": "a"}
    if g.strategy == "sync_none":
        return {"kind": "synchronous", "device": "a", "grouping": "none"}
    if g.strategy == "batched":
        e = {"kind": "batched", "device": "a"}
        if g.gather_window_ms is not None:
            e["gather_window_ms"] = g.gather_window_ms
        if g.gather_target_commits is not None:
            e["gather_target_commits"] = g.gather_target_commits
        return e
    if g.strategy == "deferred":
        return {
            "kind": "deferred",
            "device": "a",
            "flush_every_ms": g.flush_every_ms,
            "buffer_bytes": g.buffer_bytes,
        }
    # the grid checks independent devices (share 0); tests/reference/test_dual_shared_cause.py
    # checks a share above 0
    return {
        "kind": "dual_device",
        "devices": ["a", "b"],
        "ack_after": "first" if g.strategy == "dual_first" else "both",
        "shared_cause_share": 0.0,
    }


def _device(profile: str, g: GridSpec, with_stalls: bool) -> dict:
    d = {
        "cache": "power_loss_protected",
        "bandwidth_mb_per_s": 400.0 if g.big_records else 1000.0,
        "profile_block_bytes": 8192,
        "latency": {"normal": copy.deepcopy(PROFILES[profile])},
    }
    if with_stalls:
        d["stalls"] = {"normal": copy.deepcopy(STALLS)}
    return d


def case_dict(g: GridSpec) -> dict:
    """The case document (as parse_case takes it) for one grid spec."""
    w: dict = {
        "kind": "open" if g.is_open else "closed",
        "log_bytes_per_commit": 2048 if g.big_records else 100,
    }
    if g.is_open:
        w["commit_rate_per_s"] = g.rate_per_s
    else:
        w["sessions"] = g.sessions
        w["think_time_ms"] = g.think_ms
        w["think_time_distribution"] = "fixed" if g.workload == "closed_fixed" else "exponential"
    if g.cpu_share is not None:
        w.update(
            cpus=g.cpus,
            cpu_ms_per_commit=g.cpu_ms_per_commit,
            cpu_us_per_flush=20.0,
            handover_us=10.0,
            wake_us_per_session=5.0,
        )
    devices = {"a": _device(g.profile, g, g.stalls)}
    if g.strategy.startswith("dual"):
        devices["b"] = _device(g.profile_b, g, False)
    return {
        "schema_version": 1,
        "title": f"grid case {g.name}",
        "workload": w,
        "recovery": {
            "process_crash": {"per_year": 4.0, "loss_window_s": 0.0},
            "host_crash": {"per_year": 1.0, "loss_window_s": 0.0},
            "device_loss": {"per_year": 0.05, "loss_window_s": 0.0},
        },
        "goals": {"commit_p99_ms": 10.0},
        "devices": devices,
        "strategies": [_strategy_entry(g)],
    }


def build_case(g: GridSpec) -> Case:
    return parse_case(case_dict(g), g.name)


def _g(strategy, workload, profile, busy, **kw) -> GridSpec:
    return GridSpec(strategy=strategy, workload=workload, profile=profile, busy_share=busy, **kw)


# The CI grid. Loads calibrated as the module docstring says; commits per case as the test
# module says.
CI_GRID: tuple[GridSpec, ...] = (
    # synchronous, natural grouping, open arrivals
    _g("sync", "open", "exp", 0.1, rate_per_s=101.0, commits=200_000),
    _g("sync", "open", "exp", 0.5, rate_per_s=618.1, commits=200_000),
    _g("sync", "open", "exp", 0.9, rate_per_s=2538.0, commits=200_000),
    _g("sync", "open", "ln2", 0.3, rate_per_s=300.7, commits=200_000),
    _g("sync", "open", "ln2", 0.7, rate_per_s=902.3, commits=200_000),
    _g("sync", "open", "ln10", 0.1, rate_per_s=124.0, commits=200_000),
    _g("sync", "open", "ln10", 0.5, rate_per_s=768.0),
    _g("sync", "open", "ln10", 0.9, rate_per_s=3045.0, commits=1_100_000),
    _g("sync", "open", "mix1", 0.4, rate_per_s=734.8, commits=1_200_000),
    _g("sync", "open", "mix1", 0.85, rate_per_s=2566.0, commits=2_500_000),
    _g("sync", "open", "ln2", 0.5, rate_per_s=536.8, stalls=True, commits=200_000),
    _g("sync", "open", "ln10", 0.7, rate_per_s=1347.0, stalls=True, commits=1_000_000),
    _g(
        "sync",
        "open",
        "exp",
        0.8,
        rate_per_s=1501.0,
        cpu_share=0.5,
        cpu_ms_per_commit=0.6662,
        big_records=True,
        commits=200_000,
    ),
    # synchronous, one flush per commit
    _g("sync_none", "open", "exp", 0.5, rate_per_s=500.2),
    _g("sync_none", "open", "ln2", 0.8, rate_per_s=765.1, commits=1_200_000),
    # synchronous, closed sessions
    _g("sync", "closed_exp", "ln2", 0.5, sessions=20, think_ms=35.83, commits=200_000),
    _g("sync", "closed_exp", "ln10", 0.8, sessions=50, think_ms=26.03, commits=600_000),
    _g("sync", "closed_exp", "mix1", 0.6, sessions=50, think_ms=39.45, commits=1_400_000),
    _g(
        "sync",
        "closed_exp",
        "ln2",
        0.4,
        sessions=20,
        think_ms=41.13,
        cpu_share=0.8,
        cpu_ms_per_commit=4.052,
        commits=300_000,
    ),
    _g("sync", "closed_exp", "ln2", 0.5, sessions=20, think_ms=36.54, stalls=True, commits=200_000),
    _g("sync", "closed_fixed", "ln2", 0.4, sessions=20, think_ms=1.6, commits=200_000),
    _g("sync", "closed_fixed", "ln10", 0.7, sessions=50, think_ms=0.35, commits=3_000_000),
    _g(
        "sync",
        "closed_exp",
        "exp_fast",
        0.81,
        sessions=40,
        think_ms=8.8,
        cpu_share=0.9,
        cpu_ms_per_commit=0.5,
    ),
    # batched
    _g("batched", "open", "ln2", 0.3, rate_per_s=410.9, commits=200_000),
    _g("batched", "open", "ln2", 0.7, rate_per_s=2260.0, commits=200_000),
    _g("batched", "open", "ln10", 0.5, rate_per_s=1092.0, gather_window_ms=0.5, commits=500_000),
    _g("batched", "open", "ln20", 0.4, rate_per_s=1042.0, gather_window_ms=0.5, commits=3_000_000),
    _g("batched", "open", "mix1", 0.6, rate_per_s=2368.0, gather_window_ms=0.5, commits=2_000_000),
    _g("batched", "open", "ln2", 0.5, rate_per_s=909.6, stalls=True, commits=200_000),
    _g("batched", "open", "ln2", 0.5, rate_per_s=892.0, cpu_share=0.7, cpu_ms_per_commit=1.57),
    _g(
        "batched",
        "open",
        "exp",
        0.9,
        rate_per_s=3751.0,
        gather_window_ms=0.2,
        gather_target_commits=64,
        commits=300_000,
    ),
    _g(
        "batched",
        "open",
        "ln2",
        0.5,
        rate_per_s=945.8,
        gather_target_commits=100000,
        commits=200_000,
    ),
    _g(
        "batched",
        "open",
        "ln2",
        0.6,
        rate_per_s=2456.0,
        gather_window_ms=1000.0,
        gather_target_commits=4,
        commits=200_000,
    ),
    _g(
        "batched",
        "open",
        "ln2",
        0.6,
        rate_per_s=1421.0,
        gather_target_commits=32,
        big_records=True,
        commits=200_000,
    ),
    _g("batched", "closed_exp", "ln2", 0.5, sessions=20, think_ms=20.34, commits=200_000),
    _g("batched", "closed_fixed", "ln2", 0.4, sessions=20, think_ms=1.6, commits=200_000),
    # deferred
    _g("deferred", "open", "ln2", 0.2, rate_per_s=2000.0, flush_every_ms=5.228, commits=200_000),
    _g("deferred", "open", "ln2", 0.6, rate_per_s=2000.0, flush_every_ms=1.676, commits=200_000),
    _g("deferred", "open", "ln2", 0.9, rate_per_s=2000.0, flush_every_ms=0.6218, commits=200_000),
    _g("deferred", "open", "ln10", 0.5, rate_per_s=2000.0, flush_every_ms=1.48, commits=600_000),
    _g("deferred", "open", "mix1", 0.4, rate_per_s=2000.0, flush_every_ms=1.424, commits=1_200_000),
    _g(
        "deferred",
        "open",
        "ln2",
        0.4,
        rate_per_s=2000.0,
        stalls=True,
        flush_every_ms=2.822,
        commits=200_000,
    ),
    _g(
        "deferred",
        "open",
        "ln2",
        0.3,
        rate_per_s=2000.0,
        cpu_share=0.6,
        cpu_ms_per_commit=0.6,
        flush_every_ms=3.66,
    ),
    _g(
        "deferred",
        "closed_exp",
        "ln2",
        0.3,
        sessions=20,
        think_ms=5.0,
        flush_every_ms=3.485,
        commits=200_000,
    ),
    _g(
        "deferred",
        "open",
        "ln2",
        0.7,
        rate_per_s=4000.0,
        flush_every_ms=1.5,
        buffer_bytes=1 << 14,
        big_records=True,
        commits=1_300_000,
    ),
    # dual device
    _g("dual_first", "open", "ln10", 0.3, rate_per_s=400.4, commits=1_300_000),
    _g("dual_first", "open", "ln10", 0.7, rate_per_s=1373.0, commits=500_000),
    _g("dual_both", "open", "ln10", 0.3, rate_per_s=400.4, commits=300_000),
    _g("dual_both", "open", "ln10", 0.7, rate_per_s=1373.0, commits=900_000),
    _g(
        "dual_first", "open", "mix1", 0.5, rate_per_s=976.3, profile_b="exp_fast", commits=2_900_000
    ),
    _g("dual_first", "open", "ln2", 0.5, rate_per_s=536.8, stalls=True, commits=200_000),
    _g(
        "dual_both",
        "open",
        "ln2",
        0.5,
        rate_per_s=526.4,
        cpu_share=0.6,
        cpu_ms_per_commit=2.28,
        commits=300_000,
    ),
    _g("dual_first", "closed_exp", "ln10", 0.5, sessions=20, think_ms=26.04, commits=200_000),
    _g("dual_both", "closed_exp", "ln2", 0.4, sessions=20, think_ms=47.13, commits=200_000),
)

# ---------------------------------------------------------------------------- bench grid
_BENCH_STRATEGIES = (
    "sync",
    "sync",
    "sync_none",
    "batched",
    "batched",
    "deferred",
    "dual_first",
    "dual_both",
)
_BENCH_PROFILES = ("exp", "ln2", "ln10", "ln20", "ln30", "mix1")


def bench_grid(seed: int, count: int) -> tuple[GridSpec, ...]:
    """``count`` cases drawn from a seeded generator: strategy, workload, profile, stalls,
    CPU station and record size at random; the load from the synchronous open-arrival law
    scaled to a random target busy share (the achieved share is measured, not assumed, so
    ``busy_share`` here is the target and the bench prints the achieved one beside it)."""
    rng = np.random.default_rng(seed)
    out: list[GridSpec] = []
    for _ in range(count):
        strategy = str(rng.choice(_BENCH_STRATEGIES))
        workload = str(rng.choice(("open", "open", "closed_exp", "closed_fixed")))
        profile = str(rng.choice(_BENCH_PROFILES))
        busy = float(np.round(rng.uniform(0.1, 0.9), 2))
        mean_ms = _mean_flush_ms(profile)
        g = GridSpec(
            strategy=strategy,
            workload=workload,
            profile=profile,
            busy_share=busy,
            stalls=bool(rng.random() < 0.25),
            big_records=bool(rng.random() < 0.2),
            profile_b=str(rng.choice(("fast", "exp_fast"))),
            commits=1_000_000,
        )
        if strategy == "deferred":
            g = replace(
                g, flush_every_ms=mean_ms / busy, buffer_bytes=int(rng.choice((1 << 16, 1 << 22)))
            )
        if strategy == "batched":
            g = replace(
                g,
                gather_window_ms=float(rng.choice((0.2, 0.5, 1.0, 2.0))),
                gather_target_commits=int(rng.choice((4, 8, 32))),
            )
        # a rough load for the target: y = busy / (1 - busy) busy periods per idle one
        y = busy / (1.0 - busy)
        if strategy == "sync_none":
            rate_per_ms = busy / mean_ms
        elif strategy == "deferred":
            rate_per_ms = float(rng.uniform(0.5, 3.0))
        else:
            rate_per_ms = _natural_rate_per_ms(profile, y)
        if workload == "open":
            g = replace(g, rate_per_s=rate_per_ms * 1000.0)
        else:
            sessions = int(rng.choice((10, 30, 80)))
            g = replace(g, sessions=sessions, think_ms=max(0.5, sessions / rate_per_ms))
        if rng.random() < 0.3:
            cpu_share = float(np.round(rng.uniform(0.2, 0.9), 2))
            g = replace(
                g, cpu_share=cpu_share, cpu_ms_per_commit=cpu_share * g.cpus / (rate_per_ms * 1.0)
            )
        out.append(g)
    return tuple(out)


def _samples(profile: str, n: int = 200_000) -> np.ndarray:
    rng = np.random.default_rng(7)
    p = PROFILES[profile]

    def draw(e, k):
        if e["kind"] == "exponential":
            return rng.exponential(e["mean_ms"], k)
        if e["kind"] == "lognormal":
            sigma = np.log(e["p99_ms"] / e["p50_ms"]) / 2.3263478740408408
            return rng.lognormal(np.log(e["p50_ms"]), sigma, k)
        parts = e["parts"]
        which = rng.choice(len(parts), size=k, p=[q["share"] for q in parts])
        out = np.empty(k)
        for i, q in enumerate(parts):
            m = which == i
            out[m] = draw(q["profile"], int(m.sum()))
        return out

    return draw(p, n)


def _mean_flush_ms(profile: str) -> float:
    return float(_samples(profile).mean())


def _natural_rate_per_ms(profile: str, y: float) -> float:
    """The rate at which natural group commit has y = E[busy] / E[idle] (busy share
    y / (1 + y)): E[busy] = E[S] / p with p = E[exp(-lambda S)] (DESIGN.md model 1, Wald),
    E[idle] = 1 / lambda, so lambda E[S] / p = y; solved by bisection on Monte Carlo
    draws of S."""
    s = _samples(profile)
    es = s.mean()
    lo, hi = 1e-6, 100.0 / es
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if mid * es / np.exp(-mid * s).mean() < y:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)
