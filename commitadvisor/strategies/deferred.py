"""Deferred commit: acknowledged once the record is in the log buffer; a writer flushes it
every interval. Fast, and not durable until the flush completes.

Model (open arrivals at rate lambda, quasi-static per regime): the writer starts a flush
every I ms taking what the buffer holds (about lambda I commits); when a flush outlasts the
wait to the next tick the next one starts when it ends, and a turn with nothing buffered is
skipped (the phase chain of ``_phase_chain``). The exposure window of a commit, from its
acknowledgement to durable, is the time U to the next flush start plus that flush:
W = U + S (host crash or power loss); a
process crash loses only what was not yet handed to the operating system: W = U. The
number at risk at a random instant is lambda E[W] on average (Little's law) and at most the
buffer's bound buffer_bytes / log_bytes_per_commit. A buffer that can fill between flushes
makes commits wait for space (commitadvisor.strategies.log_buffer). A stall longer than the
time the buffer takes to fill (buffer_bytes / (lambda x log bytes)) blocks commits until it
ends.
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
    full_buffer,
    saturated_result,
    saturation,
    unbounded,
)
from commitadvisor.strategies.context import RegimeContext
from commitadvisor.strategies.log_buffer import buffer_waits, can_fill

__all__ = ["evaluate_regime"]


def evaluate_regime(case: Case, s, ctx: RegimeContext) -> RegimeResult:
    dev = ctx.devices[s.device]
    reg = case.regime(ctx.regime)
    duration = reg.duration_s if reg else None
    notes = []
    station = None
    if ctx.open_rate_per_ms is None:
        # acknowledged from the buffer: sessions cycle through think time and the CPU only
        if ctx.cpus and ctx.cpu_ms_per_commit > 0:
            station = ctx.cpu_closed(ctx.sessions, ctx.think_ms)
            lam = station.throughput_per_ms
            notes.append("closed sessions: acknowledged from the buffer, they cycle through "
                         "the think time and the CPU station (finite-source queue)")
        else:
            lam = ctx.sessions / max(ctx.think_ms, 1e-9)
    else:
        lam = ctx.open_rate_per_ms
    bound = s.buffer_bytes // ctx.log_bytes
    # when the flushes cannot keep up the buffer stays full: a crash takes all it holds
    full = (full_buffer(case, "process_crash", bound),
            full_buffer(case, "host_crash", bound) if dev.device.counts_as_durable else
            unbounded("host_crash", f"{dev.name} has a volatile write cache not declared "
                      "as honouring flushes"),
            unbounded("device_loss", "one copy: losing this device loses every commit "
                      "that only it holds"))
    bw_cap = dev.bandwidth_bytes_per_ms / ctx.log_bytes
    if lam >= bw_cap:
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            f"bandwidth:{dev.name}", bw_cap, lam, duration,
            f"the bandwidth of {dev.name} (the log buffer fills and commits stall)"), 0,
            exposures=full)
    interval = s.flush_every_ms
    flush = dev.flush(lam * interval, ctx.log_bytes)
    to_start, cycle, skipped = _starts(interval, flush, lam)
    if cycle > interval * 1.0001:
        flush = dev.flush(lam * cycle, ctx.log_bytes)
        to_start, cycle, skipped = _starts(interval, flush, lam)
    over = float(flush.sf(interval))
    if over > 1e-3:
        notes.append(f"{over:.1%} of flushes outlast the {interval:g} ms interval: the next "
                     "one starts when it ends and carries more (flush starts every "
                     f"{cycle:.3g} ms on average)")
    if skipped > 1e-3:
        notes.append(f"{skipped:.1%} of the writer's turns find nothing buffered and are "
                     f"skipped (about {lam * interval:.2g} commits arrive per interval)")
    cpu = station.at_cpu if station is not None else ctx.cpu_wait(lam)
    if cpu is None:
        cap = ctx.cpus / ctx.cpu_ms_per_commit
        return saturated_result(ctx.regime, ctx.time_share, saturation(
            "cpu", cap, lam, duration, "the host's CPU"), 0)
    writer_busy = flush.mean_ms / cycle
    ack = cpu
    window_host = L.convolve(to_start, flush)
    durable = None
    batch = lam * cycle

    def flush_for(b: float) -> L.Latency:
        return dev.flush(b, ctx.log_bytes)

    if can_fill(lam, interval, bound, flush_for):
        # with the buffer full at every flush each flush takes K records, and flushes start
        # by the phase chain with no turn skipped: beyond K / that cycle the backlog grows
        # without end
        _, full_cycle, _ = _starts(interval, flush_for(bound), 1e9)
        cap = bound / full_cycle
        if lam >= 0.98 * cap:
            return saturated_result(ctx.regime, ctx.time_share, saturation(
                f"buffer:{dev.name}", cap, lam, duration,
                f"the log buffer ({bound} commits, flushed every {interval:g} ms)"), 0,
                exposures=full)
        if bound <= _BUFFER_MODEL_MAX:
            waits = buffer_waits(lam, interval, bound, flush_for,
                                 lambda f, n: tick_phase(interval, f, n))
            ack = L.convolve(cpu, waits.ack_wait)
            to_start, window_host = waits.to_start, waits.window_host
            durable = L.convolve(cpu, waits.durable_wait)
            batch, cycle = waits.mean_batch, waits.cycle_ms
            notes.append(f"the buffer holds {bound} commits and fills between flushes: "
                         f"{waits.blocked_share:.1%} of commits wait for space, "
                         f"{waits.ack_wait.mean_ms:.3g} ms on average; a larger buffer or a "
                         "shorter interval removes the wait")
        else:
            notes.append(f"the buffer ({bound} commits) can fill between flushes; the wait "
                         "for space is not modelled at this size, so the acknowledgement "
                         "reads low: check it with the simulator")
    if dev.stall_duration is not None:
        fill_ms = s.buffer_bytes / (lam * ctx.log_bytes)
        d = dev.stall_duration
        blocked_share = dev.stall_rate_per_ms * float(
            (d.sf(fill_ms + (d.upper_ms - fill_ms) * _U) * (d.upper_ms - fill_ms)).mean()
        ) if d.upper_ms > fill_ms else 0.0
        f = dev.stalled_share
        pile = dev.flush(lam * d.second_moment_ms2 / d.mean_ms, ctx.log_bytes)
        in_stall_start, in_stall_host, held_share = stalled_windows(d, cycle, flush, pile)
        # a flush held by a stall keeps the writer busy from its tick to the stall's end
        writer_busy = (1 - f) * writer_busy + f * held_share
        hit, caught = caught_by_stall(d, dev.stall_rate_per_ms, cycle, flush)
        to_start = L.mixture([1 - f, f], [to_start, in_stall_start])
        window_host = L.mixture([(1 - f) * (1 - hit), (1 - f) * hit, f],
                                [window_host, caught, in_stall_host])
        if blocked_share > 0:
            ack = L.mixture([1 - blocked_share, blocked_share],
                            [ack, L.convolve(ack, L.residual(d))])
            durable = None
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
        ack=ack, durable=(durable or L.convolve(ack, window_host)) if durable_ok else None,
        throughput_per_ms=lam,
        exposures=exposures, flushes_per_ms=((dev.name, 1.0 / cycle),),
        mean_batch=batch, writer_busy=min(1.0, writer_busy),
        cpu_busy=(lam * ctx.cpu_ms_per_commit / ctx.cpus) if ctx.cpus else None,
        copies_at_ack=0, notes=tuple(notes)))


_U = np.linspace(0.0005, 0.9995, 1000)
_BUFFER_MODEL_MAX = 1000  # commits: the buffer chain is a dense matrix of this order


_PHASE_BINS = 128  # the phase of an off-grid start, in bins of I / 128
_PHASE_U = np.concatenate([(np.arange(400) + 0.5) / 400 * 0.99,
                           0.99 + (np.arange(100) + 0.5) / 100 * 0.00999])
_PHASE_W = np.concatenate([np.full(400, 0.99 / 400), np.full(100, 0.00999 / 100)])
_PHASE_W = _PHASE_W / _PHASE_W.sum()


def _phase_chain(interval_ms: float, flush: L.Latency, rate_per_ms: float | None):
    """Flush starts as a Markov chain on their phase phi after the last tick (phi = 0: on
    the grid, wait V = I to the next tick; else V = I - phi). A flush S that ends before the
    next tick (S <= V) makes the next candidate start that tick; one that outlasts it makes
    its own end the candidate, at phase (phi + S) mod I. A candidate with nothing buffered
    since the start (chance exp(-lambda max(V, S)) for Poisson commits; none when
    ``rate_per_ms`` is None) is skipped, and the next flush starts on the first tick after
    the next commit, on the grid. Off-grid phases in 128 bins, S on 500 quantile points.

    Returns (phi, V, stationary chance of each phase, S points, their weights)."""
    i = interval_ms
    m = _PHASE_BINS
    phi = np.concatenate([[0.0], (np.arange(m) + 0.5) * i / m])
    wait = np.where(phi > 0, i - phi, i)
    s = np.asarray(flush.quantile(_PHASE_U), dtype=float)
    w = _PHASE_W
    late = s[None, :] > wait[:, None]
    to = np.where(late, 1 + np.minimum((np.mod(phi[:, None] + s[None, :], i) / i * m)
                                      .astype(int), m - 1), 0)
    if rate_per_ms is None:
        empty = np.zeros(to.shape)
    else:
        empty = np.exp(-rate_per_ms * np.maximum(wait[:, None], s[None, :]))
    p = np.zeros((m + 1, m + 1))
    for j in range(m + 1):
        p[j] = np.bincount(to[j], weights=w * (1 - empty[j]), minlength=m + 1)
        p[j, 0] += float(w @ empty[j])
    a = p.T - np.eye(m + 1)
    a[-1, :] = 1.0
    rhs = np.zeros(m + 1)
    rhs[-1] = 1.0
    pi = np.clip(np.linalg.solve(a, rhs), 0.0, None)
    return phi, wait, pi / pi.sum(), s, w


def _starts(interval_ms: float, flush: L.Latency,
            rate_per_ms: float) -> tuple[L.Latency, float, float]:
    """(a commit's wait for the next flush start (ms), the mean gap between flush starts
    (ms), the share of ticks skipped for an empty buffer), by ``_phase_chain``.

    A commit waits for the next candidate start (the flush after it will not be skipped: it
    holds this commit). Candidates follow each flush start after max(V, S); when skipped,
    the next tick comes T1 later (I after a tick, I - phi' after a late flush's end at
    phase phi') and then every I until a commit has arrived. The wait from a random instant
    is uniform over the stretch between candidates it falls in, each stretch weighted by
    its length (renewal reward)."""
    i, lam = interval_ms, rate_per_ms
    if float(flush.sf(i)) < 1e-9:
        # every flush ends before the next tick: every stretch between turns is I, and a
        # flush starts on the first tick after a commit arrives (gap I (1 + geometric))
        skipped = float(np.exp(-lam * i))
        return L.Uniform0(i), i / -np.expm1(-lam * i), skipped
    phi, wait, pi, s, w = _phase_chain(i, flush, lam)
    g = np.maximum(wait[:, None], s[None, :])
    late = s[None, :] > wait[:, None]
    after = np.mod(phi[:, None] + s[None, :], i)
    t1 = np.where(late & (after > 0), i - after, i)
    empty = np.exp(-lam * g)
    # full ticks after the first one: N = 0 if a commit comes within T1, else 1 + geometric
    more = np.exp(-lam * t1) / -np.expm1(-lam * i)
    weight = pi[:, None] * w[None, :]
    cycle = float((weight * (g + empty * (t1 + i * more))).sum())
    stretch = np.concatenate([g.ravel(), t1.ravel(), [i]])
    share = np.concatenate([(weight * g).ravel(), (weight * empty * t1).ravel(),
                            [float((weight * empty * more).sum()) * i]])
    share = share / share.sum()
    x = np.concatenate([np.linspace(0.0, i, 1025)[:-1],
                        np.geomspace(i, max(float(stretch.max()), i * 1.001), 1024)])
    to_start = L.GridLatency(x, _uniforms_cdf(x, share, np.zeros_like(stretch), stretch),
                             float(share @ stretch) / 2, float(share @ stretch**2) / 3,
                             label="wait for the next flush start")
    skipped = float((weight * empty).sum())
    return to_start, cycle, skipped


def tick_phase(interval_ms: float, flush: L.Latency,
               points: int) -> tuple[np.ndarray, float] | None:
    """(the wait V from an off-grid flush start to the next tick at ``points`` equally likely
    quantiles, the chance that a start is off the grid) from ``_phase_chain`` without empty
    ticks; None when flushes outlast the interval with chance under 1e-9."""
    i = interval_ms
    if float(flush.sf(i)) < 1e-9:
        return None
    _, _, pi, _, _ = _phase_chain(i, flush, None)
    p_off = float(1.0 - pi[0])
    if p_off < 1e-12:
        return None
    # off-grid waits: bin j holds V uniformly in [I - (j + 1) I / m, I - j I / m]
    m = _PHASE_BINS
    cdf = np.concatenate([[0.0], np.cumsum(pi[1:][::-1])]) / p_off
    edges = np.arange(m + 1) * i / m
    u = (np.arange(points) + 0.5) / points
    return np.interp(u, cdf, edges), p_off


# probability points of a stall's duration law, dense in the upper tail, and their weights
_U_STALL = np.concatenate([np.linspace(0.0, 0.9, 181)[1:-1], np.linspace(0.9, 0.99, 91)[:-1],
                           np.linspace(0.99, 0.99999, 100)])
_W_STALL = np.diff(np.concatenate([[0.0], (_U_STALL[1:] + _U_STALL[:-1]) / 2, [1.0]]))


def _stall_points(d: L.Latency) -> tuple[np.ndarray, np.ndarray]:
    """Quadrature of the length-biased stall (density x f(x) / E[D], the stall a random
    instant falls in): points (ms) and weights, dense in the upper tail."""
    x = np.asarray(d.quantile(_U_STALL), dtype=float)
    w = _W_STALL * x
    return x, w / w.sum()


def _uniforms_cdf(x: np.ndarray, w: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """cdf at x of the mixture sum_j w_j U(lo_j, hi_j) (weights summing to 1), exactly:
    sum_j w_j ((x - lo_j)+ - (x - hi_j)+) / (hi_j - lo_j), by sorted knots and running sums
    (parts narrower than 1e-9 ms count as point masses at lo_j)."""
    width = hi - lo
    point = width < 1e-9
    slope = np.where(point, 0.0, w / np.where(point, 1.0, width))
    knots = np.concatenate([lo, hi])
    c = np.concatenate([slope, -slope])
    order = np.argsort(knots, kind="stable")
    knots, c = knots[order], c[order]
    cum_c = np.concatenate([[0.0], np.cumsum(c)])
    cum_ct = np.concatenate([[0.0], np.cumsum(c * knots)])
    k = np.searchsorted(knots, x, side="right")
    out = x * cum_c[k] - cum_ct[k]
    if point.any():
        p_order = np.argsort(lo[point])
        p_at, p_w = lo[point][p_order], np.cumsum(w[point][p_order])
        j = np.searchsorted(p_at, x, side="right")
        out = out + np.where(j > 0, p_w[np.maximum(j - 1, 0)], 0.0)
    return np.clip(out, 0.0, 1.0)


def caught_by_stall(d: L.Latency, stall_rate_per_ms: float, interval_ms: float,
                    flush: L.Latency) -> tuple[float, L.Latency]:
    """Share of the commits acknowledged outside a stall whose flush a stall holds, and
    their window to durable (ms).

    A commit waits u ~ U(0, I) for its tick and then its flush S. A stall starting a' before
    the tick and lasting D > a' holds that flush until it ends: the commit arrived v before
    the stall (v ~ U(0, I - a'), a' with density 2 (I - a') / I^2) and is durable v + D + S
    after its acknowledgement. A stall starting during the flush holds it too (chance about
    rate x E[S]): durable u + D + S. Poisson stall starts; one stall per commit at most.
    """
    i = interval_ms
    dur = np.asarray(d.quantile(_U_STALL), dtype=float)
    w_d = _W_STALL
    k = 48
    lead = (np.arange(k) + 0.5) / k * i  # a', the stall's start before the tick
    w_lead = np.full(k, i / k) * (i - lead) / i  # the chance of a stall there, over the rate
    dd = np.repeat(dur, k)
    aa = np.tile(lead, dur.size)
    w = np.repeat(w_d, k) * np.tile(w_lead, dur.size) * (dd > aa)
    share_before = stall_rate_per_ms * float(w.sum())
    share_during = stall_rate_per_ms * flush.mean_ms
    total = share_before + share_during
    if total <= 0:
        return 0.0, flush
    x = np.linspace(0.0, float(dur.max()) + i, 4097)
    keep = w > 0
    w, lo, width = w[keep], dd[keep], (i - aa)[keep]
    tot = w.sum()
    hi = lo + width
    before = L.GridLatency(x, _uniforms_cdf(x, w / tot, lo, hi), float(w @ (lo + hi)) / (2 * tot),
                           float(w @ (lo**2 + lo * hi + hi**2)) / (3 * tot),
                           label="caught by a stall")
    during = L.convolve(L.Uniform0(i), d)
    held = L.mixture([share_before, share_during], [before, during])
    return min(total, 0.5), L.convolve(held, flush)


def stalled_windows(d: L.Latency, interval_ms: float, flush: L.Latency,
                    pile: L.Latency) -> tuple[L.Latency, L.Latency, float]:
    """Exposure windows of a commit acknowledged while the device is stalled: (to the start
    of the flush that takes it, to that flush's completion, in ms; and the share of stalled
    time in which a flush is already held, P(a < E)).

    The commit falls at a uniform point of a length-biased stall L (age E, E + R = L; Cox,
    Renewal Theory, 1962, the inspection paradox); the first flush tick after the stall
    began comes a ~ U(0, I) later. With one flush at a time:
    a < E  the tick's flush is already held by the stall: the commit's flush starts when
           that one completes, R + S, and is durable after its own flush of the pile, + S';
    E <= a < L  the commit goes into the tick's flush at a - E, durable when it ends, R + S;
    a >= L  the stall is over before the tick: a - E to start, + S to durable.
    """
    length, weight = _stall_points(d)
    v = (np.arange(48) + 0.5) / 48
    big_l = np.repeat(length, v.size)
    w = np.repeat(weight, v.size) / v.size
    age = big_l * np.tile(v, length.size)
    rest = big_l - age
    i = interval_ms
    w_held = w * np.minimum(age, i) / i  # a < E
    w_tick = w * np.clip(np.minimum(big_l, i) - age, 0.0, None) / i  # E <= a < L
    w_late = w * np.clip(i - big_l, 0.0, None) / i  # a >= L: a - E uniform on [R, R + I - L)
    w_free = w * np.clip(i - age, 0.0, None) / i  # a >= E: a - E uniform on [0, I - E)
    top = float(big_l.max()) + i
    x = np.linspace(0.0, top, 4097)

    def points(wt: np.ndarray) -> L.Latency:
        tot = wt.sum()
        cdf = _uniforms_cdf(x, wt / tot, rest, rest)
        return L.GridLatency(x, cdf, float(wt @ rest) / tot, float(wt @ rest**2) / tot,
                             label="held by a stall")

    def uniforms(wt: np.ndarray, lo: np.ndarray, width: np.ndarray) -> L.Latency:
        keep = wt > 0
        wt, lo, width = wt[keep], lo[keep], width[keep]
        tot = wt.sum()
        hi = lo + width
        return L.GridLatency(x, _uniforms_cdf(x, wt / tot, lo, hi),
                             float(wt @ (lo + hi)) / (2 * tot),
                             float(wt @ (lo**2 + lo * hi + hi**2)) / (3 * tot),
                             label="to the tick")

    held = points(w_held)
    parts_start = [(w_held.sum(), L.convolve(held, flush))]
    parts_host = [(w_held.sum(), L.convolve(held, flush, pile))]
    if w_free.sum() > 0:
        parts_start.append((w_free.sum(), uniforms(w_free, np.zeros_like(age), i - age)))
    if w_tick.sum() > 0:
        parts_host.append((w_tick.sum(), L.convolve(points(w_tick), flush)))
    if w_late.sum() > 0:
        late = uniforms(w_late, rest, i - big_l)
        parts_host.append((w_late.sum(), L.convolve(late, flush)))
    start = L.mixture([p[0] for p in parts_start], [p[1] for p in parts_start])
    host = L.mixture([p[0] for p in parts_host], [p[1] for p in parts_host])
    return start, host, float(w_held.sum())
