"""Batched commit: the writer holds each flush to gather commits, for at most the gathering
window after the first pending commit or until the target number is pending.

Model (open arrivals, a renewal approximation checked against the simulator): the window
runs from the moment the first pending commit joined the writer, even when that was during
the previous flush. A flush that saw no arrival (chance p0 = E[exp(-lambda S)]) is followed
by an idle wait and a full gathering G = min(window, Gamma(target - 1, lambda)); otherwise
the next flush waits only what is left of the oldest pending commit's window, or nothing
when the target is already reached (G'). By PASTA a commit arriving while idle waits G + S;
one arriving during a gathering waits its equilibrium residual and S; one arriving during a
flush waits the rest of the flush, G' and S. Closed sessions use the chain of
commitadvisor.writer.closed_batched_commit.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from commitadvisor import latency as L
from commitadvisor import writer as W
from commitadvisor.case import Case
from commitadvisor.results import RegimeResult
from commitadvisor.strategies.common import Partial, assemble, saturated_result, saturation
from commitadvisor.strategies.context import RegimeContext, stall_mixture
from commitadvisor.strategies.synchronous import closed_result, device_exposures

__all__ = ["evaluate_regime", "Capped"]


@dataclass(frozen=True)
class Capped(L.Latency):
    """min(base, cap_ms): the gathering ends at the window or when the target is reached."""

    base: L.Latency
    cap_ms: float

    def cdf(self, x_ms: Any) -> np.ndarray:
        x = np.asarray(x_ms, dtype=float)
        return np.where(x >= self.cap_ms, 1.0, self.base.cdf(x))

    def quantile(self, q: Any) -> np.ndarray:
        return np.minimum(self.base.quantile(q), self.cap_ms)

    @property
    def mean_ms(self) -> float:
        x = np.linspace(0, self.cap_ms, 1025)
        sf = self.base.sf(x)
        return float(np.sum(np.diff(x) * (sf[1:] + sf[:-1]) / 2))

    @property
    def second_moment_ms2(self) -> float:
        x = np.linspace(0, self.cap_ms, 1025)
        g = 2 * x * self.base.sf(x)
        return float(np.sum(np.diff(x) * (g[1:] + g[:-1]) / 2))

    @property
    def upper_ms(self) -> float:
        return self.cap_ms


def evaluate_regime(case: Case, s, ctx: RegimeContext) -> RegimeResult:
    dev = ctx.devices[s.device]
    reg = case.regime(ctx.regime)
    duration = reg.duration_s if reg else None
    lam = ctx.open_rate_per_ms
    notes = []
    if lam is None:
        def chain(think: float):
            return W.closed_batched_commit(lambda b: dev.flush(b, ctx.log_bytes), ctx.sessions,
                                           think, s.gather_window_ms, s.gather_target_commits)

        return closed_result(ctx, dev, chain, device_exposures(dev))
    bw_cap = dev.bandwidth_bytes_per_ms / ctx.log_bytes
    if lam >= bw_cap:
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            f"bandwidth:{dev.name}", bw_cap, lam, duration, f"the bandwidth of {dev.name}"), 1)
    k = s.gather_target_commits
    window = s.gather_window_ms
    gather, flush, p0, after, cycle, batch = _cycle(dev, ctx, lam, k, window)
    cpu = ctx.cpu_wait(lam)
    cpu_cap = ctx.cpu_ceiling_per_ms(batch, dev.overhead_ms)
    if cpu is None or (cpu_cap is not None and lam >= cpu_cap):
        cap = cpu_cap if cpu_cap is not None else ctx.cpus / ctx.cpu_ms_per_commit
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            "cpu", cap, lam, duration, "the host's CPU"), 1)
    shares = np.array([p0 / lam, p0 * gather.mean_ms, (1 - p0) * after.mean_ms,
                       flush.mean_ms]) / cycle
    parts = [L.convolve(gather, flush), L.convolve(L.residual(gather), flush),
             L.convolve(L.residual(after), flush) if after.mean_ms > 0 else flush,
             L.convolve(L.residual(flush), _gather_after_flush(
                 flush.second_moment_ms2 / flush.mean_ms, lam, k, window), flush)]
    resp = L.mixture(shares, parts)
    resp, stalled = stall_mixture(resp, dev, lam, ctx.log_bytes)
    if stalled:
        notes.append(f"{dev.name} is stalled {stalled:.1%} of the time; folded in as a "
                     "time-based event (quasi-static approximation)")
    ack = L.add_constant(L.convolve(cpu, resp), ctx.wake_cost(batch))
    return assemble(ctx.regime, ctx.time_share, Partial(
        ack=ack, durable=ack if dev.device.counts_as_durable else None,
        throughput_per_ms=lam, exposures=device_exposures(dev),
        flushes_per_ms=((dev.name, 1.0 / cycle),), mean_batch=batch,
        writer_busy=flush.mean_ms / cycle,
        cpu_busy=(lam * ctx.cpu_ms_per_commit / ctx.cpus) if ctx.cpus else None,
        copies_at_ack=1 if dev.device.counts_as_durable else 0, notes=tuple(notes)))


def _gather_after_flush(seen: float, lam: float, k: int, window: float) -> L.Latency:
    """What is left of the gathering when a flush ends with commits pending. The oldest
    pending commit joined about one interarrival after the flush began, or half-way through
    it when arrivals are sparse; lambda x ``seen`` are already pending. Per flush, ``seen``
    is E[S]; as a commit arriving during a flush sees it, the length-biased E[S^2]/E[S]."""
    age = max(0.0, seen - min(1.0 / lam, seen / 2))
    pending = max(1.0, lam * seen)
    left = window - age
    if pending >= k or left <= 0:
        return L.Fixed(0.0)
    return Capped(L.Gamma(max(k - pending, 0.05), 1.0 / lam), left)


def _cycle(dev, ctx: RegimeContext, lam: float, k: int, window: float):
    """Gathering, flush and cycle at rate lam (fixed point on the batch's transfer time)."""
    gather = Capped(L.Gamma(k - 1, 1.0 / lam), window)
    batch = 1.0 + lam * gather.mean_ms
    for _ in range(6):
        flush = dev.flush(batch, ctx.log_bytes)
        p0 = flush.laplace(lam)
        after = _gather_after_flush(flush.mean_ms, lam, k, window)
        cycle = p0 * (1.0 / lam + gather.mean_ms) + (1 - p0) * after.mean_ms + flush.mean_ms
        batch = lam * cycle
    return gather, flush, p0, after, cycle, batch


