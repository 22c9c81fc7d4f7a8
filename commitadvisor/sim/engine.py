"""The vectorised parts of the simulator: many independent lanes (replications or time
segments) advanced together, each numpy element one lane.

- :class:`Pool` hands out random draws made in bulk (one generator call per 65,536 draws).
- :class:`Stalls` is one device's stall process per lane: stalls start as a Poisson process
  in time (its rate set by the regime in force) and one that would start during a stall is
  dropped, so the next start after a stall ends is that end plus an exponential gap.
- :class:`Writer` is one log writer per lane with its pending commits, the flush in flight
  and the strategy's rule for when the next flush starts and what it takes.
- :class:`Ring` keeps per-commit fields, indexed by the commit's join number, from the
  oldest commit not yet resolved to the newest (it grows when the backlog does).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from commitadvisor.sim.params import DeviceParams, HostParams, Schedule

__all__ = ["Pool", "Stalls", "Writer", "Ring", "FlushLog", "SharedCause", "link_shared_cause"]

_BLOCK = 1 << 16
NATURAL, ONE_PER_COMMIT, BATCHED, DEFERRED = range(4)


class Pool:
    """Draws made in blocks and handed out in order (deterministic for a given generator)."""

    def __init__(self, draw: Callable[[int], np.ndarray], block: int = _BLOCK):
        self._draw = draw
        self._block = block
        self._buf = np.empty(0)
        self._pos = 0

    def take(self, n: int) -> np.ndarray:
        if self._pos + n > self._buf.size:
            self._buf = np.concatenate([self._buf[self._pos:], self._draw(max(self._block, n))])
            self._pos = 0
        out = self._buf[self._pos:self._pos + n]
        self._pos += n
        return out


def latency_pool(profile, rng: np.random.Generator) -> Pool:
    return Pool(lambda n: np.asarray(profile.sample(rng, n), dtype=float))


class Stalls:
    """One device's stalls in every lane: the current or next stall is [s0, s1)."""

    def __init__(self, dev: DeviceParams, schedule: Schedule, rng: np.random.Generator,
                 lanes: int):
        self.rate = np.asarray(dev.stall_rate_per_ms, dtype=float)
        self.schedule = schedule
        self.rng = rng
        self.s0 = np.full(lanes, np.inf)
        self.s1 = np.full(lanes, np.inf)
        present = (range(len(self.rate)) if schedule.fixed is None else (schedule.fixed,))
        self.rmax = max((float(self.rate[r]) for r in present), default=0.0)
        self.any = self.rmax > 0
        self._dur = {r: latency_pool(dev.stall_duration[r], rng)
                     for r in present if dev.stall_duration[r] is not None and self.rate[r] > 0}
        self._exp = Pool(lambda n: rng.exponential(1.0, n))
        self._uni = Pool(lambda n: rng.random(n))
        self.count = 0

    def start(self, t0: np.ndarray, stationary: bool) -> None:
        """Place each lane's first stall. ``stationary``: draw the state at t0 from the
        stall process's own equilibrium in the regime then in force (in a stall with
        probability E[D] / (E[D] + 1/rate), with the residual of a length-biased stall),
        so that no warm-up is spent on it."""
        if not self.any:
            return
        lanes = np.arange(t0.size)
        if not stationary:
            self._next_after(lanes, t0.copy())
            return
        reg = self.schedule.index(t0)
        inside = np.zeros(t0.size, dtype=bool)
        for r, pool in self._dur.items():
            idx = np.flatnonzero(reg == r)
            if idx.size == 0:
                continue
            sample = pool.take(_BLOCK).copy()
            mean = float(sample.mean())
            p_in = self.rate[r] * mean / (1.0 + self.rate[r] * mean)
            hit = idx[self.rng.random(idx.size) < p_in]
            if hit.size:
                biased = self.rng.choice(sample, size=hit.size, p=sample / sample.sum())
                u = self.rng.random(hit.size)
                self.s0[hit] = t0[hit] - (1.0 - u) * biased
                self.s1[hit] = t0[hit] + u * biased
                inside[hit] = True
        rest = np.flatnonzero(~inside)
        self._next_after(rest, t0[rest])

    def _next_after(self, lanes: np.ndarray, t: np.ndarray) -> None:
        """Draw the next stall starting after t in the given lanes (thinning of a Poisson
        process at the largest rate; a stretch with rate 0 is skipped to its end)."""
        if lanes.size == 0:
            return
        start = np.full(lanes.size, np.inf)
        todo = np.arange(lanes.size)
        cur = t.astype(float).copy()
        while todo.size:
            reg = self.schedule.index(cur[todo])
            dead = self.rate[reg] <= 0
            if dead.any():
                # no stall can start before the regime changes: go there (just past it)
                jump = self.schedule.next_change(cur[todo[dead]])
                cur[todo[dead]] = jump + 1e-6
                todo = todo[np.isfinite(cur[todo])]
                continue
            cand = cur[todo] + self._exp.take(todo.size) / self.rmax
            reg = self.schedule.index(cand)
            accept = self._uni.take(todo.size) * self.rmax < self.rate[reg]
            start[todo[accept]] = cand[accept]
            cur[todo] = cand
            todo = todo[~accept]
        dur = np.zeros(lanes.size)
        ok = np.isfinite(start)
        if ok.any():
            reg = self.schedule.index(start[ok])
            d = np.empty(int(ok.sum()))
            for r, pool in self._dur.items():
                sel = reg == r
                k = int(np.count_nonzero(sel))
                if k:
                    d[sel] = pool.take(k)
            dur[ok] = d
        self.s0[lanes] = start
        self.s1[lanes] = start + dur
        self.count += int(ok.sum())

    def finish(self, lanes: np.ndarray, start: np.ndarray, work: np.ndarray) -> np.ndarray:
        """When a flush that starts at ``start`` and needs ``work`` ms of device progress
        completes: it waits out a stall in progress and is held up by every stall that
        begins before it is done."""
        if not self.any:
            return start + work
        end = start + work
        s0 = self.s0[lanes]
        # most flushes meet no stall: the next stall starts after they are done
        act = np.flatnonzero((start >= s0) | (end > s0))
        if act.size == 0:
            return end
        t = start.astype(float).copy()
        rem = work.astype(float).copy()
        while act.size:
            ln = lanes[act]
            old = self.s1[ln] <= t[act]
            if old.any():
                self._next_after(ln[old], self.s1[ln[old]])
                continue
            s0, s1 = self.s0[ln], self.s1[ln]
            tt = t[act]
            inside = s0 <= tt
            done = ~inside & (tt + rem[act] <= s0)
            end[act[done]] = tt[done] + rem[act[done]]
            hit = ~inside & ~done
            rem[act[hit]] -= s0[hit] - tt[hit]
            moved = inside | hit
            t[act[moved]] = s1[moved]
            self._next_after(ln[moved], s1[moved])
            act = act[~done]
        return end


