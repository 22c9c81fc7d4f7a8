"""What every strategy needs for one regime: load, host CPU, and each device's flush time."""

from __future__ import annotations

import math
from dataclasses import dataclass

from commitadvisor import latency as L
from commitadvisor import writer as W
from commitadvisor.case import NORMAL, Case, Device, host_load

__all__ = ["RegimeContext", "DeviceInRegime", "build_context", "stall_mixture",
           "flushes_with_stalls", "busy_with_stalls"]


@dataclass(frozen=True)
class DeviceInRegime:
    name: str
    device: Device
    profile: L.Latency  # the device's own flush time in this regime (ms)
    bandwidth_bytes_per_ms: float
    stall_rate_per_ms: float
    stall_duration: L.Latency | None
    overhead_ms: float  # the writer's CPU per flush and hand-over, added to every flush

    def flush(self, batch_commits: float, log_bytes: int) -> L.Latency:
        """Flush time for a batch: device time + the transfer beyond the profiled block
        + the writer's own work per flush."""
        extra = max(0.0, batch_commits * log_bytes - self.device.profile_block_bytes)
        return L.add_constant(self.profile, extra / self.bandwidth_bytes_per_ms + self.overhead_ms)

    @property
    def stalled_share(self) -> float:
        """Share of time the device is stalled (Poisson starts, non-overlapping)."""
        if self.stall_duration is None:
            return 0.0
        busy = self.stall_rate_per_ms * self.stall_duration.mean_ms
        return busy / (1 + busy)


@dataclass(frozen=True)
class RegimeContext:
    regime: str
    time_share: float
    open_rate_per_ms: float | None  # None for a closed workload
    sessions: int | None
    think_ms: float | None
    think_fixed: bool
    log_bytes: int
    cpus: int | None
    cpu_ms_per_commit: float  # dilated by the other work
    devices: dict[str, DeviceInRegime]
    wake_ms: float

    def cpu_ceiling_per_ms(self, mean_batch: float, overhead_ms_per_flush: float) -> float | None:
        """Commits per ms the CPUs can carry: cpus / (CPU per commit + CPU per flush / batch)
        (operational analysis: throughput <= 1 / D_max; Lazowska et al., Quantitative System
        Performance, 1984, ch. 5)."""
        if not self.cpus:
            return None
        per_commit = self.cpu_ms_per_commit + overhead_ms_per_flush / max(mean_batch, 1.0)
        return self.cpus / per_commit if per_commit > 0 else None

    def cpu_wait(self, rate_per_ms: float) -> L.Latency | None:
        """Time a commit spends at the CPU station: M/M/c wait plus its own CPU work
        (exponential), Erlang C. Fixed(0) without a CPU model; None when saturated."""
        if not self.cpus or self.cpu_ms_per_commit <= 0:
            return L.Fixed(0.0)
        wait = W.mmc_wait(self.cpus, self.cpu_ms_per_commit, rate_per_ms)
        if wait is None:
            return None
        return L.convolve(wait, L.Exponential(self.cpu_ms_per_commit))

    def cpu_closed(self, sessions: int, away_ms: float) -> W.FiniteSourceCpu:
        """The CPU station of N closed sessions that spend a mean ``away_ms`` elsewhere
        (think time and the log): the finite-source queue, ``writer.finite_source_cpu``."""
        return W.finite_source_cpu(self.cpus, self.cpu_ms_per_commit, sessions, away_ms)

    def cpu_mean_ms(self, rate_per_ms: float) -> float:
        """Mean time at the CPU station: Erlang C wait C S / (c - a) plus the CPU work S
        (inf when saturated)."""
        if not self.cpus or self.cpu_ms_per_commit <= 0:
            return 0.0
        s, c = self.cpu_ms_per_commit, self.cpus
        a = rate_per_ms * s
        if a >= c:
            return float("inf")
        return W.erlang_c(c, a) * s / (c - a) + s

    def wake_cost(self, mean_batch: float) -> float:
        """Mean extra delay of waking a batch: the k-th woken waits ceil(k / cpus) wake costs."""
        if self.wake_ms <= 0:
            return 0.0
        c = self.cpus or 1
        b = max(1, int(round(mean_batch)))
        return self.wake_ms * sum(math.ceil(k / c) for k in range(1, b + 1)) / b


