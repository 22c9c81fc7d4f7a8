"""The log writer as a queue: natural group commit, one flush per commit, closed sessions.

All times in ms, rates in commits per ms inside the functions unless a name says ``_per_s``.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from commitadvisor import latency as L

__all__ = [
    "FiniteSourceCpu",
    "finite_source_cpu",
    "OpenGroupCommit",
    "open_group_commit",
    "one_flush_per_commit",
    "ClosedGroupCommit",
    "closed_group_commit",
    "geometric_sum",
]


@dataclass(frozen=True)
class OpenGroupCommit:
    """Natural group commit under Poisson arrivals (one writer, unlimited batch).

    ``response`` is built on first use (a grid convolution): callers that iterate on the
    mean batch and keep only the last law pay for one.
    """

    flush: L.Latency  # the flush-time law the writer was evaluated with
    idle_chance: float  # p = E[exp(-lambda S)]: no commit arrives during a flush
    writer_busy: float  # rho_w, the writer's busy share
    flushes_per_ms: float
    mean_batch: float

    @cached_property
    def response(self) -> L.Latency:
        """Commit wait (ms) from arrival at the writer to the flush's completion:
        S w.p. 1 - rho_w, R + S' w.p. rho_w (see ``open_group_commit``)."""
        rho = self.writer_busy
        waiting = L.convolve(L.residual(self.flush), self.flush)
        return L.mixture([1.0 - rho, rho], [self.flush, waiting])


def open_group_commit(flush: L.Latency, rate_per_ms: float) -> OpenGroupCommit:
    """Commit response law of natural group commit with Poisson arrivals.

    One writer; a commit arriving at an idle writer starts a flush at once; commits arriving
    during a flush go into the next one. With S independent of batch size, a busy run holds a
    geometric number of flushes with success chance p = E[exp(-lambda S)] (Wald: E[busy] =
    E[S]/p); the busy share is rho_w = (E[S]/p) / (1/lambda + E[S]/p); by PASTA a commit finds
    the writer busy with chance rho_w and then waits the equilibrium residual of the flush in
    progress and one whole flush: T = S w.p. 1 - rho_w, T = R + S' w.p. rho_w, so
    E[T] = E[S] + rho_w E[S^2] / (2 E[S]) (the inspection paradox; Kleinrock, Queueing
    Systems vol. 1, 1975, section 5.2 for the residual). The deterministic special case gives
    E[T] = F (1.5 x + e^-x) / (x + e^-x), x = lambda F (commitadvisor's CHECKS values).
    """
    es = flush.mean_ms
    p = flush.laplace(rate_per_ms)
    busy_run = es / p
    rho = busy_run / (1.0 / rate_per_ms + busy_run)
    flushes = (1.0 / p) / (1.0 / rate_per_ms + busy_run)
    return OpenGroupCommit(flush, p, rho, flushes, rate_per_ms / flushes)


def geometric_sum(part: L.Latency, rho: float) -> L.Latency:
    """Sum of N copies of ``part``, P(N = n) = (1 - rho) rho^n (an atom at 0 of 1 - rho).

    The M/G/1 waiting time is this sum with ``part`` the equilibrium residual of the
    service time (the Pollaczek-Khinchine formula in its Benes form; Kleinrock 1975, 5.7).
    Computed on a uniform grid by FFT: the transform is (1 - rho) / (1 - rho phi(w)).
    """
    from scipy.fft import irfft, next_fast_len, rfft

    mean = rho / (1 - rho) * part.mean_ms
    second = (rho / (1 - rho) * part.second_moment_ms2
              + 2 * (rho / (1 - rho)) ** 2 * part.mean_ms**2)
    span = max(float(part.upper_ms), mean * 60 + part.upper_ms * 2)
    n = 1 << 17
    step = span / n
    m = next_fast_len(2 * n)
    edges = (np.arange(m) + 0.5) * step
    masses = np.diff(np.concatenate([[0.0], part.cdf(edges)]))
    phi = rfft(masses, m)
    dist = irfft((1 - rho) / (1 - rho * phi), m)[:n]
    c = np.clip(np.maximum.accumulate(np.cumsum(np.clip(dist, 0, None))), 0.0, 1.0)
    x = (np.arange(n) + 0.5) * step
    x = np.concatenate([[0.0], x])
    c = np.concatenate([[1 - rho], c])
    return L.GridLatency(x, c, mean, second, float(max(0.0, 1 - c[-1])), "M/G/1 wait")


