"""Deferred commit with a log buffer that fills between flushes.

A record holds its space in the buffer (K = buffer_bytes / log_bytes_per_commit records)
from its acknowledgement until the flush that writes it completes; a commit that finds no
space waits, first come first served, for a flush completion to free some (the flush does
not start early because the buffer is full). The writer flushes at the ticks, taking every
acknowledged record.

Model: an embedded chain at flush starts on T, the commits pending then (acknowledged or
waiting). The flush takes a = min(K, T) and b = T - a wait. Over the cycle of length G
(max(I, S) from a start on the tick grid, max(V, S) off it, V from the deferred model's
tick phase), arrivals are Poisson, so T' = b + N(G). A commit that arrives t into the
cycle, with j ~ Poisson(lambda t) arrivals before it:

- during the flush (t < S): acknowledged at once if j < K - a; else, if b + j < K, when
  the flush ends (wait S - t);
- after the flush (t >= S): acknowledged at once if b + j < K;
- otherwise, with m K <= b + j < (m + 1) K, at the end of the m-th flush after this one
  (each of them full): wait G - t, m - 1 full cycles max(I, S_K) and one full flush S_K.

Its window to the flush that takes it is G - t, G - S or (I - S_K)+ in the three cases,
and durable comes one flush later. Arrivals fall uniformly in time (PASTA), so each case is
weighted by its share of the cycle. Approximations: the cycles after a late flush are
taken on the tick grid, the flush after the next one has the mean batch, and the chain's
states beyond K are taken in bins. Checked against the simulator and the simpy model in
tests/reference/test_log_buffer.py.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from commitadvisor import latency as L

__all__ = ["BufferWaits", "buffer_waits", "can_fill"]

# probability points of the flush law (midpoints, denser in the tail) and their weights
_UQ_PARTS = ((0.0, 0.95, 32), (0.95, 0.999, 16), (0.999, 0.99999, 12), (0.99999, 0.9999999, 4))
_UQ = np.concatenate([lo + (hi - lo) * (np.arange(n) + 0.5) / n for lo, hi, n in _UQ_PARTS])
_WQ = np.concatenate([np.full(n, (hi - lo) / n) for lo, hi, n in _UQ_PARTS])
_WQ = _WQ / _WQ.sum()
_T_POINTS = 16  # midpoints in time across each phase of the cycle
_LATE_POINTS = 2  # equally likely late flushes for the off-grid tick phase


@dataclass(frozen=True)
class BufferWaits:
    """What a commit sees when the buffer can fill (times in ms, CPU not included)."""

    blocked_share: float  # commits that wait for buffer space
    ack_wait: L.Latency  # arrival to acknowledgement
    to_start: L.Latency  # acknowledgement to the start of the flush that takes it
    window_host: L.Latency  # acknowledgement to durable
    durable_wait: L.Latency  # arrival to durable
    mean_batch: float  # commits a flush takes
    cycle_ms: float  # mean gap between flush starts


class _Histogram:
    """Weighted points on a fixed grid of [0, hi] ms (each point's mass counted at the first
    grid point at or above it), with exact weighted moments."""

    def __init__(self, hi_ms: float, size: int = 8193):
        self.x = np.linspace(0.0, hi_ms, size)
        self.step = hi_ms / (size - 1)
        self.mass = np.zeros(size)
        self.moments = np.zeros(3)

    def add(self, v: np.ndarray, w: np.ndarray) -> None:
        v = np.ravel(v)
        w = np.ravel(np.broadcast_to(w, np.shape(v) if np.ndim(w) == 0 else np.shape(w)))
        at = np.minimum(np.ceil(np.maximum(v, 0.0) / self.step).astype(int), self.x.size - 1)
        self.mass += np.bincount(at, weights=w, minlength=self.x.size)
        self.moments += (w.sum(), w @ v, w @ (v * v))

    @property
    def total(self) -> float:
        return float(self.moments[0])

    def law(self, label: str) -> L.GridLatency:
        t = self.total
        cdf = np.clip(np.cumsum(self.mass) / t, 0.0, 1.0)
        return L.GridLatency(self.x, cdf, float(self.moments[1] / t),
                             float(self.moments[2] / t), label=label)


def _poisson_sf(j: int, mean: np.ndarray) -> np.ndarray:
    """P(Poisson(mean) > j)."""
    from scipy.special import pdtrc

    return pdtrc(j, mean) if j >= 0 else np.ones_like(mean)


def _poisson_pmf(n: np.ndarray, mean: np.ndarray) -> np.ndarray:
    from scipy.special import gammaln, xlogy

    return np.exp(xlogy(n, mean) - mean - gammaln(n + 1))


def can_fill(rate_per_ms: float, interval_ms: float, bound: int, flush_for) -> bool:
    """Whether the buffer can fill with a chance worth modelling: at least 1e-6 that the
    arrivals over two of the longest cycles reach the bound."""
    g_hi = max(interval_ms, float(flush_for(bound).quantile(0.9999)))
    return float(_poisson_sf(bound - 1, np.array(rate_per_ms * 2 * g_hi))) >= 1e-6


def _coarse_states(pi: np.ndarray, k: int) -> list[tuple[int, int, float]]:
    """(a, b, chance) of the chain's states, all but 1e-9 of its mass: T <= K one by one
    (b = 0), T > K in bins of width ceil(K / 8) at their mean b (the chance a position is
    past m K moves smoothly with b)."""
    out = [(t, 0, float(pi[t])) for t in range(min(k, pi.size - 1) + 1) if pi[t] > 1e-12]
    width = max(1, -(-k // 8))
    tail = pi[k + 1:]
    for lo in range(0, tail.size, width):
        w = tail[lo: lo + width]
        mass = float(w.sum())
        if mass > 1e-9:
            b = 1 + lo + float(np.arange(w.size) @ w) / mass
            out.append((k, int(round(b)), mass))
    return out


def buffer_waits(rate_per_ms: float, interval_ms: float, bound: int, flush_for,
                 tick_phase) -> BufferWaits:
    """The waits of deferred commit with a buffer of ``bound`` records (module docstring);
    ``flush_for(a)`` is the flush law for a batch of a commits, ``tick_phase(flush,
    points)`` the off-grid waits V and the chance of an off-grid start (None when flushes
    do not outlast the interval)."""
    lam, i, k = rate_per_ms, interval_ms, int(bound)
    phase = tick_phase(flush_for(max(lam * i, 1.0)), _LATE_POINTS)
    if phase is None:
        v_all, v_w = np.array([i]), np.array([1.0])
    else:
        v, p_off = phase
        v_all = np.concatenate([[i], v])
        v_w = np.concatenate([[1 - p_off], np.full(v.size, p_off / v.size)])
    wq = np.outer(v_w, _WQ).ravel()  # weight of each (tick phase, flush point) pair
    vv = np.repeat(v_all, _WQ.size)
    cache: dict[int, np.ndarray] = {}
    step = max(1, -(-k // 64))  # batch sizes taken in steps of k / 64 for the flush length

    def flush_points(a: int) -> np.ndarray:
        a = min(k, max(1, step * round(a / step)))
        if a not in cache:
            cache[a] = np.tile(np.asarray(flush_for(a).quantile(_UQ), dtype=float),
                               v_all.size)
        return cache[a]

    g_hi = max(i, float(flush_points(k).max()))
    mu = lam * g_hi
    top = int(k + mu + 12 * np.sqrt(mu) + 20)
    # transition T -> b + N(G): the law of N depends on a only through the flush length
    p = np.zeros((top + 1, top + 1))
    n = np.arange(top + 1)
    arrivals: dict[int, np.ndarray] = {}
    for t_state in range(top + 1):
        a = min(k, t_state)
        b = t_state - a
        if t_state <= k:
            key = min(k, max(1, step * round(a / step)))
            if key not in arrivals:
                g = np.maximum(vv, flush_points(a))
                arrivals[key] = _poisson_pmf(n[:, None], lam * g[None, :]) @ wq
            pm = arrivals[key]
        row = pm[: top + 1 - b]
        p[t_state, b:] = row
        p[t_state, -1] += max(0.0, 1.0 - row.sum())
    # stationary law: solve pi (P - I) = 0 with sum(pi) = 1
    m = p.T - np.eye(top + 1)
    m[-1, :] = 1.0
    rhs = np.zeros(top + 1)
    rhs[-1] = 1.0
    pi = np.clip(np.linalg.solve(m, rhs), 0.0, None)
    pi /= pi.sum()

    states = np.arange(top + 1)
    batch = float(pi @ np.minimum(states, k))
    next_flush = flush_for(max(batch, 1.0))
    u = (np.arange(_T_POINTS) + 0.5) / _T_POINTS
    full = flush_for(k)  # a commit that waits for later flushes finds each of them full
    # the later flushes' cycle: max(I, S) (on the tick grid, an approximation after a late one)
    full_cycle = L.maximum(L.Fixed(i), full)
    hi = max(i, float(flush_points(k).max()), float(vv.max()))
    free, at_end, win_end, to_start_now = (_Histogram(hi) for _ in range(4))
    later: list[_Histogram] = []  # G - t for each count m >= 1 of later flushes waited for
    cycle = 0.0
    for a, b, weight_t in _coarse_states(pi, k):
        s = flush_points(a)
        g = np.maximum(vv, s)
        w0 = weight_t * wq[:, None] / _T_POINTS
        cycle += weight_t * float(wq @ g)
        t1 = s[:, None] * u[None, :]  # during the flush
        rest = g - s
        t2 = s[:, None] + rest[:, None] * u[None, :]  # after it, to the next start
        w1, w2 = w0 * s[:, None], w0 * rest[:, None]
        lam_t = np.stack([lam * t1, lam * t2])
        to_next = np.stack([g[:, None] - t1, g[:, None] - t2])
        weight = np.stack([w1, w2])
        blocked = _poisson_sf(k - a - 1, lam * t1)
        previous = _poisson_sf(k - b - 1, lam_t)
        free.add(g[:, None] - t1, w1 * (1 - blocked))
        free.add(g[:, None] - t2, w2 * (1 - previous[1]))
        at_end.add(s[:, None] - t1, w1 * (blocked - previous[0]))
        win_end.add(np.broadcast_to(g[:, None] - s[:, None], t1.shape),
                    w1 * (blocked - previous[0]))
        to_start_now.add(g[:, None] - t1, w1 * (1 - previous[0]))
        to_start_now.add(g[:, None] - t2, w2 * (1 - previous[1]))
        # pending position b + j in [m K, (m + 1) K): m later flushes to wait for; the
        # last m kept takes what is left once under 1e-9 of this state's weight
        m = 1
        while (weight * previous).sum() > 1e-9 * weight_t:
            beyond = _poisson_sf(int((m + 1) * k - b - 1), lam_t)
            if (weight * beyond).sum() <= 1e-9 * weight_t:
                beyond = np.zeros_like(beyond)
            if len(later) < m:
                later.append(_Histogram(hi))
            if (m + 1) * k - b - 1 >= 0:  # below that, every position is past m K
                later[m - 1].add(to_next, weight * (previous - beyond))
            previous = beyond
            m += 1

    # counts of later flushes below 1e-7 of the commits join the count before them
    while len(later) > 1 and later[-1].total < 1e-7 * sum(h.total for h in later):
        last = later.pop()
        later[-1].mass += last.mass
        later[-1].moments += last.moments
    later = [h for h in later if h.total > 1e-12]
    total = free.total + at_end.total + sum(h.total for h in later)
    # acknowledged at the end of a later (full) flush S: then to the tick after it, (I - S)+
    q = np.asarray(full.quantile(_UQ), dtype=float)
    after_full = L.from_points(np.maximum(i - q, 0.0), _WQ, "to the tick after a flush")
    weights = [free.total / total]
    ack_laws: list[L.Latency] = [L.Fixed(0.0)]
    start_laws: list[L.Latency] = [free.law("to the next flush start")]
    durable_w = [(free.total + at_end.total) / total]
    durable_laws = [L.convolve(to_start_now.law("to the next flush start"), next_flush)]
    if at_end.total > 1e-12:
        weights.append(at_end.total / total)
        ack_laws.append(at_end.law("for the flush to end"))
        start_laws.append(win_end.law("after the flush that freed space"))
    between: L.Latency = L.Fixed(0.0)  # m - 1 full cycles
    for h in later:
        to_next = h.law("to the next flush start, waiting")
        weights.append(h.total / total)
        ack_laws.append(L.convolve(to_next, between, full))
        start_laws.append(after_full)
        durable_w.append(h.total / total)
        durable_laws.append(L.convolve(to_next, between, full_cycle, next_flush))
        between = L.convolve(between, full_cycle)
    ack = L.mixture(weights, ack_laws)
    to_start = L.mixture(weights, start_laws)
    window_host = L.convolve(to_start, next_flush)
    durable = L.mixture(durable_w, durable_laws)
    blocked_share = 1.0 - weights[0]
    return BufferWaits(blocked_share, ack, to_start, window_host, durable, batch, cycle)
