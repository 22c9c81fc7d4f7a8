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
from commitadvisor.strategies.context import (
    RegimeContext,
    busy_with_stalls,
    flushes_with_stalls,
    stall_mixture,
)
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
    def _reach_ms(self) -> float:
        """Where the integrand ends: the cap, or where the base is all but certainly over."""
        return float(min(self.cap_ms, self.base.quantile(1 - 1e-12)))

    @property
    def mean_ms(self) -> float:
        x = np.linspace(0, self._reach_ms, 1025)
        sf = self.base.sf(x)
        return float(np.sum(np.diff(x) * (sf[1:] + sf[:-1]) / 2))

    @property
    def second_moment_ms2(self) -> float:
        x = np.linspace(0, self._reach_ms, 1025)
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

        # in lock step all N sessions arrive together: the target is met at once, or the
        # window runs out on all of them
        wait = 0.0 if ctx.sessions >= s.gather_target_commits else s.gather_window_ms
        return closed_result(ctx, dev, chain, device_exposures(dev), lock_step_wait_ms=wait)
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
    in_first = _arrival_in_gathering(lam, np.array([window]), np.array([k - 1]),
                                     np.array([1.0]), window)
    in_after = _arrival_in_gathering(lam, *_states_after_flush(flush, lam, k, window), window)
    # every commit then waits the flush that takes it, independent of what came before:
    # one convolution of the mixed wait with the flush
    waits = [gather, in_first, in_after if after.mean_ms > 0 else L.Fixed(0.0),
             _wait_from_flush_arrival(flush, lam, k, window)]
    resp = L.convolve(L.mixture(shares, waits), flush)
    busy = flush.mean_ms / cycle
    flushes = 1.0 / cycle
    resp, stalled = stall_mixture(resp, dev, lam, ctx.log_bytes, flush, busy)
    if stalled:
        flushes = flushes_with_stalls(flushes, dev)
        batch = lam / flushes
        busy = busy_with_stalls(busy, dev)
        notes.append(f"{dev.name} is stalled {stalled:.1%} of the time; folded in as a "
                     "time-based event (quasi-static approximation)")
    ack = L.add_constant(L.convolve(cpu, resp), ctx.wake_cost(batch))
    return assemble(ctx.regime, ctx.time_share, Partial(
        ack=ack, durable=ack if dev.device.counts_as_durable else None,
        throughput_per_ms=lam, exposures=device_exposures(dev),
        flushes_per_ms=((dev.name, flushes),), mean_batch=batch,
        writer_busy=busy,
        cpu_busy=(lam * ctx.cpu_ms_per_commit / ctx.cpus) if ctx.cpus else None,
        copies_at_ack=1 if dev.device.counts_as_durable else 0, notes=tuple(notes)))


_U_FLUSH = np.concatenate([np.linspace(0.0, 0.9, 73)[1:-1], np.linspace(0.9, 0.99, 37)[:-1],
                           np.linspace(0.99, 0.9999, 24)])
_W_FLUSH = np.diff(np.concatenate([[0.0], (_U_FLUSH[1:] + _U_FLUSH[:-1]) / 2, [1.0]]))


