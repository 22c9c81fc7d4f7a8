"""Deferred commit: acknowledged once the record is in the log buffer; a writer flushes it
every interval. Fast, and not durable until the flush completes.

Model (open arrivals at rate lambda, quasi-static per regime): the writer starts a flush
every I ms taking what the buffer holds (about lambda I commits); when a flush outlasts the
interval the next one starts when it ends. The exposure window of a commit, from its
acknowledgement to durable, is the time to the next flush start (uniform on [0, C] for a
cycle C = max(I, flush time)) plus that flush: W = U + S (host crash or power loss); a
process crash loses only what was not yet handed to the operating system: W = U. The
number at risk at a random instant is lambda E[W] on average (Little's law) and at most the
buffer's bound buffer_bytes / log_bytes_per_commit. A stall longer than the time the buffer
takes to fill (buffer_bytes / (lambda x log bytes)) blocks commits until it ends.
"""

from __future__ import annotations

import numpy as np

from commitadvisor import latency as L
from commitadvisor.case import Case
from commitadvisor.results import RegimeResult
from commitadvisor.strategies.closed import CLOSED_NOTE, solve_closed_rate
from commitadvisor.strategies.common import (
    Partial,
    assemble,
    from_window,
    saturated_result,
    saturation,
    unbounded,
)
from commitadvisor.strategies.context import RegimeContext

__all__ = ["evaluate_regime"]


def evaluate_regime(case: Case, s, ctx: RegimeContext) -> RegimeResult:
    dev = ctx.devices[s.device]
    reg = case.regime(ctx.regime)
    duration = reg.duration_s if reg else None
    notes = []
    if ctx.open_rate_per_ms is None:
        lam = _closed_rate(ctx)
        notes.append(CLOSED_NOTE)
    else:
        lam = ctx.open_rate_per_ms
    bw_cap = dev.bandwidth_bytes_per_ms / ctx.log_bytes
    if lam >= bw_cap:
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            f"bandwidth:{dev.name}", bw_cap, lam, duration,
            f"the bandwidth of {dev.name} (the log buffer fills and commits stall)"), 0)
    interval = s.flush_every_ms
    flush = dev.flush(lam * interval, ctx.log_bytes)
    cycle = max(interval, flush.mean_ms)
    if flush.mean_ms > interval:
        notes.append(f"a flush ({flush.mean_ms:.3g} ms) outlasts the interval ({interval:g} ms): "
                     "flushes run back to back and each carries more")
        flush = dev.flush(lam * cycle, ctx.log_bytes)
        cycle = max(interval, flush.mean_ms)
    cpu = ctx.cpu_wait(lam)
    if cpu is None:
        cap = ctx.cpus / ctx.cpu_ms_per_commit
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            "cpu", cap, lam, duration, "the host's CPU"), 0)
    to_start = L.Uniform0(cycle)
    bound = s.buffer_bytes // ctx.log_bytes
    ack = cpu
    window_host = L.convolve(to_start, flush)
    if dev.stall_duration is not None:
        fill_ms = s.buffer_bytes / (lam * ctx.log_bytes)
        d = dev.stall_duration
        blocked_share = dev.stall_rate_per_ms * float(
            (d.sf(fill_ms + (d.upper_ms - fill_ms) * _U) * (d.upper_ms - fill_ms)).mean()
        ) if d.upper_ms > fill_ms else 0.0
        window_host = L.mixture([1 - dev.stalled_share, dev.stalled_share],
                                [window_host, L.convolve(L.residual(d), window_host)])
        # a stall also holds back the start of the next flush, so what was acknowledged
        # waits longer before it is handed to the operating system
        to_start = L.mixture([1 - dev.stalled_share, dev.stalled_share],
                             [to_start, L.convolve(L.residual(d), to_start)])
        if blocked_share > 0:
            ack = L.mixture([1 - blocked_share, blocked_share],
                            [cpu, L.convolve(cpu, L.residual(d))])
            notes.append(f"stalls outlast the {fill_ms:.0f} ms the buffer takes to fill: "
                         f"{blocked_share:.2%} of commits wait for the device although "
                         "nobody waits for a flush")
    durable_ok = dev.device.counts_as_durable
    exposures = (
        from_window(case, "process_crash", to_start, lam, bound, "lambda E[W] (Little's "
                    "law), W = wait for the next flush to start"),
        from_window(case, "host_crash", window_host, lam, bound,
                    "lambda E[W] (Little's law), W = wait for the next flush + the flush")
        if durable_ok else unbounded("host_crash", f"{dev.name} has a volatile write cache not "
                                     "declared as honouring flushes"),
        unbounded("device_loss", "one copy: losing this device loses every commit that only "
                  "it holds, until the log is archived or replicated elsewhere"),
    )
    return assemble(ctx.regime, ctx.time_share, Partial(
        ack=ack, durable=L.convolve(ack, window_host) if durable_ok else None,
        throughput_per_ms=lam,
        exposures=exposures, flushes_per_ms=((dev.name, 1.0 / cycle),),
        mean_batch=lam * cycle, writer_busy=min(1.0, flush.mean_ms / cycle),
        cpu_busy=(lam * ctx.cpu_ms_per_commit / ctx.cpus) if ctx.cpus else None,
        copies_at_ack=0, notes=tuple(notes)))


_U = np.linspace(0.0005, 0.9995, 1000)


def _closed_rate(ctx: RegimeContext) -> float:
    """Closed sessions acknowledged from the buffer cycle through think time and the CPU
    station only (see commitadvisor.strategies.closed)."""

    cpu_mean = ctx.cpu_mean_ms
    cap = ctx.cpus / ctx.cpu_ms_per_commit if ctx.cpus and ctx.cpu_ms_per_commit > 0 else None
    return solve_closed_rate(ctx.sessions, ctx.think_ms, cpu_mean, cap)