class FlushLog:
    """Flushes closed since the last drain, as parallel arrays (one entry per flush)."""

    def __init__(self) -> None:
        self.parts: list[tuple[np.ndarray, ...]] = []

    def add(self, *cols: np.ndarray) -> None:
        self.parts.append(cols)

    def drain(self) -> tuple[np.ndarray, ...] | None:
        if not self.parts:
            return None
        cols = tuple(np.concatenate(c) for c in zip(*self.parts, strict=True))
        self.parts = []
        return cols


class Writer:
    """One log writer per lane in front of one device.

    State per lane: ``e`` the end of the last flush (the writer is free from then), ``g`` its
    start, ``lo``/``hi`` the join numbers it carried, ``nj`` commits joined so far, ``f`` the
    join time of the first pending commit (inf: none pending; -inf: commits left pending by
    the last flush, so they were pending when it ended), ``jt`` the join time of the
    gathering target's commit (batched).
    """

    def __init__(self, strategy, dev: DeviceParams, host: HostParams, schedule: Schedule,
                 rng: np.random.Generator, t0: np.ndarray, device_index: int):
        kind = strategy.kind
        if kind == "synchronous":
            self.mode = ONE_PER_COMMIT if strategy.grouping == "none" else NATURAL
        elif kind == "batched":
            self.mode = BATCHED
            self.window_ms = strategy.gather_window_ms
            self.target = strategy.gather_target_commits
        elif kind == "deferred":
            self.mode = DEFERRED
            self.every_ms = strategy.flush_every_ms
            self.cap = strategy.buffer_bytes // host.log_bytes
        else:
            self.mode = NATURAL
        lanes = t0.size
        self.dev = dev
        self.index = device_index
        self.schedule = schedule
        self.log_bytes = host.log_bytes
        self.bw = np.asarray(dev.bandwidth_bytes_per_ms, dtype=float)
        self.overhead = np.asarray(host.flush_overhead_ms, dtype=float)
        present = range(len(dev.latency)) if schedule.fixed is None else (schedule.fixed,)
        self._lat = {r: latency_pool(dev.latency[r], rng) for r in present}
        self.fixed = schedule.fixed
        self.stalls = Stalls(dev, schedule, rng, lanes)
        self.log = FlushLog()
        self.e = t0.astype(float).copy()
        self.g = self.e - (self.every_ms if self.mode == DEFERRED else 0.0)
        self.lo = np.zeros(lanes, dtype=np.int64)
        self.hi = np.zeros(lanes, dtype=np.int64)
        self.prev_lo = np.zeros(lanes, dtype=np.int64)
        self.prev_e = self.e.copy()
        self.nj = np.zeros(lanes, dtype=np.int64)
        self.f = np.full(lanes, np.inf)
        self.jt = np.full(lanes, np.inf)
        self.flushes = 0
        self.shared: SharedCause | None = None  # set by link_shared_cause (two devices)

    # ------------------------------------------------------------------ rules
    def _start(self, e, f, g, jt) -> np.ndarray:
        if self.mode in (NATURAL, ONE_PER_COMMIT):
            return np.maximum(e, f)
        if self.mode == BATCHED:
            return np.maximum(e, np.minimum(f + self.window_ms, jt))
        every = self.every_ms
        # g is often a tick itself, k x every in floating point, whose quotient can fall
        # just below k: without the nudge floor() takes the tick before, the flush reads
        # as late and the next one starts at its end instead of at the next tick
        owed = (np.floor(g / every + 1e-9) + 1.0) * every <= e
        nxt = np.ceil(np.maximum(f, e) / every) * every
        out = np.where(owed & (f <= e), e, nxt)
        out[f == np.inf] = np.inf
        return out

    def close_time(self, rows: np.ndarray | None = None) -> np.ndarray:
        """When the pending batch of each lane starts its flush (inf when nothing is
        pending), given what has joined so far."""
        if rows is None:
            return self._start(self.e, self.f, self.g, self.jt)
        return self._start(self.e[rows], self.f[rows], self.g[rows], self.jt[rows])

    def add(self, rows: np.ndarray, join_ms: np.ndarray) -> None:
        """Commits join (one per listed lane)."""
        sel = slice(None) if rows.size == self.e.size else rows
        hi = self.hi[sel]
        nj = self.nj[sel]
        self.f[sel] = np.where(nj == hi, join_ms, self.f[sel])
        nj = nj + 1
        self.nj[sel] = nj
        if self.mode == BATCHED:
            self.jt[sel] = np.where(nj - hi == self.target, join_ms, self.jt[sel])

    def _work(self, count: int, start: np.ndarray, batch: np.ndarray,
              rows: np.ndarray | None = None) -> np.ndarray:
        """Device time of ``count`` flushes starting at ``start``: the regime's latency, the
        transfer beyond the profiled block, and the writer's per-flush work (ms)."""
        if self.shared is not None:
            return self._shared_work(rows, start, batch)
        if self.fixed is not None:
            r = self.fixed
            work = self._lat[r].take(count).copy()
            if int(batch.max(initial=0)) * self.log_bytes > self.dev.block_bytes:
                work += np.maximum(0.0, batch * self.log_bytes - self.dev.block_bytes) / self.bw[r]
            if self.overhead[r]:
                work += self.overhead[r]
            return work
        reg = self.schedule.index(start)
        work = self._latency(reg, count)
        extra = np.maximum(0.0, batch * self.log_bytes - self.dev.block_bytes)
        return work + extra / self.bw[reg] + self.overhead[reg]

    def flush_at(self, rows: np.ndarray, start: np.ndarray, lo: np.ndarray,
                 hi: np.ndarray) -> np.ndarray:
        """Start flushes carrying join numbers [lo, hi) at ``start`` in the listed lanes
        (the caller has decided both); returns their ends. The flush log gets (rows, start,
        end, lo, hi), and for the deferred writer also the previous flush's lo and end."""
        batch = hi - lo
        work = self._work(rows.size, start, batch, rows)
        end = self.stalls.finish(rows, start, work)
        if self.mode == DEFERRED:
            # only the deferred writer's acks look back at the flush before (its buffer cap)
            self.log.add(rows, start, end, lo, hi, self.lo[rows], self.e[rows])
        else:
            self.log.add(rows, start, end, lo, hi)
        self.lo[rows] = lo
        self.hi[rows] = hi
        self.g[rows] = start
        self.e[rows] = end
        self.flushes += rows.size
        return end

    def close(self, rows: np.ndarray) -> tuple[np.ndarray, ...]:
        """Start the pending flush in the listed lanes; returns (start, end, lo, hi)."""
        mode = self.mode
        if rows.size == self.e.size:  # every lane: plain copies instead of gathers
            sel = slice(None)
            e, f = self.e.copy(), self.f
            lo, nj = self.hi.copy(), self.nj
        else:
            sel = rows
            e, f = self.e[sel], self.f[sel]
            lo, nj = self.hi[sel], self.nj[sel]
        if mode == NATURAL or mode == ONE_PER_COMMIT:
            start = np.maximum(e, f)
        else:
            start = self._start(e, f, self.g[sel], self.jt[sel])
        if mode == ONE_PER_COMMIT:
            hi = lo + 1
        elif mode == DEFERRED:
            hi = np.minimum(nj, lo + self.cap)
        else:
            hi = nj.copy()
        batch = hi - lo
        work = self._work(rows.size, start, batch, rows)
        end = self.stalls.finish(rows, start, work)
        if mode == DEFERRED:
            prev_lo = self.lo[sel].copy()
            self.prev_lo[sel] = prev_lo
            self.prev_e[sel] = e
            self.g[sel] = start
        else:
            prev_lo = lo
        self.lo[sel] = lo
        self.hi[sel] = hi
        self.e[sel] = end
        if mode == NATURAL or mode == BATCHED:
            self.f[sel] = np.inf
            if mode == BATCHED:
                self.jt[sel] = np.inf
        else:
            self.f[sel] = np.where(nj > hi, -np.inf, np.inf)
        self.flushes += rows.size
        self.log.add(rows, start, end, lo, hi, prev_lo, e)
        return start, end, lo, hi

    def _shared_work(self, rows: np.ndarray, start: np.ndarray,
                     batch: np.ndarray) -> np.ndarray:
        """As ``_work``, with the flush time drawn as the profile's quantile of a uniform
        (so that device b can reuse device a's; see :class:`SharedCause`)."""
        sh = self.shared
        u = sh.uniforms.take(rows.size).copy()
        if self.index == 0:
            sh.record(rows, start, u)
        else:
            hit = sh.coin.take(rows.size) < sh.share
            ua, found = sh.lookup(rows, start)
            take = hit & found
            u[take] = ua[take]
        reg = (np.full(rows.size, self.fixed, dtype=np.intp) if self.fixed is not None
               else self.schedule.index(start))
        work = np.empty(rows.size)
        for r in np.unique(reg):
            sel = reg == r
            work[sel] = self.dev.latency[int(r)].quantile(u[sel])
        extra = np.maximum(0.0, batch * self.log_bytes - self.dev.block_bytes)
        return work + extra / self.bw[reg] + self.overhead[reg]

    def _latency(self, reg: np.ndarray, n: int) -> np.ndarray:
        if self.schedule.fixed is not None:
            return self._lat[self.schedule.fixed].take(n).copy()
        out = np.empty(n)
        for r, pool in self._lat.items():
            sel = reg == r
            k = int(np.count_nonzero(sel))
            if k:
                out[sel] = pool.take(k)
        return out

    def pending(self) -> np.ndarray:
        return self.nj > self.hi


