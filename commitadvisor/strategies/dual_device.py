"""Dual-device log: each device has its own natural-group-commit writer, both fed by the
same commit stream; the commit is acknowledged after the first (or both) durable copies.

With responses T_a and T_b from each device's group-commit law, ack = min(T_a, T_b)
(``first``) or max (``both``); correlated slowness enters as a shared-cause share s:
sf_min = (1 - s) sf_a sf_b + s min(sf_a, sf_b) (order statistics, Ross, Introduction to
Probability Models, ch. 5, for the independent part). A device whose flushes do not count
as durable never acknowledges. The second copy's lag is |T_a - T_b| (the time the
acknowledged commit exists on one device only).
"""

from __future__ import annotations

import numpy as np

from commitadvisor import latency as L
from commitadvisor.case import Case
from commitadvisor.results import RegimeResult
from commitadvisor.strategies.common import (
    Partial,
    assemble,
    from_window,
    safe,
    saturated_result,
    saturation,
    unbounded,
)
from commitadvisor.strategies.context import (
    RegimeContext,
    busy_with_stalls,
    flushes_with_stalls,
    stall_mixture,
)
from commitadvisor.strategies.synchronous import writer_response

__all__ = ["evaluate_regime", "lag_distribution"]


def lag_distribution(a: L.Latency, b: L.Latency, shared_share: float = 0.0) -> L.GridLatency:
    """|T_a - T_b|: with chance ``shared_share`` the pair is comonotone (one cause drives both,
    D = |Q_a(U) - Q_b(U)| for one uniform U), otherwise independent, P(|D| <= x) =
    P(Ta - Tb <= x) - P(Ta < Tb - x) integrated over T_b's quantiles (midpoint rule in
    probability). The same split as ``latency.minimum`` uses for the acknowledgement.

    T_a's cdf is tabulated once on a log grid of 2^14 points (ratio about 1.002 a step) and
    read by linear interpolation, rather than evaluated afresh at every (x, T_b) pair."""
    # integrate over the narrower of the two (its quantile points then resolve it) and read
    # the wider one's cdf: the midpoint rule over a heavy tail's quantiles would step the
    # lag's cdf there and read its high percentiles low
    if float(a.quantile(0.999)) < float(b.quantile(0.999)):
        a, b = b, a
    u = np.concatenate([(np.arange(400) + 0.5) / 400 * 0.99,
                        0.99 + (np.arange(100) + 0.5) / 100 * 0.0099,
                        0.9999 + (np.arange(100) + 0.5) / 100 * 0.0000999])
    w = np.concatenate([np.full(400, 0.99 / 400), np.full(100, 0.0099 / 100),
                        np.full(100, 0.0000999 / 100)])
    w = w / w.sum()
    yb = b.quantile(u)
    ya = a.quantile(u)
    hi = max(float(ya.max()), float(yb.max()))
    x = np.concatenate([[0.0], np.geomspace(hi * 1e-6, hi, 800)])
    top = float(yb.max()) + hi
    table_x = np.concatenate([[0.0], np.geomspace(hi * 1e-9, top, 1 << 14)])
    table_c = a.cdf(table_x)
    c = np.empty_like(x)
    for i in range(0, len(x), 250):
        xi = x[i:i + 250, None]
        # P(Ta <= Tb + x) - P(Ta < Tb - x) averaged over Tb; below 0 the cdf is 0
        upper = np.interp(yb[None, :] + xi, table_x, table_c)
        lower = np.interp(np.maximum(yb[None, :] - xi, 0) - 1e-12, table_x, table_c, left=0.0)
        c[i:i + 250] = (upper - lower) @ w
    if shared_share > 0:
        # comonotone part: the weighted law of |Q_a(u) - Q_b(u)| on the same quantile points
        d = np.abs(ya - yb)
        order = np.argsort(d)
        co = np.interp(x, d[order], np.cumsum(w[order]), left=0.0, right=1.0)
        c = (1 - shared_share) * c + shared_share * co
    c = np.clip(np.maximum.accumulate(c), 0.0, 1.0)
    mean, second = L._moments_from_cdf(x, c)
    return L.GridLatency(x, c, mean, second, float(1 - c[-1]), "second copy's lag")


