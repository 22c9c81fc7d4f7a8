"""Synchronous commit: each commit waits for the log flush that holds it.

Natural group commit (commits arriving during a flush share the next one) or one flush per
commit (an M/G/1 queue). Open arrivals use the law of commitadvisor.writer.open_group_commit;
closed sessions the embedded Markov chain of commitadvisor.writer.closed_group_commit.
"""

from __future__ import annotations

from commitadvisor import latency as L
from commitadvisor import writer as W
from commitadvisor.case import Case
from commitadvisor.results import RegimeResult
from commitadvisor.strategies.common import (
    Partial,
    assemble,
    safe,
    saturated_result,
    saturation,
    unbounded,
)
from commitadvisor.strategies.context import (
    DeviceInRegime,
    RegimeContext,
    busy_with_stalls,
    flushes_with_stalls,
    stall_mixture,
)

__all__ = ["evaluate_regime", "writer_response", "device_exposures"]


def device_exposures(dev: DeviceInRegime) -> tuple:
    """Exposure of a strategy that acknowledges after this one device's flush."""
    single = unbounded("device_loss", "one copy: losing this device loses every commit that "
                       "only it holds, until the log is archived or replicated elsewhere")
    if dev.device.counts_as_durable:
        return (safe("process_crash"), safe("host_crash"), single)
    return (safe("process_crash"),
            unbounded("host_crash", f"{dev.name} has a volatile write cache not declared as "
                      "honouring flushes: a completed flush may not be on stable media"),
            single)


def writer_response(ctx: RegimeContext, dev: DeviceInRegime, rate_per_ms: float,
                    grouping: str = "natural"):
    """(response law, flushes per ms, mean batch, writer busy) for open arrivals, or None
    when the writer cannot keep up (one flush per commit with rho >= 1)."""
    if grouping == "none":
        s = dev.flush(1, ctx.log_bytes)
        resp = W.one_flush_per_commit(s, rate_per_ms)
        if resp is None:
            return None
        return resp, rate_per_ms, 1.0, rate_per_ms * s.mean_ms
    batch = 1.0
    for _ in range(4):  # the transfer part of a flush grows with its batch
        og = W.open_group_commit(dev.flush(batch, ctx.log_bytes), rate_per_ms)
        batch = og.mean_batch
    return og.response, og.flushes_per_ms, og.mean_batch, og.writer_busy


def evaluate_regime(case: Case, s, ctx: RegimeContext) -> RegimeResult:
    dev = ctx.devices[s.device]
    duration = case.regime(ctx.regime).duration_s if case.regime(ctx.regime) else None
    if dev.device.profile_measures == "commit_latency":
        return _measured(case, s, ctx, dev)
    if ctx.open_rate_per_ms is None:
        return _closed(case, s, ctx, dev)
    lam = ctx.open_rate_per_ms
    bw_cap = dev.bandwidth_bytes_per_ms / ctx.log_bytes
    if lam >= bw_cap:
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            f"bandwidth:{dev.name}", bw_cap, lam, duration, f"the bandwidth of {dev.name}"), 1)
    out = writer_response(ctx, dev, lam, s.grouping)
    if out is None:
        cap = 1.0 / dev.flush(1, ctx.log_bytes).mean_ms
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            f"writer:{dev.name}", cap, lam, duration,
            f"one flush per commit on {dev.name}"), 1)
    resp, flushes, batch, busy = out
    cpu_cap = ctx.cpu_ceiling_per_ms(batch, dev.overhead_ms)
    cpu = ctx.cpu_wait(lam)
    if cpu is None or (cpu_cap is not None and lam >= cpu_cap):
        cap = cpu_cap if cpu_cap is not None else ctx.cpus / ctx.cpu_ms_per_commit
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            "cpu", cap, lam, duration, "the host's CPU"), 1)
    resp, stalled = stall_mixture(resp, dev, lam, ctx.log_bytes,
                                  dev.flush(batch, ctx.log_bytes), busy)
    ack = L.add_constant(L.convolve(cpu, resp), ctx.wake_cost(batch))
    notes = []
    if stalled:
        flushes = flushes_with_stalls(flushes, dev)
        batch = lam / flushes
        busy = busy_with_stalls(busy, dev)
        notes.append(f"{dev.name} is stalled {stalled:.1%} of the time in this regime; the "
                     "stall is folded in as a time-based event (quasi-static approximation)")
    return assemble(ctx.regime, ctx.time_share, Partial(
        ack=ack, durable=ack if dev.device.counts_as_durable else None,
        throughput_per_ms=lam, exposures=device_exposures(dev),
        flushes_per_ms=((dev.name, flushes),), mean_batch=batch, writer_busy=busy,
        cpu_busy=(lam * ctx.cpu_ms_per_commit / ctx.cpus) if ctx.cpus else None,
        copies_at_ack=1 if dev.device.counts_as_durable else 0, notes=tuple(notes)))


def _closed(case: Case, s, ctx: RegimeContext, dev: DeviceInRegime) -> RegimeResult:
    n = ctx.sessions

    def chain(think: float):
        if s.grouping == "none":
            return _one_per_commit_closed(ctx, dev, n, think)
        return W.closed_group_commit(lambda b: dev.flush(b, ctx.log_bytes), n, think)

    return closed_result(ctx, dev, chain, device_exposures(dev),
                         lock_step_wait_ms=None if s.grouping == "none" else 0.0)


def in_lock_step(ctx: RegimeContext) -> bool:
    """Sessions with a fixed think time and nothing random between the flush and the next
    commit (no CPU work, no wake-up cost) return together: the sessions one flush released
    reach the writer at one instant, so two groups that once share a flush never part, and
    in the long run one flush carries all N."""
    cpu_free = not ctx.cpus or ctx.cpu_ms_per_commit <= 0
    return ctx.think_fixed and cpu_free and ctx.wake_ms <= 0