def _gather_after_flush(flush: L.Latency, lam: float, k: int, window: float) -> L.Latency:
    """What is left of the gathering when a flush of length S ends with n >= 1 commits
    pending (ms). The oldest pending commit joined at t1, the first of n uniform points of
    the flush, so the window has R = t1 + window - S left, P(R > x) = min(1, (window - x)/S)^n;
    the target is reached after Gamma(k - n, lambda) more, or at once when n >= k:
    P(G' > x) = P(R > x) P(Gamma > x), averaged over S and n ~ Poisson(lambda S) given n >= 1."""
    from scipy.special import pdtr
    from scipy.stats import poisson

    s = np.maximum(np.asarray(flush.quantile(_U_FLUSH), dtype=float), 1e-12)
    x = np.linspace(0.0, _gather_span(lam, k, window), 257)
    # pending commits at the flush's end below the target (beyond kk: chance under 1e-12)
    n = np.arange(1, _counts_needed(lam, float(s.max()), k))
    seen = -np.expm1(-lam * s)  # the flush saw at least one arrival
    pn = poisson.pmf(n[None, :], lam * s[:, None]) / seen[:, None]
    w = _W_FLUSH * seen
    w = w / w.sum()
    left = np.clip((window - x)[None, :] / s[:, None], 0.0, 1.0)  # (S, x)
    target = pdtr((k - n - 1)[:, None], lam * x[None, :])  # P(Gamma(k - n) > x), (n, x)
    sf = np.einsum("s,sn,snx,nx->x", w, pn, left[:, None, :] ** n[None, :, None], target)
    return _from_sf(x, sf, "rest of gathering", ends=True)


def _from_sf(x: np.ndarray, sf: np.ndarray, label: str, ends: bool) -> L.Latency:
    """A law from its survival function on the grid x (ms): moments by the trapezoid rule,
    E[X] = integral of sf, E[X^2] = integral of 2 x sf; ``ends``: nothing lies beyond x."""
    sf = np.clip(sf, 0.0, 1.0)
    cdf = np.maximum.accumulate(1.0 - sf)
    if ends:
        cdf[-1] = 1.0
    mean = float(np.sum(np.diff(x) * (sf[1:] + sf[:-1]) / 2))
    g = 2 * x * sf
    second = float(np.sum(np.diff(x) * (g[1:] + g[:-1]) / 2))
    if mean <= 1e-12:
        return L.Fixed(0.0)
    return L.GridLatency(x, cdf, mean, second, label=label)


def _arrival_in_gathering(lam: float, left_ms: np.ndarray, need: np.ndarray,
                          weight: np.ndarray, window: float) -> L.Latency:
    """From a commit's arrival during a gathering to the flush's start (ms).

    A gathering that began with ``left_ms`` of window and ``need`` commits still to come
    before the target (chance ``weight`` per gathering) ends at min(left, the need-th arrival).
    A commit arriving b into it, after j others, brings the count to j + 1 itself, so what
    is left is min(left - b, Gamma(need - j - 1, lambda)). Weighting each state by the time
    spent in it (PASTA) and summing over j, with A ~ Poisson(lambda b), B ~ Poisson(lambda x):
    P(rest > x) is proportional to the integral over b < left - x of
    P(A + B <= need - 2) = P(Poisson(lambda (b + x)) <= need - 2), so
    P(rest > x) = sum_i w_i [F_{need_i}(left_i) - F_{need_i}(x)]+ / sum_i w_i G_{need_i}(left_i)
    with F_m(t) = E[min(Poisson(lambda t), m - 1)] / lambda and G_m = F_{m+1} (the time spent
    gathering)."""
    from scipy.special import pdtrc

    x = np.linspace(0.0, _gather_span(lam, int(need.max()) + 1, window), 257)
    cap = _counts_needed(lam, window, int(need.max()) + 1)
    i = np.arange(cap + 1)
    # running sums of P(Poisson(lambda t) > i): S[q] = E[min(N, q + 1)]
    tail = np.cumsum(pdtrc(i[:, None], lam * x[None, :]), axis=0)  # (q, x)

    keep = weight > 0
    left_ms, need, weight = left_ms[keep], need[keep], weight[keep]
    col_left = np.clip(np.searchsorted(x, left_ms), 0, x.size - 1)
    q = np.clip(need - 2, -1, cap)
    f_left = np.where(q >= 0, tail[np.maximum(q, 0), col_left], 0.0) / lam
    f_x = np.where(q[:, None] >= 0, tail[np.maximum(q, 0)], 0.0) / lam  # (state, x)
    g_left = tail[np.clip(need - 1, 0, cap), col_left] / lam
    norm = float(weight @ g_left)
    if norm <= 0:
        return L.Fixed(0.0)
    body = np.where(x[None, :] < left_ms[:, None], f_left[:, None] - f_x, 0.0)
    return _from_sf(x, weight @ body / norm, "rest of gathering, seen on arrival", ends=True)