def evaluate_regime(case: Case, s, ctx: RegimeContext) -> RegimeResult:
    reg = case.regime(ctx.regime)
    duration = reg.duration_s if reg else None
    lam = ctx.open_rate_per_ms
    notes = []
    station = None
    if lam is None:
        fast = min((ctx.devices[d] for d in s.devices), key=lambda d: d.profile.mean_ms)
        if ctx.cpus and ctx.cpu_ms_per_commit > 0:
            station = ctx.cpu_closed(ctx.sessions, ctx.think_ms + fast.profile.mean_ms)
            lam = station.throughput_per_ms
        else:
            lam = ctx.sessions / (ctx.think_ms + fast.profile.mean_ms)
        notes.append("closed sessions: the dual-device log is evaluated with open arrivals at "
                     "the sessions' rate (approximation; check it with the simulator)")
    responses, flushes = {}, []
    busy = 0.0
    batch_mean = 1.0
    for name in s.devices:
        dev = ctx.devices[name]
        bw_cap = dev.bandwidth_bytes_per_ms / ctx.log_bytes
        if lam >= bw_cap:
            return saturated_result(ctx.regime, ctx.time_share, saturation(
                f"bandwidth:{name}", bw_cap, lam, duration, f"the bandwidth of {name}"), 0)
        resp, fl, batch, wb = writer_response(ctx, dev, lam)
        resp, stalled = stall_mixture(resp, dev, lam, ctx.log_bytes,
                                      dev.flush(batch, ctx.log_bytes), wb)
        if stalled:
            fl = flushes_with_stalls(fl, dev)
            batch = lam / fl
            wb = busy_with_stalls(wb, dev)
        responses[name] = resp
        flushes.append((name, fl))
        busy = max(busy, wb)
        batch_mean = max(batch_mean, batch)
    cpu = station.at_cpu if station is not None else ctx.cpu_wait(lam)
    if cpu is None:
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            "cpu", ctx.cpus / ctx.cpu_ms_per_commit, lam, duration, "the host's CPU"), 0)
    a_name, b_name = s.devices
    ta, tb = responses[a_name], responses[b_name]
    durable = {n: ctx.devices[n].device.counts_as_durable for n in s.devices}
    share = s.shared_cause_share
    if s.ack_after == "both":
        writer = L.maximum(ta, tb, share)
        copies = sum(durable.values())
    elif all(durable.values()) or not any(durable.values()):
        writer = L.minimum(ta, tb, share)
        copies = 1 if any(durable.values()) else 0
    else:
        only = a_name if durable[a_name] else b_name
        writer = responses[only]
        copies = 1
        notes.append(f"only {only} counts as durable, so only its flush acknowledges")
    ack = L.add_constant(L.convolve(cpu, writer), ctx.wake_cost(batch_mean))
    # durable once the first copy that counts is on its device (which for "both" comes
    # before the acknowledgement)
    if s.ack_after == "both" and all(durable.values()):
        first_durable = L.add_constant(L.convolve(cpu, L.minimum(ta, tb, share)),
                                       ctx.wake_cost(batch_mean))
    elif s.ack_after == "both" and any(durable.values()):
        only = a_name if durable[a_name] else b_name
        first_durable = L.add_constant(L.convolve(cpu, responses[only]),
                                       ctx.wake_cost(batch_mean))
    else:
        first_durable = ack
    lag = lag_distribution(ta, tb, share)
    if not any(durable.values()):
        host = unbounded("host_crash", "neither device counts as durable")
    elif s.ack_after == "first" and not all(durable.values()):
        host = safe("host_crash")
    else:
        host = safe("host_crash")
        notes.append("a host crash loses nothing acknowledged only if recovery reads the "
                     "longer valid log of the two devices")
    if s.ack_after == "both" and all(durable.values()):
        dev_loss = safe("device_loss")
    elif s.ack_after == "both" or all(durable.values()):
        dev_loss = from_window(case, "device_loss", lag, lam, None,
                               "lambda E[lag] (Little's law); lag = the second copy's delay")
    else:
        dev_loss = unbounded("device_loss", "only one device counts as durable")
    return assemble(ctx.regime, ctx.time_share, Partial(
        ack=ack, durable=first_durable if copies else None, throughput_per_ms=lam,
        exposures=(safe("process_crash"), host, dev_loss), flushes_per_ms=tuple(flushes),
        mean_batch=batch_mean, writer_busy=busy,
        cpu_busy=(lam * ctx.cpu_ms_per_commit / ctx.cpus) if ctx.cpus else None,
        copies_at_ack=copies, notes=tuple(notes)))