def lock_step(ctx: RegimeContext, dev: DeviceInRegime, wait_ms: float) -> W.ClosedGroupCommit:
    """N sessions in lock step: all N wait ``wait_ms`` (a gathering window they do not fill)
    and one flush of N commits, then think Z. Cycle Z + wait + E[F(N)]; X = N / cycle."""
    n = ctx.sessions
    flush = dev.flush(n, ctx.log_bytes)
    resp = L.add_constant(flush, wait_ms)
    cycle = ctx.think_ms + resp.mean_ms
    x = n / cycle
    return W.ClosedGroupCommit(x, resp, resp.mean_ms, float(n), 1.0 / cycle,
                               flush.mean_ms / cycle)


def closed_result(ctx: RegimeContext, dev: DeviceInRegime, chain, exposures,
                  notes: tuple[str, ...] = (),
                  lock_step_wait_ms: float | None = None) -> RegimeResult:
    """A closed workload's result from a writer chain ``chain(think_ms)``. With a CPU model
    the two stations are solved by decomposition: the writer's chain sees the CPU time as
    part of the think time, the CPU station is the finite-source queue of N sessions whose
    time away is the think time plus the writer's response (``writer.finite_source_cpu``),
    and the two are iterated to a fixed point of the mean times."""
    n, z = ctx.sessions, ctx.think_ms
    cpu_ms = ctx.cpu_ms_per_commit
    notes = list(notes)
    if ctx.think_fixed and lock_step_wait_ms is not None and in_lock_step(ctx):
        notes.append(f"fixed think time, no CPU work or wake-up cost: the {n} sessions fall "
                     "into lock step and every flush carries all of them; real sessions drift "
                     "apart, so read this as the best case and compare exponential think time")
        wait_ms = lock_step_wait_ms

        def chain(_think: float) -> W.ClosedGroupCommit:
            return lock_step(ctx, dev, wait_ms)
    elif ctx.think_fixed:
        notes.append("fixed think time: evaluated with the exponential-think chain "
                     "(approximation; check it with the simulator)")
    res = chain(z + cpu_ms)
    x = res.throughput_per_ms
    cpu = L.Fixed(0.0)
    if ctx.cpus and cpu_ms > 0:
        at_cpu_ms = cpu_ms
        for _ in range(12):
            station = ctx.cpu_closed(n, z + res.mean_response_ms)
            cpu = station.at_cpu
            if abs(cpu.mean_ms - at_cpu_ms) <= 1e-3 * cpu.mean_ms:
                break
            at_cpu_ms = cpu.mean_ms
            res = chain(z + at_cpu_ms)
        x = n / (z + res.mean_response_ms + cpu.mean_ms)
    cap = ctx.cpu_ceiling_per_ms(res.mean_batch, dev.overhead_ms)
    if cap is not None and x > 0.97 * cap:
        notes.append(f"the host's CPU is the bottleneck: throughput is near its ceiling of "
                     f"{cap * 1000:.0f} commits/s")
    resp, stalled = stall_mixture(res.response, dev, x, ctx.log_bytes,
                                  dev.flush(res.mean_batch, ctx.log_bytes), res.writer_busy)
    ack = L.add_constant(L.convolve(cpu, resp), ctx.wake_cost(res.mean_batch))
    flushes, batch, busy = res.flushes_per_ms, res.mean_batch, res.writer_busy
    if stalled:
        x = x * (1 - stalled)
        flushes = flushes_with_stalls(flushes, dev)
        batch = x / flushes
        busy = busy_with_stalls(busy, dev)
        notes.append(f"{dev.name} is stalled {stalled:.1%} of the time; folded in as a "
                     "time-based event (quasi-static approximation)")
    return assemble(ctx.regime, ctx.time_share, Partial(
        ack=ack, durable=ack if dev.device.counts_as_durable else None,
        throughput_per_ms=x, exposures=exposures,
        flushes_per_ms=((dev.name, flushes),), mean_batch=batch,
        writer_busy=busy,
        cpu_busy=(x * cpu_ms / ctx.cpus) if ctx.cpus else None,
        copies_at_ack=1 if dev.device.counts_as_durable else 0, notes=tuple(notes)))


def _one_per_commit_closed(ctx, dev, n, z):
    """One flush per commit with N sessions: exact MVA for a single queueing station
    (Reiser and Lavenberg 1980), the response law approximated by the open M/G/1 law at the
    MVA throughput."""
    s = dev.flush(1, ctx.log_bytes)
    q = 0.0
    for k in range(1, n + 1):
        r = s.mean_ms * (1 + q)
        x = k / (z + r)
        q = x * r
    resp = W.one_flush_per_commit(s, min(x, 0.999 / s.mean_ms)) or s
    return W.ClosedGroupCommit(x, resp, r, 1.0, x, x * s.mean_ms)


def _measured(case: Case, s, ctx: RegimeContext, dev: DeviceInRegime) -> RegimeResult:
    rate = ctx.open_rate_per_ms
    if rate is None:
        rate = ctx.sessions / (ctx.think_ms + dev.profile.mean_ms)
    return assemble(ctx.regime, ctx.time_share, Partial(
        ack=dev.profile,
        durable=dev.profile if dev.device.counts_as_durable else None, throughput_per_ms=rate,
        exposures=device_exposures(dev), flushes_per_ms=(), mean_batch=None, writer_busy=None,
        cpu_busy=None, copies_at_ack=1 if dev.device.counts_as_durable else 0,
        notes=(f"{dev.name}'s profile is measured commit latency; used as the response time "
               "as it is (queueing and CPU are already in it)",)))
