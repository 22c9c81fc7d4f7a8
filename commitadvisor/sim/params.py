"""The case as plain numbers for the simulator: per-regime device and host figures, the
regime schedule in time, the time scales that size warm-ups, and the capacity checks that
tell a saturated regime from a steady one.

Regime ids: 0 is ``normal``, 1.. the case's regimes in the order they are listed. Times are
in ms, rates per ms unless the name says otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from commitadvisor import latency as lat
from commitadvisor.case import NORMAL, Case, Device, host_load

__all__ = [
    "DeviceParams",
    "HostParams",
    "Schedule",
    "device_params",
    "host_params",
    "schedule_for",
    "Capacity",
    "capacity",
]


@dataclass(frozen=True)
class DeviceParams:
    """One log device, a value per regime id."""

    name: str
    counts_as_durable: bool
    block_bytes: int
    measures_commit_latency: bool
    latency: tuple[lat.Latency, ...]
    bandwidth_bytes_per_ms: tuple[float, ...]
    stall_rate_per_ms: tuple[float, ...]
    stall_duration: tuple[lat.Latency | None, ...]

    def stalled_share(self, r: int) -> float:
        """Share of time stalled in regime r: stalls start as a Poisson process and one that
        would start during a stall is dropped, so stall and gap alternate (renewal reward:
        E[D] / (E[D] + 1/rate))."""
        d = self.stall_duration[r]
        if d is None or self.stall_rate_per_ms[r] <= 0:
            return 0.0
        x = self.stall_rate_per_ms[r] * d.mean_ms
        return x / (1.0 + x)


@dataclass(frozen=True)
class HostParams:
    """The workload and the host's CPU, a value per regime id where it can change."""

    kind: str  # "open" or "closed"
    open_rate_per_ms: tuple[float, ...] | None
    sessions: int | None
    think_ms: float | None
    think_fixed: bool
    log_bytes: int
    cpus: int | None
    cpu_mean_ms: tuple[float, ...]  # CPU work per commit dilated by the other work
    flush_overhead_ms: tuple[float, ...]  # writer CPU per flush (dilated) + hand-over
    wake_ms: float
    wake_servers: int  # the k-th woken session waits ceil(k / wake_servers) wake costs


def _regime_ids(case: Case) -> dict[str, int]:
    return {name: i for i, name in enumerate(case.regime_names())}


def device_params(case: Case, name: str) -> DeviceParams:
    """The device's flush profile, bandwidth and stalls in every regime."""
    d: Device = case.devices[name]
    lats, bws, rates, durs = [], [], [], []
    for reg in case.regime_names():
        lats.append(lat.from_entry(d.latency.get(reg, d.latency[NORMAL])))
        bws.append(d.bandwidth_bytes_per_s(reg) / 1000.0)
        st = d.stalls.get(reg)
        rates.append(st.per_s / 1000.0 if st else 0.0)
        durs.append(lat.from_entry(st.duration) if st else None)
    return DeviceParams(
        name=name, counts_as_durable=d.counts_as_durable, block_bytes=d.profile_block_bytes,
        measures_commit_latency=d.profile_measures == "commit_latency",
        latency=tuple(lats), bandwidth_bytes_per_ms=tuple(bws),
        stall_rate_per_ms=tuple(rates), stall_duration=tuple(durs))


def host_params(case: Case) -> HostParams:
    """Load and CPU per regime. The CPU station, the writer's CPU per flush and the wake cost
    apply when ``workload.cpus`` is set; the hand-over cost applies always."""
    w = case.workload
    rate = case.commit_rate_per_s()
    rates, cpu, overhead = [], [], []
    for reg in case.regime_names():
        load = host_load(case, reg)
        rates.append(rate * load.commit_rate_factor / 1000.0 if rate is not None else 0.0)
        cpu.append(load.cpu_ms_per_commit)
        overhead.append(load.flush_overhead_ms)
    return HostParams(
        kind=w.kind, open_rate_per_ms=tuple(rates) if rate is not None else None,
        sessions=w.sessions, think_ms=w.think_time_ms,
        think_fixed=w.think_time_distribution == "fixed", log_bytes=w.log_bytes_per_commit,
        cpus=w.cpus if (w.cpus and w.cpu_ms_per_commit > 0) else None,
        cpu_mean_ms=tuple(cpu), flush_overhead_ms=tuple(overhead),
        wake_ms=w.wake_us_per_session / 1000.0, wake_servers=w.cpus or 1)


@dataclass(frozen=True)
class Schedule:
    """Which regime is in force at a time (ms). ``fixed`` pins one regime (a steady-state
    segment); otherwise the case's periodic regimes, the first listed winning an overlap."""

    names: tuple[str, ...]
    period_ms: tuple[float, ...]
    duration_ms: tuple[float, ...]
    offset_ms: tuple[float, ...]
    fixed: int | None = None

    def pinned(self, regime_id: int) -> Schedule:
        return Schedule(self.names, self.period_ms, self.duration_ms, self.offset_ms, regime_id)

    def index(self, t_ms: np.ndarray) -> np.ndarray:
        """Regime id in force at each time."""
        t = np.asarray(t_ms, dtype=float)
        if self.fixed is not None:
            return np.full(t.shape, self.fixed, dtype=np.intp)
        out = np.zeros(t.shape, dtype=np.intp)
        with np.errstate(invalid="ignore"):  # inf (no time) falls in no regime window
            for i in range(len(self.period_ms) - 1, -1, -1):  # the first listed wins: last
                inside = np.mod(t - self.offset_ms[i], self.period_ms[i]) < self.duration_ms[i]
                out[inside] = i + 1
        return out

    def next_change(self, t_ms: np.ndarray) -> np.ndarray:
        """The first time after each t at which some regime starts or ends (inf if none)."""
        t = np.asarray(t_ms, dtype=float)
        out = np.full(t.shape, np.inf)
        if self.fixed is not None:
            return out
        for p, d, o in zip(self.period_ms, self.duration_ms, self.offset_ms, strict=True):
            with np.errstate(invalid="ignore"):
                start = o + np.floor((t - o) / p) * p  # the period's start at or before t
            nxt = np.where(t < start + d, start + d, start + p)
            out = np.minimum(out, nxt)
        # a boundary that rounding puts at or before t is stepped over (1 ns later)
        return np.where(out > t, out, t + 1e-6)

    def name_at(self, t_ms: float) -> str:
        return self.names[int(self.index(np.array([t_ms]))[0])]