def _states_after_flush(flush: L.Latency, lam: float, k: int, window: float):
    """Window left and commits still needed when a flush ends with 1 <= n < k pending, as
    (left_ms, need, chance) arrays: R = t1 + window - S with P(R > x) = min(1, (window-x)/S)^n
    (see _gather_after_flush), n ~ Poisson(lambda S) given n >= 1."""
    from scipy.stats import poisson

    s = np.maximum(np.asarray(flush.quantile(_U_FLUSH), dtype=float), 1e-12)
    w = _W_FLUSH * -np.expm1(-lam * s)
    w = w / w.sum()
    n = np.arange(1, _counts_needed(lam, float(s.max()), k))
    pn = poisson.pmf(n[None, :], lam * s[:, None]) / -np.expm1(-lam * s)[:, None]
    x = np.linspace(0.0, _gather_span(lam, k, window), 129)
    above = np.clip((window - x)[None, :] / s[:, None], 0.0, 1.0)  # (S, x)
    sf = above[:, None, :] ** n[None, :, None]  # (S, n, x): P(R > x)
    mass = np.concatenate([1.0 - sf[:, :, :1], sf[:, :, :-1] - sf[:, :, 1:]], axis=2)
    mass[:, :, -1] += sf[:, :, -1]  # a window left beyond the span acts as the span
    joint = np.einsum("s,sn,snx->nx", w, pn, mass)  # (n, x)
    mid = np.concatenate([[0.0], (x[1:] + x[:-1]) / 2])
    mid[-1] = x[-1]
    left = np.broadcast_to(mid[None, :], joint.shape).ravel()
    need = np.broadcast_to((k - n)[:, None], joint.shape).ravel()
    return left, need, joint.ravel()


def _gather_span(lam: float, k: int, window: float) -> float:
    """The longest a gathering can matter (ms): the window, or where k - 1 arrivals are
    all but certain to have come (Gamma(k - 1, lambda) beyond it has chance 1e-12)."""
    from scipy.stats import gamma

    return float(min(window, gamma.isf(1e-12, max(k - 1, 1), scale=1.0 / lam)))


def _counts_needed(lam: float, longest_ms: float, k: int) -> int:
    """How many arrivals in ``longest_ms`` have a chance above 1e-12 (at most k)."""
    from scipy.stats import poisson

    return int(min(k, max(2, poisson.isf(1e-12, lam * longest_ms) + 2)))