def build_context(case: Case, regime: str, time_share: float) -> RegimeContext:
    """The inputs of one regime: load, CPU figures and each device's flush profile."""
    w = case.workload
    load = host_load(case, regime)
    devices = {}
    for name, d in case.devices.items():
        prof = L.from_entry(d.latency.get(regime, d.latency[NORMAL]))
        st = d.stalls.get(regime)
        devices[name] = DeviceInRegime(
            name=name, device=d, profile=prof,
            bandwidth_bytes_per_ms=d.bandwidth_bytes_per_s(regime) / 1000.0,
            stall_rate_per_ms=(st.per_s / 1000.0) if st else 0.0,
            stall_duration=L.from_entry(st.duration) if st else None,
            overhead_ms=load.flush_overhead_ms,
        )
    rate = case.commit_rate_per_s()
    return RegimeContext(
        regime=regime, time_share=time_share,
        open_rate_per_ms=rate * load.commit_rate_factor / 1000.0 if rate is not None else None,
        sessions=w.sessions, think_ms=w.think_time_ms,
        think_fixed=w.think_time_distribution == "fixed",
        log_bytes=w.log_bytes_per_commit, cpus=w.cpus,
        cpu_ms_per_commit=load.cpu_ms_per_commit,
        devices=devices, wake_ms=w.wake_us_per_session / 1000.0,
    )


def stall_mixture(base: L.Latency, dev: DeviceInRegime, rate_per_ms: float,
                  log_bytes: int, flush: L.Latency | None = None,
                  busy: float = 0.0) -> tuple[L.Latency, float]:
    """Commit wait with time-based device stalls folded in (quasi-static approximation).

    A commit arriving while the device is stalled (chance = the stalled share of time, by
    PASTA) waits the stall's equilibrium residual, then the flush the stall held (the rest
    of the one in flight when it began, chance ``busy``, or the whole one the first commit
    of the stall started) and then one flush carrying everything that piled up; a commit
    whose wait is under way when a stall starts (chance ~ rate x E[T]) waits a whole stall
    more. Returns the law and the stalled share.
    """
    if dev.stall_duration is None:
        return base, 0.0
    f = dev.stalled_share
    d = dev.stall_duration
    # the commit's flush carries the whole stall it fell in (length-biased, E[D^2] / E[D])
    piled = rate_per_ms * d.second_moment_ms2 / d.mean_ms
    after = [L.residual(d)]
    if flush is not None:
        b = min(max(busy, 0.0), 1.0)
        held = L.mixture([b, 1 - b], [L.residual(flush), flush])
        after.append(held)
        piled += rate_per_ms * held.mean_ms
    after.append(dev.flush(max(piled, 1.0), log_bytes))
    after_law = L.convolve(*after)
    g = min(0.5, dev.stall_rate_per_ms * base.mean_ms)
    hit = L.convolve(base, d)
    return L.mixture([(1 - f) * (1 - g), (1 - f) * g, f], [base, hit, after_law]), f


def flushes_with_stalls(flushes_per_ms: float, dev: DeviceInRegime) -> float:
    """Flushes per ms once stalls are in: none while the device is stalled, one more per
    stall for what piled up (stalls start at their rate outside a stall)."""
    f = dev.stalled_share
    if f <= 0:
        return flushes_per_ms
    return (1 - f) * (flushes_per_ms + dev.stall_rate_per_ms)


def busy_with_stalls(busy: float, dev: DeviceInRegime) -> float:
    """Writer busy share once stalls are in: a flush held by a stall keeps the writer busy
    for the whole stall (the writer has committed to it), so the stalled time counts."""
    f = dev.stalled_share
    return busy if f <= 0 else (1 - f) * busy + f