class SharedCause:
    """The shared-cause share s of a dual-device log, flush by flush.

    Every flush draws its time as Q(u), the profile's quantile of a uniform u. Device a
    (writer 0) records each flush's (start, u) per lane. A flush of device b that starts at
    the same instant as a flush of a (both writers were idle when a commit joined), with
    chance s (one Bernoulli draw per flush of b), takes that flush's u; otherwise b draws
    its own. At light load every commit finds both writers idle, so its two flush times
    are comonotone with chance s and independent otherwise: the evaluator's
    sf_min = (1 - s) sf_a sf_b + s min(sf_a, sf_b). Each device's own flush-time law stays
    its profile (whether a's flush starts with b's does not depend on its u); reusing the
    u of the flush of a in flight would not: a flush in flight at a given instant is
    length-biased, so b's flushes would be drawn slow too often. Under load fewer commits
    find both writers idle, so the pairing weakens. Transfer time, the writer's work and
    stalls stay per device.

    Device a's records are kept per lane in a ring (``width`` a power of two), from the
    latest one at or before device b's last flush start (b's starts only increase) to the
    newest (a's writer runs ahead of b's within an event-loop step).
    """

    def __init__(self, share: float, rng: np.random.Generator, lanes: int, width: int = 64):
        self.share = float(share)
        self.uniforms = Pool(lambda n: rng.random(n))
        self.coin = Pool(lambda n: rng.random(n))
        self.width = width
        self.start = np.full((lanes, width), np.inf)
        self.u = np.zeros((lanes, width))
        self.head = np.zeros(lanes, dtype=np.int64)  # records made so far
        self.tail = np.zeros(lanes, dtype=np.int64)  # oldest record still needed

    def record(self, rows: np.ndarray, start: np.ndarray, u: np.ndarray) -> None:
        """Device a starts flushes (at most one per lane, in start order per lane)."""
        need = int((self.head[rows] - self.tail[rows]).max(initial=0)) + 1
        if need > self.width:
            self._grow(need)
        col = self.head[rows] & (self.width - 1)
        self.start[rows, col] = start
        self.u[rows, col] = u
        self.head[rows] += 1

    def _grow(self, need: int) -> None:
        w = self.width
        new_w = w
        while new_w < need:
            new_w *= 2
        lanes = self.start.shape[0]
        k = self.tail[:, None] + np.arange(w)[None, :]
        r = np.broadcast_to(np.arange(lanes)[:, None], k.shape)
        start = np.full((lanes, new_w), np.inf)
        u = np.zeros((lanes, new_w))
        start[r, k & (new_w - 1)] = self.start[r, k & (w - 1)]
        u[r, k & (new_w - 1)] = self.u[r, k & (w - 1)]
        self.start, self.u, self.width = start, u, new_w

    def lookup(self, rows: np.ndarray, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The u of device a's flush starting at t in each listed lane, and whether there
        is one (binary search for a's latest start at or before t)."""
        lo = self.tail[rows].copy()
        hi = self.head[rows].copy()
        mask = self.width - 1
        while True:
            act = np.flatnonzero(lo < hi)
            if act.size == 0:
                break
            mid = (lo[act] + hi[act]) // 2
            le = self.start[rows[act], mid & mask] <= t[act]
            lo[act[le]] = mid[le] + 1
            hi[act[~le]] = mid[~le]
        idx = lo - 1
        found = idx >= self.tail[rows]
        rf, col = rows[found], idx[found] & mask
        out = np.zeros(rows.size)
        out[found] = self.u[rf, col]
        same = np.zeros(rows.size, dtype=bool)
        same[found] = self.start[rf, col] == t[found]
        self.tail[rf] = idx[found]
        return out, same


def link_shared_cause(writers: list[Writer], strategy, rng: np.random.Generator) -> None:
    """Give a dual-device strategy with a shared-cause share above 0 its shared draws; with
    a share of 0 nothing changes (the writers keep their own draws)."""
    share = float(getattr(strategy, "shared_cause_share", 0.0) or 0.0)
    if len(writers) != 2 or share <= 0:
        return
    sh = SharedCause(share, rng, writers[0].e.size)
    for w in writers:
        w.shared = sh


class Ring:
    """Per-commit fields per lane, indexed by join number modulo a power of two (stored
    flat: lane x width + slot, which numpy indexes faster than a 2-d fancy index)."""

    def __init__(self, lanes: int, fields: dict[str, type], width: int = 1024):
        self.width = 1 << max(4, int(width - 1).bit_length())
        self.lanes = lanes
        self.data = {k: np.zeros(lanes * self.width, dtype=t) for k, t in fields.items()}
        self.rows = np.arange(lanes, dtype=np.int64)

    def slots(self, lanes: np.ndarray, k: np.ndarray) -> np.ndarray:
        return lanes * self.width + (k & (self.width - 1))

    def ensure(self, oldest: np.ndarray, newest_after: np.ndarray) -> None:
        """Make room so that join numbers oldest .. newest_after-1 fit without overlap."""
        need = int((newest_after - oldest).max(initial=0)) + 1
        if need <= self.width:
            return
        new_w = self.width
        while new_w < need:
            new_w *= 2
        ks = (oldest[:, None] + np.arange(self.width)[None, :]).ravel()
        lanes = np.repeat(self.rows, self.width)
        src = self.slots(lanes, ks)
        dst = lanes * new_w + (ks & (new_w - 1))
        for k, arr in self.data.items():
            new = np.zeros(self.lanes * new_w, dtype=arr.dtype)
            new[dst] = arr[src]
            self.data[k] = new
        self.width = new_w

    def put(self, name: str, lanes: np.ndarray, k: np.ndarray, values) -> None:
        self.data[name][self.slots(lanes, k)] = values

    def get(self, name: str, lanes: np.ndarray, k: np.ndarray) -> np.ndarray:
        return self.data[name][self.slots(lanes, k)]


def expand(lanes: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> tuple[np.ndarray, ...]:
    """Every (lane, join number, position in its range) for the ranges [lo, hi)."""
    n = (hi - lo).astype(np.int64)
    total = int(n.sum())
    if total == 0:
        z = np.zeros(0, dtype=np.int64)
        return z, z, z, z
    which = np.repeat(np.arange(n.size), n)
    starts = np.cumsum(n) - n
    pos = np.arange(total, dtype=np.int64) - starts[which]
    return lanes[which], lo[which] + pos, pos, which