def _wait_from_flush_arrival(flush: L.Latency, lam: float, k: int, window: float) -> L.Latency:
    """From a commit's arrival during a flush to the start of the flush that takes it (ms).

    The commit lands at y in a length-biased flush of length S, so r = S - y of it is left;
    m1 ~ Poisson(lambda y) commits joined before it (the oldest e = y - t1 earlier, with
    P(e < z) = (z / y)^m1) and m2 ~ Poisson(lambda r) after it. The next flush starts at the
    later of the flush's end and the oldest's window running out, or once the target is
    pending: D = min(max(r, window - e), r + Gamma(k - n, lambda)) with n = 1 + m1 + m2 (D = r
    when n >= k). P(D > x) = P(max(r, window - e) > x) P(r + Gamma > x), given the counts."""
    from scipy.stats import poisson

    u_s = _U_FLUSH
    s = np.maximum(np.asarray(flush.quantile(u_s), dtype=float), 1e-12)
    w_s = np.diff(np.concatenate([[0.0], (u_s[1:] + u_s[:-1]) / 2, [1.0]])) * s
    v = (np.arange(8) + 0.5) / 8
    big_s = np.repeat(s, v.size)
    w = np.repeat(w_s, v.size) / w_s.sum() / v.size
    y = big_s * np.tile(v, s.size)
    r = big_s - y
    span = _gather_span(lam, k, window)
    top = max(float(big_s.max()), span)
    x = np.unique(np.concatenate([np.linspace(0.0, span, 129), np.linspace(0.0, top, 257)]))
    # counts beyond kk have a chance under 1e-12: the last row and column stand for them
    kk = _counts_needed(lam, float(big_s.max()), k)
    m1 = np.arange(kk)  # commits before it; the last row stands for kk - 1 or more
    n = np.arange(1, kk + 1)  # pending at the end; the last column stands for kk or more
    p1 = poisson.pmf(m1[None, :], lam * y[:, None])
    p1[:, -1] = poisson.sf(kk - 2, lam * y)
    # P(m2 = n - 1 - m1), the last column P(m2 >= k - 1 - m1)
    d = n[None, :] - 1 - m1[:, None]  # (m1, n)
    p2 = poisson.pmf(d[None, :, :], lam * r[:, None, None])
    p2[:, :, -1] = poisson.sf(d[None, :, -1] - 1, lam * r[:, None])
    p2 = np.where(d[None, :, :] >= 0, p2, 0.0)
    z = lam * np.clip(x[None, :] - r[:, None], 0.0, None)  # (pair, x)
    below = x[None, :] < r[:, None]
    # P(Gamma(j, lambda) > t) = P(Poisson(lambda t) <= j - 1), by running sums of the terms
    b = np.empty((z.shape[0], kk, z.shape[1]))
    if kk == k:
        term = np.exp(-z)
        gamma_sf = np.empty((k,) + z.shape)  # index j - 1 for j = 1..k-1; the last unused
        gamma_sf[0] = term
        for i in range(1, k):
            term = term * z / i
            gamma_sf[i] = gamma_sf[i - 1] + term
        for j, nn in enumerate(n[:-1]):  # k - n more arrivals reach the target
            b[:, j, :] = np.where(below, 1.0, gamma_sf[k - nn - 1])
    else:  # a far target: few orders are needed, each straight from the Poisson cdf
        from scipy.special import pdtr

        for j, nn in enumerate(n[:-1]):
            b[:, j, :] = np.where(below, 1.0, pdtr(k - nn - 1, z))
    b[:, -1, :] = below
    c = np.matmul(p2, b)  # (pair, m1, x)
    frac = np.clip((window - x)[None, :] / y[:, None], 0.0, 1.0)  # (pair, x)
    a = np.empty_like(c)
    a[:, 0, :] = window > x
    power = np.ones_like(frac)
    for j in range(1, kk):
        power = power * frac
        a[:, j, :] = power
    np.maximum(a, below[:, None, :], out=a)
    a *= c
    sf = (w[:, None] * p1).reshape(-1) @ a.reshape(-1, x.size)
    return _from_sf(x, sf, "to the next flush", ends=False)


def _cycle(dev, ctx: RegimeContext, lam: float, k: int, window: float):
    """Gathering, flush and cycle at rate lam (fixed point on the batch's transfer time)."""
    gather = Capped(L.Gamma(k - 1, 1.0 / lam), window)
    batch = 1.0 + lam * gather.mean_ms
    extra = None
    for _ in range(6):
        flush = dev.flush(batch, ctx.log_bytes)
        if extra is not None and abs(flush.mean_ms - extra) <= 1e-9 * flush.mean_ms:
            break  # the batch no longer changes the flush: the fixed point is reached
        extra = flush.mean_ms
        p0 = flush.laplace(lam)
        after = _gather_after_flush(flush, lam, k, window)
        cycle = p0 * (1.0 / lam + gather.mean_ms) + (1 - p0) * after.mean_ms + flush.mean_ms
        batch = lam * cycle
    return gather, flush, p0, after, cycle, batch