def one_flush_per_commit(flush: L.Latency, rate_per_ms: float) -> L.Latency | None:
    """Sojourn time of an M/G/1 queue: each commit its own flush, first come first served.

    Mean E[T] = E[S] + lambda E[S^2] / (2 (1 - rho)) (Pollaczek-Khinchine; Kleinrock 1975).
    Returns None when rho = lambda E[S] >= 1 (the device cannot keep up).
    """
    rho = rate_per_ms * flush.mean_ms
    if rho >= 1:
        return None
    if rho < 1e-9:
        return flush
    return L.convolve(geometric_sum(L.residual(flush), rho), flush)


# --------------------------------------------------------------------------- closed sessions
@dataclass(frozen=True)
class ClosedGroupCommit:
    throughput_per_ms: float
    response: L.Latency  # from a session's commit to its flush's completion
    mean_response_ms: float  # N / X - Z (Little's law)
    mean_batch: float
    flushes_per_ms: float
    writer_busy: float


def _quadrature(flush: L.Latency, cache: dict | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Nodes (ms) and weights for E[g(S)], dense in the upper tail where rare slow flushes
    live (midpoint rule in probability on [0, .99], [.99, .9999], [.9999, 1 - 1e-8]).
    A shifted profile reuses its base's nodes (``cache`` keyed by the base object)."""
    if isinstance(flush, L.Shifted) and cache is not None:
        key = id(flush.base)
        if key not in cache:
            cache[key] = (flush.base, _quadrature(flush.base))
        s, w = cache[key][1]
        return s + flush.shift_ms, w
    us, ws = [], []
    for lo, hi, n in ((0.0, 0.99, 160), (0.99, 0.9999, 80), (0.9999, 1 - 1e-8, 80)):
        edges = np.linspace(lo, hi, n + 1)
        us.append((edges[:-1] + edges[1:]) / 2)
        ws.append(np.diff(edges))
    u, w = np.concatenate(us), np.concatenate(ws)
    return flush.quantile(u), w / w.sum()


def closed_group_commit(flush_for_batch, sessions: int, think_ms: float) -> ClosedGroupCommit:
    """Natural group commit with N sessions and exponential think time Z: the embedded
    Markov chain at flush completions (commitadvisor DESIGN, item 2).

    State b = the next batch's size. During a flush of duration S each of the N - b thinking
    sessions commits with chance 1 - exp(-S/Z), so the next batch is Binomial(N - b,
    1 - exp(-S/Z)) averaged over S; an empty batch means an idle wait (mean Z/N) and a
    batch of one. Throughput X = E[commits per cycle] / E[cycle]; R = N/X - Z (Little).
    ``flush_for_batch(b)`` gives the flush-time distribution for a batch of b commits.
    """
    n = sessions
    if think_ms <= 0:
        # every session is always waiting: each flush carries all N commits
        f = flush_for_batch(n)
        x = n / f.mean_ms
        return ClosedGroupCommit(x, f, f.mean_ms, float(n), 1 / f.mean_ms, 1.0)
    trans = np.zeros((n + 1, n + 1))
    cycle = np.zeros(n + 1)
    nodes_by_b = {}
    cache: dict = {}
    for b in range(1, n + 1):
        s, w = _quadrature(flush_for_batch(b), cache)
        nodes_by_b[b] = (s, w)
        pi = -np.expm1(-s / think_ms)
        trans[b, : n - b + 1] = _binomial_mixture(w, n - b, pi)
        cycle[b] = float(w @ s)
    trans[0] = trans[1]
    cycle[0] = think_ms / n + cycle[1]
    commits = np.arange(n + 1, dtype=float)
    commits[0] = 1.0
    pi_b = _stationary(trans)
    x = float(pi_b @ commits) / float(pi_b @ cycle)
    mean_r = n / x - think_ms
    busy = float(pi_b @ (cycle - np.where(np.arange(n + 1) == 0, think_ms / n, 0.0))) / float(
        pi_b @ cycle)
    # response law: a commit that arrives during a flush of length s (state b) waits what is
    # left of it (arrival time ~ uniform on the flush, as s << Z) and then the next flush;
    # a commit that ends an idle wait waits one flush of a batch of one.
    w_idle = pi_b[0] * 1.0
    parts_w, parts_s = [], []
    for b in range(1, n + 1):
        s, w = nodes_by_b[b]
        arrivals = (n - b) * -np.expm1(-s / think_ms)
        weight = (pi_b[b] + (pi_b[0] if b == 1 else 0.0)) * w * arrivals
        parts_w.append(weight)
        parts_s.append(s)
    ws, ss = np.concatenate(parts_w), np.concatenate(parts_s)
    total = ws.sum() + w_idle
    mean_batch = float(pi_b @ commits)
    next_flush = flush_for_batch(max(1, int(round(mean_batch))))
    if ws.sum() <= 0:
        response = flush_for_batch(1)
    else:
        left = _time_left(ss, ws / ws.sum(), think_ms)
        response = L.mixture([w_idle / total, ws.sum() / total],
                             [flush_for_batch(1), L.convolve(left, next_flush)])
    return ClosedGroupCommit(x, response, mean_r, mean_batch, float(1 / (pi_b @ cycle)), busy)


def _stationary(trans: np.ndarray) -> np.ndarray:
    """Stationary law of a finite Markov chain: pi P = pi, sum pi = 1.

    By state reduction (the Grassmann-Taksar-Heyman algorithm; Grassmann, Taksar and Heyman,
    Operations Research 33, 1985): only sums of non-negative terms, so no cancellation, and
    no dense LAPACK call (small multithreaded solves are slow on a loaded host)."""
    p = np.array(trans, dtype=float)
    size = p.shape[0]
    for k in range(size - 1, 0, -1):
        out = p[k, :k].sum()
        if not out > 0:
            return _stationary_solve(trans)
        p[:k, k] /= out
        p[:k, :k] += p[:k, k, None] * p[None, k, :k]
    pi = np.zeros(size)
    pi[0] = 1.0
    for k in range(1, size):
        pi[k] = float(pi[:k] @ p[:k, k])
    return pi / pi.sum()


def _stationary_solve(trans: np.ndarray) -> np.ndarray:
    """Stationary law by one linear solve (fallback for a chain that state reduction cannot
    take: a state that never leaves for a lower one)."""
    size = trans.shape[0]
    a = trans.T - np.eye(size)
    a[-1] = 1.0
    rhs = np.zeros(size)
    rhs[-1] = 1.0
    pi = np.clip(np.linalg.solve(a, rhs), 0, None)
    return pi / pi.sum()


_BLOCK = 8  # counts per block of the blocked binomial pmf


def _binomial_blocks(k_count: int, n: int, p: np.ndarray):
    """Blocked Binomial(n, p) pmf of k = 0 .. k_count - 1, one row per p:
    P(k0 + i) = anchor[row, block] * powers[row, i] * comb[block, i], k0 = block * 8.

    The log-gamma form log C(n, k) + k log p + (n - k) log(1 - p) is exponentiated only at
    the anchors k0 (stable at p = 0 and 1); in a block the ratio P(k + 1) / P(k) =
    (n - k) / (k + 1) * p / (1 - p) carries it by multiplications. A block whose anchor
    underflows holds values below ~1e-250, negligible against the total mass. Rows with
    p = 1 are returned separately (``ones``): their mass is all at k = n."""
    from scipy.special import gammaln

    pp = np.asarray(p, dtype=float)
    blocks = -(-k_count // _BLOCK)
    k0 = np.arange(blocks, dtype=float) * _BLOCK
    # log 0 stood in by a huge finite number, so that 0 * log 0 = 0 (a row with p = 0 has
    # all its mass at k = 0)
    with np.errstate(divide="ignore"):
        lp = np.maximum(np.log(pp), -1e300)
        lq = np.maximum(np.log1p(-pp), -1e300)
    logc = gammaln(n + 1.0) - gammaln(k0 + 1.0) - gammaln(np.maximum(n - k0, 0.0) + 1.0)
    anchor = np.multiply.outer(lp, k0)
    anchor += np.multiply.outer(lq, n - k0)
    anchor += logc
    np.exp(anchor, out=anchor)
    i = np.arange(_BLOCK, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(pp < 1.0, pp / (1.0 - pp), 0.0)
    powers = r[:, None] ** i[None, :]
    steps = np.maximum(n - k0[:, None] - i[None, :], 0.0) / (k0[:, None] + i[None, :] + 1.0)
    comb = np.concatenate([np.ones((blocks, 1)), np.cumprod(steps[:, :-1], axis=1)], axis=1)
    ones = pp >= 1.0
    anchor[ones] = 0.0
    return anchor, powers, comb, ones


def _binomial_pmf(k: np.ndarray, n: int, p: np.ndarray) -> np.ndarray:
    """Binomial(n, p) probabilities of k = 0, 1, ..., K - 1 (consecutive, from 0), one row
    per p (blocked form of ``_binomial_blocks``)."""
    size = len(k)
    anchor, powers, comb, ones = _binomial_blocks(size, n, p)
    out = (anchor[:, :, None] * powers[:, None, :] * comb[None, :, :]).reshape(len(ones), -1)
    out = out[:, :size]
    if ones.any():  # p = 1: all the mass at k = n
        out[ones] = (np.asarray(k) == n).astype(float)[None, :]
    return out


def _binomial_mixture(w: np.ndarray, n: int, p: np.ndarray) -> np.ndarray:
    """sum_j w_j P(Binomial(n, p_j) = k) for k = 0 .. n, without forming the pmf rows:
    sum_j w_j anchor_jb r_j^i is one small contraction per block (no BLAS call)."""
    anchor, powers, comb, ones = _binomial_blocks(n + 1, n, p)
    mixed = np.einsum("jb,ji->bi", w[:, None] * anchor, powers) * comb
    out = mixed.reshape(-1)[: n + 1]
    if ones.any():
        out[n] += float(w[ones].sum())
    return out


def _time_left(s: np.ndarray, w: np.ndarray, think_ms: float) -> L.GridLatency:
    """Time left of the flush in progress when a thinking session commits during it.

    Given a flush of length s, a session's exponential clock (mean Z) that rings during it
    rings at t with density proportional to exp(-t/Z) on [0, s]; the time left r = s - t has
    cdf (exp(r/Z) - 1) / (exp(s/Z) - 1). Mixed over the flushes, weighted by arrivals.
    """
    order = np.argsort(s)
    s, w = s[order], w[order]
    # merge nodes into at most 600 groups of similar length to bound the work per point
    starts = np.unique(np.concatenate([[0], np.geomspace(1, len(s), 600).astype(int) - 1]))
    ws = np.add.reduceat(w, starts)
    ss = np.add.reduceat(w * s, starts) / np.maximum(ws, 1e-300)
    keep = ws > 0
    ss, ws = ss[keep], ws[keep]
    x = np.concatenate([[0.0], np.geomspace(max(ss[0], 1e-6) * 1e-4, ss[-1], 1500)])
    z = think_ms
    # flushes shorter than x contribute their whole weight; each longer one contributes
    # w (e^{x/Z} - 1) / (e^{s/Z} - 1) = e^{x/Z} (1 - e^{-x/Z}) w e^{-s/Z} / (1 - e^{-s/Z}):
    # a suffix sum over the sorted lengths, kept in logarithms so that e^{x/Z} cannot overflow
    with np.errstate(divide="ignore"):
        log_terms = np.log(ws) - ss / z - np.log(-np.expm1(-ss / z))
        log_tail = np.concatenate([np.logaddexp.accumulate(log_terms[::-1])[::-1], [-np.inf]])
        log_rise = x / z + np.log(-np.expm1(-x / z))
    j = np.searchsorted(ss, x, side="right")
    done = np.concatenate([[0.0], np.cumsum(ws)])[j]
    c = done + np.exp(log_tail[j] + log_rise)
    c = np.clip(np.maximum.accumulate(c), 0.0, 1.0)
    mean, second = L._moments_from_cdf(x, c)
    return L.GridLatency(x, c, mean, second, 0.0, "time left of the flush in progress")


def erlang_c(servers: int, offered: float) -> float:
    """Erlang's C formula: chance that an arrival waits in an M/M/c queue (offered = lambda/mu).

    Computed with the numerically stable Erlang-B recursion (Erlang 1917; Kleinrock 1975).
    """
    if offered >= servers:
        return 1.0
    b = 1.0
    for k in range(1, servers + 1):
        b = offered * b / (k + offered * b)
    return servers * b / (servers - offered * (1 - b))


def mmc_wait(servers: int, service_ms: float, rate_per_ms: float) -> L.Latency | None:
    """Waiting time in an M/M/c queue: an atom at 0 of 1 - C and an exponential tail,
    P(W > t) = C exp(-(c mu - lambda) t). None when saturated."""
    a = rate_per_ms * service_ms
    if a >= servers:
        return None
    c = erlang_c(servers, a)
    tail = L.Exponential(1.0 / (servers / service_ms - rate_per_ms))
    return L.mixture([1 - c, c], [L.Fixed(0.0), tail]) if c > 1e-12 else L.Fixed(0.0)



@dataclass(frozen=True)
class FiniteSourceCpu:
    """The CPU station of N closed sessions (see ``finite_source_cpu``)."""

    throughput_per_ms: float  # commits per ms through the station
    at_cpu: L.Latency  # a commit's time at the station: queue wait plus its own work (ms)
    busy_servers: float  # mean CPUs busy


def _finite_source_law(servers: int, service_ms: float, population: int,
                       other_ms: float) -> np.ndarray:
    """Stationary chance of k = 0..M sessions at the station (birth (M - k) / Z, death
    min(k, c) / S), computed in logs."""
    k = np.arange(population + 1)
    from scipy.special import gammaln

    log_ratio = np.log(service_ms) - np.log(max(other_ms, 1e-12))
    log_servers = np.concatenate([[0.0], np.cumsum(np.log(np.minimum(k[1:], servers)))])
    lp = (gammaln(population + 1) - gammaln(k + 1) - gammaln(population - k + 1)
          + k * log_ratio + gammaln(k + 1) - log_servers)
    p = np.exp(lp - lp.max())
    return p / p.sum()


def finite_source_cpu(servers: int, service_ms: float, sessions: int,
                      other_ms: float) -> FiniteSourceCpu:
    """N sessions that spend a mean ``other_ms`` away from the CPU (thinking, waiting for the
    log) and then queue for one of c CPUs (FIFO, exponential work of mean S): the
    finite-source (machine-interference) queue M/M/c//N, Kleinrock, Queueing Systems vol. 1,
    1975, section 3.9. Its stationary law does not depend on the law of the time away, only
    on its mean (Bunday and Scraton, 1980). An arriving session sees the law of the station
    with N - 1 sessions (the arrival theorem for closed networks; Sevcik and Mitrani, 1981);
    found with k >= c others there it waits Erlang(k - c + 1, c / S).
    """
    c, s_ms = servers, service_ms
    full = _finite_source_law(c, s_ms, sessions, other_ms)
    k = np.arange(sessions + 1)
    busy = float(full @ np.minimum(k, c))
    seen = _finite_source_law(c, s_ms, sessions - 1, other_ms) if sessions > 1 else \
        np.array([1.0])
    ahead = np.arange(seen.size) - c + 1  # phases to wait for, where positive
    wait_p = seen[ahead > 0]
    phases = ahead[ahead > 0].astype(float)
    work = L.Exponential(s_ms)
    p_wait = float(wait_p.sum())
    if p_wait < 1e-12:
        return FiniteSourceCpu(busy / s_ms, work, busy)
    wait_p = wait_p / p_wait
    step = s_ms / c
    mean = float(wait_p @ phases) * step
    second = float(wait_p @ (phases * (phases + 1))) * step ** 2
    from scipy.special import gammaincc

    top = phases[np.searchsorted(np.cumsum(wait_p), 1 - 1e-10).clip(0, phases.size - 1)]
    x = np.linspace(0.0, step * (top + 10 * np.sqrt(top) + 10), 2049)
    cdf = 1.0 - gammaincc(phases[None, :], x[:, None] / step) @ wait_p
    positive = L.GridLatency(x, np.clip(cdf, 0.0, 1.0), mean, second, 0.0,
                             "CPU queue of closed sessions")
    wait = L.mixture([1 - p_wait, p_wait], [L.Fixed(0.0), positive])
    return FiniteSourceCpu(busy / s_ms, L.convolve(wait, work), busy)


def _binomial_cdf_below(j: int, m: int, q: np.ndarray) -> np.ndarray:
    """P(Binomial(m, q) < j) for each q."""
    from scipy.special import bdtr

    return bdtr(j - 1, m, q) if j > 0 else np.zeros_like(q)


# probability points (midpoints, denser in the tail) for the rest of a flush in progress
_U_REST = np.concatenate([(np.arange(900) + 0.5) / 900 * 0.99,
                          0.99 + (np.arange(100) + 0.5) / 100 * 0.0099])
_W_REST = np.concatenate([np.full(900, 0.99 / 900), np.full(100, 0.0099 / 100)])
_W_REST = _W_REST / _W_REST.sum()


def closed_batched_commit(flush_for_batch, sessions: int, think_ms: float, window_ms: float,
                          target: int) -> ClosedGroupCommit:
    """Batched commit with N sessions and exponential think time Z: an embedded chain at
    flush completions, extending the natural-group-commit chain with the gathering phase.

    State b = commits pending when a flush completes. The writer then gathers until the
    target is pending or the oldest pending commit's window runs out: with m = N - b
    thinking sessions, the gathering adds a arrivals, a = j (the target's shortfall) when
    they come before the window's rest W', else Binomial(m, 1 - exp(-W'/Z)) truncated below
    j; its mean length is the integral over [0, W'] of P(Binomial(m, 1 - e^{-t/Z}) < j). The
    flush then carries B = b + a and, as in the group-commit chain, the next state is
    Binomial(N - B, 1 - exp(-S/Z)). The oldest pending commit's age at completion is taken
    as E[S] b / (b + 1) (the first of b uniform arrivals in a flush): the one approximation.
    X = E[B] / E[cycle] and R = N / X - Z (Little).
    """
    n, z = sessions, think_ms
    if z <= 0:
        # every session is always waiting: each flush carries all N commits, after the
        # window when N is below the target
        f = L.add_constant(flush_for_batch(n), 0.0 if n >= target else window_ms)
        return ClosedGroupCommit(n / f.mean_ms, f, f.mean_ms, float(n), 1 / f.mean_ms,
                                 flush_for_batch(n).mean_ms / f.mean_ms)
    mean_s = flush_for_batch(target).mean_ms
    rows = np.zeros((n + 1, n + 1))  # rows[B] = law of the next state after a flush of B
    flush_mean = np.zeros(n + 1)
    nodes: dict = {}
    cache: dict = {}
    for big_b in range(1, n + 1):
        s, w = _quadrature(flush_for_batch(big_b), cache)
        nodes[big_b] = (s, w)
        rows[big_b, : n - big_b + 1] = _binomial_mixture(w, n - big_b, -np.expm1(-s / z))
        flush_mean[big_b] = float(w @ s)
    trans = np.zeros((n + 1, n + 1))
    cycle = np.zeros(n + 1)
    commits = np.zeros(n + 1)
    gather_mean = np.zeros(n + 1)
    arrivals_in_gather = np.zeros(n + 1)
    for b in range(n + 1):
        start = max(b, 1)
        left = window_ms if b == 0 else max(0.0, window_ms - mean_s * b / (b + 1))
        m = n - start
        j = min(max(target - start, 0), m)
        if j == 0 or left <= 0:
            p_a = np.zeros(m + 1)
            p_a[0] = 1.0
            g = 0.0
        else:
            q = -np.expm1(-left / z)
            p_a = np.zeros(m + 1)
            p_a[:j] = _binomial_pmf(np.arange(j), m, np.array([q]))[0]
            p_a[j] = max(0.0, 1.0 - p_a[:j].sum())
            t = np.linspace(0.0, left, 65)
            below = _binomial_cdf_below(j, m, -np.expm1(-t / z))
            g = float(np.sum(np.diff(t) * (below[1:] + below[:-1]) / 2))
        batch = start + np.arange(m + 1)
        trans[b] = p_a @ rows[batch]
        cycle[b] = (z / n if b == 0 else 0.0) + g + float(p_a @ flush_mean[batch])
        commits[b] = float(p_a @ batch) if b > 0 else float(p_a @ batch)
        gather_mean[b] = g
        arrivals_in_gather[b] = float(p_a @ np.arange(m + 1))
    pi_b = _stationary(trans)
    # commits counted once: b pending were counted as the previous flush's arrivals
    new_commits = (pi_b[0] * 1.0 + pi_b @ arrivals_in_gather
                   + float(pi_b @ (trans @ np.arange(n + 1))))
    x = new_commits / float(pi_b @ cycle)
    mean_r = n / x - z
    mean_batch = float(pi_b @ commits)
    flushes = 1.0 / float(pi_b @ cycle)
    busy = float(pi_b @ (cycle - gather_mean - np.where(np.arange(n + 1) == 0, z / n, 0.0))) \
        * flushes
    # response law: commits arriving during a flush wait what is left of it (arrival-weighted,
    # as in the group-commit chain), the next gathering and the next flush; commits that
    # start or join a gathering wait (part of) it and the flush.
    g_typ = float(pi_b @ gather_mean)
    next_flush = flush_for_batch(max(1, int(round(mean_batch))))
    parts_w, parts_s = [], []
    for b in range(n + 1):
        start = max(b, 1)
        s, w = nodes[start]
        parts_w.append(pi_b[b] * w * (n - start) * -np.expm1(-s / z))
        parts_s.append(s)
    ws, ss = np.concatenate(parts_w), np.concatenate(parts_s)
    w_gather = pi_b[0] + float(pi_b @ arrivals_in_gather)
    if ws.sum() <= 0:
        left_of_flush, share_flush = L.Fixed(0.0), 0.0
    else:
        left_of_flush = _time_left(ss, ws / ws.sum(), z)
        share_flush = ws.sum() / (ws.sum() + w_gather)
    # A commit that arrives during a flush waits what is left of it, r, and then the
    # gathering, which ends by the oldest pending commit's window at the latest: that commit
    # is at least r old, so the wait to the next flush is max(r, min(r + g, W)). The
    # gathering g is set so that the law's mean equals the chain's exact mean N/X - Z; only
    # the split of that wait between gathering and flush is approximate.
    r_pts = (np.asarray(left_of_flush.quantile(_U_REST), dtype=float) if share_flush > 0
             else np.zeros(1))

    def to_next(g: float) -> np.ndarray:
        return np.maximum(r_pts, np.minimum(r_pts + g, window_ms))

    def mean_for(g: float) -> float:
        rest = float(_W_REST @ to_next(g)) if share_flush > 0 else 0.0
        return next_flush.mean_ms + (1 - share_flush) * g + share_flush * rest

    g_eff = 0.0
    if g_typ > 0 and mean_for(0.0) < mean_r:
        lo, hi = 0.0, 2 * g_typ
        if mean_for(hi) <= mean_r:
            lo = hi
        for _ in range(40):
            mid = (lo + hi) / 2
            lo, hi = (mid, hi) if mean_for(mid) < mean_r else (lo, mid)
        g_eff = lo
    after_gather = (L.convolve(L.Uniform0(2 * g_eff), next_flush) if g_eff > 0
                    else next_flush)
    if share_flush == 0:
        response = after_gather
    else:
        wait = L.from_points(to_next(g_eff), _W_REST, "rest of the flush, then the gathering")
        during_flush = L.convolve(wait, next_flush)
        response = L.mixture([1 - share_flush, share_flush], [after_gather, during_flush])
    return ClosedGroupCommit(x, response, mean_r, mean_batch, flushes, busy)