def schedule_for(case: Case) -> Schedule:
    return Schedule(
        names=case.regime_names(),
        period_ms=tuple(r.period_s * 1000.0 for r in case.regimes),
        duration_ms=tuple(r.duration_s * 1000.0 for r in case.regimes),
        offset_ms=tuple(r.offset_s * 1000.0 for r in case.regimes))


# --------------------------------------------------------------------------- capacities
@dataclass(frozen=True)
class Capacity:
    """The commit rate (per ms) at which the first resource of a strategy saturates."""

    resource: str
    rate_per_ms: float
    what: str


def capacity(strategy, host: HostParams, devices: dict[str, DeviceParams],
             r: int) -> Capacity | None:
    """The lowest saturating commit rate among the strategy's resources in regime r.

    Operational bounds (throughput <= capacity of each resource; Lazowska et al.,
    Quantitative System Performance, 1984, ch. 5): the CPU station cpus / CPU per commit;
    a writer that takes every pending commit is bounded by its device's bandwidth (a flush
    of b commits lasts at least b x log bytes / bandwidth, and the device makes no progress
    while stalled); one flush per commit by 1 / mean flush; the deferred buffer by
    buffer commits / max(interval, mean flush of a full buffer) (a full buffer's commits all
    wait on one flush, and flushes start at most once an interval on average). Stalls
    reduce the device's usable time by their share of time. Closed workloads never grow a
    backlog (at most N commits wait) and get None.
    """
    if host.kind == "closed":
        return None
    out: list[Capacity] = []
    if host.cpus:
        out.append(Capacity("cpu", host.cpus / host.cpu_mean_ms[r], "the host's CPU"))
    kind = strategy.kind
    names = strategy.devices if kind == "dual_device" else (strategy.device,)
    for name in names:
        dev = devices[name]
        if dev.measures_commit_latency and kind == "synchronous":
            continue
        up = 1.0 - dev.stalled_share(r)
        bw = dev.bandwidth_bytes_per_ms[r]
        if kind == "synchronous" and strategy.grouping == "none":
            s1 = _flush_mean_ms(dev, host, r, 1)
            out.append(Capacity(f"writer:{name}", up / s1, f"one flush per commit on {name}"))
            continue
        out.append(Capacity(f"bandwidth:{name}", up * bw / host.log_bytes,
                            f"the bandwidth of {name}"))
        if kind == "deferred":
            cap = strategy.buffer_bytes // host.log_bytes
            s_full = _flush_mean_ms(dev, host, r, cap)
            # a full buffer empties by at most K commits a flush, and flush starts come at
            # most once an interval on average (each uses up a tick) and one flush apart
            gap = max(strategy.flush_every_ms, s_full)
            out.append(Capacity(f"buffer:{name}", up * cap / gap,
                                f"the log buffer in front of {name}"))
    if not out:
        return None
    return min(out, key=lambda c: c.rate_per_ms)


def _flush_mean_ms(dev: DeviceParams, host: HostParams, r: int, batch: int) -> float:
    extra = max(0.0, batch * host.log_bytes - dev.block_bytes) / dev.bandwidth_bytes_per_ms[r]
    return dev.latency[r].mean_ms + extra + host.flush_overhead_ms[r]


def time_scale_ms(strategy, host: HostParams, devices: dict[str, DeviceParams], r: int,
                  rate_per_ms: float | None) -> tuple[float, float, float]:
    """(relaxation scale, period, longest stall p99.9) in ms for regime r. The relaxation
    scale is the slowest of the mean flush, the think time and the relaxation time of a
    loaded single-server station, (1 + sqrt(rho))^2 / (1 - sqrt(rho))^2 mean service times
    (the M/M/1 relaxation time; Morse 1955 — from memory); the period is the gathering
    window or the flush interval, whose cycle a lane forgets within a few repetitions."""
    names = strategy.devices if strategy.kind == "dual_device" else (strategy.device,)
    scales = [0.0]
    stall_p999 = 0.0
    for name in names:
        dev = devices[name]
        s = _flush_mean_ms(dev, host, r, 1)
        scales.append(s)
        if rate_per_ms and strategy.kind == "synchronous" and strategy.grouping == "none":
            q = math.sqrt(min(0.95, rate_per_ms * s))
            scales.append(s * (1 + q) ** 2 / (1 - q) ** 2)
        d = dev.stall_duration[r]
        if d is not None and dev.stall_rate_per_ms[r] > 0:
            stall_p999 = max(stall_p999, float(d.quantile(0.999)))
    period = 0.0
    if strategy.kind == "batched":
        period = strategy.gather_window_ms
    if strategy.kind == "deferred":
        period = strategy.flush_every_ms
    if host.think_ms:
        scales.append(host.think_ms)
    if host.cpus and rate_per_ms:
        q = math.sqrt(min(0.95, rate_per_ms * host.cpu_mean_ms[r] / host.cpus))
        scales.append(host.cpu_mean_ms[r] * (1 + q) ** 2 / (1 - q) ** 2 / host.cpus)
    return max(scales), period, stall_p999
