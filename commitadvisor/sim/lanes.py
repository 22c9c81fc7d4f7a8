"""The two event loops, each advancing every lane by one event per numpy step.

Open arrivals (:func:`run_open`): arrivals are drawn a block at a time for all lanes; the
CPU station (c FIFO servers, exponential work) is the Kiefer-Wolfowitz recursion over each
lane's arrivals in order (start = max(arrival, earliest free server)); departures join the
writer in time order. One step handles the next joining commit of every lane: first the
flush that must start before it joins (the pending batch closes when its start time is due),
then the join. Closed sessions (:func:`run_closed`): each lane's next event is the earliest
of its sessions' events (think ends, CPU done) and its writers' next flush start.

Per-commit results are computed once every device has closed the flush holding the commit
(the lane's resolved frontier) and handed to a recorder; nothing per commit is kept beyond
the ring of unresolved commits.
"""

from __future__ import annotations

import numpy as np

from commitadvisor.sim.engine import (
    BATCHED,
    DEFERRED,
    ONE_PER_COMMIT,
    Pool,
    Ring,
    Writer,
    expand,
    link_shared_cause,
)
from commitadvisor.sim.params import DeviceParams, HostParams, Schedule

__all__ = ["run_open", "run_closed", "run_measured_latency", "Combine"]

THINK, CPU, WAIT, BLOCKED = 0, 1, 2, 3


class Combine:
    """How a strategy turns each device's flush of a commit into its ack and safe times."""

    def __init__(self, strategy, devices: list[DeviceParams]):
        self.kind = strategy.kind
        self.counts = [d.counts_as_durable for d in devices]
        self.both = getattr(strategy, "ack_after", "first") == "both"
        if self.kind == "dual_device":
            if sum(self.counts) == 1:
                self.ackers = [i for i, c in enumerate(self.counts) if c]
            else:
                self.ackers = [0, 1]

    def probed(self) -> tuple[str, ...]:
        if self.kind == "deferred":
            return ("process_crash", "host_crash") if self.counts[0] else ("process_crash",)
        if self.kind == "dual_device":
            return ("device_loss",)
        return ()

    def ack_of(self, a: list[np.ndarray]) -> np.ndarray:
        if self.kind != "dual_device":
            return a[0]
        vals = [a[i] for i in self.ackers]
        if len(vals) == 1:
            return vals[0]
        return np.maximum(*vals) if self.both else np.minimum(*vals)

    def __call__(self, g: list[np.ndarray], e: list[np.ndarray], a: list[np.ndarray]):
        """(ack, durable or None, {failure: safe time or None})."""
        ack = self.ack_of(a)
        if self.kind == "dual_device":
            durable_parts = [e[i] for i in range(2) if self.counts[i]]
            durable = (np.minimum(*durable_parts) if len(durable_parts) == 2
                       else durable_parts[0] if durable_parts else None)
            safe = {"process_crash": ack,
                    "host_crash": ack if durable is not None else None,
                    "device_loss": np.maximum(e[0], e[1])}
            return ack, durable, safe
        durable = e[0] if self.counts[0] else None
        if self.kind == "deferred":
            safe = {"process_crash": g[0], "host_crash": durable, "device_loss": None}
        else:
            safe = {"process_crash": ack, "host_crash": ack if durable is not None else None,
                    "device_loss": None}
        return ack, durable, safe


class _Lanes:
    """What both loops share: writers, the ring of unresolved commits and the frontier."""

    def __init__(self, strategy, host: HostParams, devices: list[DeviceParams],
                 schedule: Schedule, rng: np.random.Generator, t_init: np.ndarray,
                 recorder, stationary: bool, extra_fields: dict[str, type]):
        self.host = host
        self.schedule = schedule
        self.rng = rng
        self.rec = recorder
        self.n = t_init.size
        self.rows = np.arange(self.n)
        self.writers = [Writer(strategy, d, host, schedule, rng, t_init, i)
                        for i, d in enumerate(devices)]
        for w in self.writers:
            w.stalls.start(t_init, stationary)
        link_shared_cause(self.writers, strategy, rng)
        self.arrival_field = "A" if (host.cpus or host.kind == "closed") else "J"
        fields = {"J": float, **extra_fields}
        if self.arrival_field == "A":
            fields["A"] = float
        if len(devices) > 1 or host.kind == "closed":
            for i in range(len(devices)):
                fields.update({f"G{i}": float, f"e{i}": float, f"a{i}": float})
        self.ring = Ring(self.n, fields)
        self.combine = Combine(strategy, devices)
        self.frontier = np.zeros(self.n, dtype=np.int64)
        self.wake_ms = host.wake_ms
        self.wake_c = host.wake_servers
        self.cpu_mean = np.asarray(host.cpu_mean_ms, dtype=float)
        self.exp = Pool(lambda k: rng.exponential(1.0, k))
        self.deferred = self.writers[0].mode == DEFERRED
        self.commits = 0

    def wake(self, pos: np.ndarray) -> np.ndarray:
        if self.wake_ms <= 0:
            return np.zeros(pos.size)
        return np.ceil((pos + 1) / self.wake_c) * self.wake_ms

    def drain(self, d: int):
        """The flushes writer d closed since the last drain (their per-time figures go to
        the recorder here, in bulk)."""
        cols = self.writers[d].log.drain()
        if cols is not None:
            rows, start, end, lo, hi = cols[:5]
            self.rec.on_flush(d, rows, start, end, hi - lo)
        return cols

    def write_flushes(self, d: int, cols) -> None:
        """Per-commit times of the flushes just closed by writer d. With one device the
        commits are resolved at once; with two, their fields wait in the ring."""
        rows, start, end, lo, hi, prev_lo, prev_e = cols
        lanes, k, pos, which = expand(rows, lo, hi)
        if lanes.size == 0:
            return
        ring = self.ring
        slots = ring.slots(lanes, k)
        e = end[which]
        if self.deferred:
            j = ring.data["J"][slots]
            cap = self.writers[0].cap
            blocked = (k - cap) >= prev_lo[which]
            a = np.where(blocked, np.maximum(j, prev_e[which]), j)
        else:
            a = e if self.wake_ms <= 0 else e + self.wake(pos)
        if len(self.writers) == 1:
            ack, durable, safe = self.combine([start[which]], [e], [a])
            arrival = ring.data[self.arrival_field][slots]
            self.commits += int(lanes.size)
            self.rec.on_commits(lanes, arrival, ack, durable, safe)
            return
        ring.data[f"G{d}"][slots] = start[which]
        ring.data[f"e{d}"][slots] = e
        ring.data[f"a{d}"][slots] = a

    def resolve(self) -> None:
        """Hand every commit that all devices have flushed to the recorder."""
        top = self.writers[0].hi
        for w in self.writers[1:]:
            top = np.minimum(top, w.hi)
        lanes, k, _, _ = expand(self.rows, self.frontier, top)
        self.frontier = top.copy()
        if lanes.size == 0:
            return
        ring = self.ring
        nd = len(self.writers)
        g = [ring.get(f"G{i}", lanes, k) for i in range(nd)]
        e = [ring.get(f"e{i}", lanes, k) for i in range(nd)]
        a = [ring.get(f"a{i}", lanes, k) for i in range(nd)]
        ack, durable, safe = self.combine(g, e, a)
        arrival = ring.get(self.arrival_field, lanes, k)
        self.commits += int(lanes.size)
        self.rec.on_commits(lanes, arrival, ack, durable, safe)
        self.resolved_hook(lanes, arrival)

    def resolved_hook(self, lanes: np.ndarray, arrival: np.ndarray) -> None:
        return None


# --------------------------------------------------------------------------- open arrivals
class _Buffer:
    """Each lane's joins not yet resolved, in join order, stored flat (lane after lane,
    ``off`` the row offsets): join number ``base`` of a lane sits at ``off[lane]``.
    ``known`` is the time up to which every join of the lane is in the buffer."""

    def __init__(self, lanes: int, fields: tuple[str, ...], t0: np.ndarray):
        self.data = {f: np.empty(0) for f in fields}
        self.n = np.zeros(lanes, dtype=np.int64)
        self.off = np.zeros(lanes + 1, dtype=np.int64)
        self.base = np.zeros(lanes, dtype=np.int64)
        self.known = t0.astype(float).copy()
        self.rows = np.arange(lanes)

    def append(self, cols: dict[str, np.ndarray], keep_from: np.ndarray) -> None:
        """Drop every entry before join number ``keep_from`` and append the new joins
        (their rows are prefix-valid, padded with inf)."""
        drop = keep_from - self.base
        tail = self.n - drop
        ok = np.isfinite(cols["J"])
        new_n = ok.sum(axis=1)
        n = tail + new_n
        off = np.zeros(self.n.size + 1, dtype=np.int64)
        np.cumsum(n, out=off[1:])
        lanes_k, _, pos_k, _ = expand(self.rows, np.zeros_like(tail), tail)
        src = self.off[lanes_k] + drop[lanes_k] + pos_k
        dst_keep = off[lanes_k] + pos_k
        lanes_new = np.broadcast_to(self.rows[:, None], ok.shape)[ok]
        col_new = np.broadcast_to(np.arange(ok.shape[1])[None, :], ok.shape)[ok]
        dst_new = off[lanes_new] + tail[lanes_new] + col_new
        total = int(off[-1])
        for f, old in self.data.items():
            out = np.empty(total)
            out[dst_keep] = old[src]
            add = cols.get(f)
            if add is not None:
                out[dst_new] = add[ok]
            # other fields of new joins are written by their flushes before being read
            self.data[f] = out
        self.base = keep_from.copy()
        self.n = n
        self.off = off
        self.lane_of = np.repeat(self.rows, n)
        self._keys()

    def _keys(self) -> None:
        """One sorted flat array for every lane's search: row-relative join times, each
        row shifted by its own span (precision: values stay below lanes x span)."""
        j = self.data["J"]
        first = np.minimum(self.off[:-1], max(j.size - 1, 0))
        self.ref = np.where(self.n > 0, j[first] if j.size else 0.0, 0.0)
        rel = j - self.ref[self.lane_of]
        self.span = 2.0 * float(rel.max(initial=0.0)) + 2.0
        self.keys = rel + self.lane_of * self.span

    def count_upto(self, rows: np.ndarray, t: np.ndarray, frm: np.ndarray) -> np.ndarray:
        """How many of each lane's buffered joins are at or before t (more than ``frm``):
        the next few entries are compared directly, a long run by one search."""
        # the entry at frm is due by construction; most batches end right after it
        cnt = frm + 1
        more = np.flatnonzero(self.at("J", rows, cnt) <= t)
        if more.size == 0:
            return cnt
        k = 8
        r, tm = rows[more], t[more]
        pos = cnt[more][:, None] + np.arange(k)[None, :]
        inside = pos < self.n[r, None]
        idx = np.where(inside, self.off[r, None] + pos, 0)
        inside &= self.data["J"][idx] <= tm[:, None]
        cnt[more] += inside.sum(axis=1)
        long = np.flatnonzero(inside[:, -1])
        if long.size:
            rl = r[long]
            q = np.clip(tm[long] - self.ref[rl], -1.0, 0.5 * self.span) + rl * self.span
            cnt[more[long]] = np.searchsorted(self.keys, q, side="right") - self.off[rl]
        return cnt

    def flat(self, lanes: np.ndarray, col: np.ndarray) -> np.ndarray:
        return self.off[lanes] + col

    def at(self, f: str, rows: np.ndarray, pos: np.ndarray) -> np.ndarray:
        """Field f at buffer positions (inf beyond a lane's valid entries)."""
        ok = pos < self.n[rows]
        arr = self.data[f]
        if arr.size == 0:
            return np.full(rows.size, np.inf)
        return np.where(ok, arr[np.where(ok, self.off[rows] + pos, 0)], np.inf)


def run_open(strategy, host: HostParams, devices: list[DeviceParams], schedule: Schedule,
             rng: np.random.Generator, t_init: np.ndarray, t_stop: np.ndarray, recorder, *,
             stationary: bool = True, block: int = 256, progress=None) -> int:
    """Poisson commits from ``t_init`` until ``t_stop`` (per lane), every commit flushed;
    returns the number of commits simulated.

    Arrivals (and the CPU station) are produced ``block`` commits per lane at a time; then
    each step starts one flush in every lane whose next flush start is already decided by
    the joins known so far, and finds what it carries with one search over all lanes."""
    n = t_init.size
    writers = [Writer(strategy, d, host, schedule, rng, t_init, i)
               for i, d in enumerate(devices)]
    for w in writers:
        w.stalls.start(t_init, stationary)
    link_shared_cause(writers, strategy, rng)
    comb = Combine(strategy, devices)
    nd = len(writers)
    cpus = host.cpus
    wake_ms, wake_c = host.wake_ms, host.wake_servers
    # Fields kept per buffered join: without a CPU station the arrival is the join time;
    # with two devices each one's flush end and ack (the same without a wake cost; the
    # flush start is not needed, as Combine reads it for the deferred writer only)
    arrival = "A" if cpus else "J"
    per_dev = "ea" if wake_ms > 0 else "e"
    fields = ["J"] + (["A"] if cpus else []) + (
        [f"{x}{d}" for d in range(nd) for x in per_dev] if nd > 1 else [])
    buf = _Buffer(n, tuple(fields), t_init)
    exp = Pool(lambda k: rng.exponential(1.0, k))
    uni = Pool(lambda k: rng.random(k))
    rates = np.asarray(host.open_rate_per_ms, dtype=float)
    present = range(rates.size) if schedule.fixed is None else (schedule.fixed,)
    rmax = max(float(rates[r]) for r in present)
    thin = schedule.fixed is None and len({float(rates[r]) for r in present}) > 1
    t_last = t_init.astype(float).copy()
    cpu = _Cpu(host, schedule, exp, t_init, recorder) if cpus else None
    total = [0]
    resolved = np.zeros(n, dtype=np.int64)
    while True:
        done = t_last >= t_stop
        if done.all() and (cpu is None or cpu.carry_d.shape[1] == 0):
            join = origin = np.full((n, 0), np.inf)
            buf.known[:] = np.inf
            last = True
        else:
            gaps = exp.take(n * block).reshape(n, block) / rmax
            arr = t_last[:, None] + np.cumsum(gaps, axis=1)
            arr[done] = np.inf
            t_last = np.where(done, t_last, arr[:, -1])
            if thin:
                keep = uni.take(n * block).reshape(n, block) * rmax < rates[schedule.index(arr)]
                arr = np.where(keep, arr, np.inf)
            arr[arr >= t_stop[:, None]] = np.inf
            if thin:
                arr.sort(axis=1)
            known = np.where(t_last >= t_stop, np.inf, t_last)
            if cpu is not None:
                join, origin = cpu.serve(arr, known)
            else:
                join, origin = arr, None
            buf.known = known
            last = False
        keep_from = writers[0].hi if nd == 1 else resolved
        buf.append({"J": join, "A": origin} if cpus else {"J": join}, keep_from)
        for d, w in enumerate(writers):
            _flush_steps(w, buf)
            cols = w.log.drain()
            if cols is not None:
                _flushed(d, cols, w, buf, comb, recorder, nd, wake_ms, wake_c, total,
                         arrival)
        if nd > 1:
            top = np.minimum(writers[0].hi, writers[1].hi)
            _resolve_dual(buf, resolved, top, comb, recorder, total, arrival, wake_ms > 0)
            resolved = top.copy()
        if progress is not None:
            progress(float(np.clip((t_last - t_init) / (t_stop - t_init), 0, 1).mean()))
        if last:
            break
    return total[0]


def _flush_steps(w: Writer, buf: _Buffer) -> None:
    """Start flushes until every lane's next flush needs joins not yet known."""
    cand = buf.rows
    mode = w.mode
    while cand.size:
        ptr = w.hi[cand] - buf.base[cand]
        e = w.e[cand]
        first = buf.at("J", cand, ptr)
        if mode == DEFERRED:
            full = (w.hi[cand] - w.lo[cand]) >= w.cap
            first = np.where(full, np.maximum(first, e), first)
            start = w._start(e, first, w.g[cand], np.inf)
        elif mode == BATCHED:
            nth = buf.at("J", cand, ptr + (w.target - 1))
            # the window runs from the oldest pending commit's join, even when it joined
            # during the previous flush (then the flush may start at once when it ends)
            start = np.maximum(e, np.minimum(first + w.window_ms, nth))
        else:
            start = np.maximum(e, first)
        ok = start < buf.known[cand]
        cand = cand[ok]
        if cand.size == 0:
            break
        start = start[ok]
        lo = w.hi[cand]
        if mode == ONE_PER_COMMIT:
            hi = lo + 1
        else:
            hi = buf.base[cand] + buf.count_upto(cand, start, ptr[ok])
            if mode == DEFERRED:
                hi = np.minimum(hi, lo + w.cap)
        w.flush_at(cand, start, lo, hi)


def _flushed(d, cols, w, buf, comb, recorder, nd, wake_ms, wake_c, total, arrival) -> None:
    rows, start, end, lo, hi = cols[:5]
    recorder.on_flush(d, rows, start, end, hi - lo)
    lanes, k, pos, which = expand(rows, lo, hi)
    if lanes.size == 0:
        return
    col = buf.flat(lanes, k - buf.base[lanes])
    e = end[which]
    if w.mode == DEFERRED:
        prev_lo, prev_e = cols[5:]
        j = buf.data["J"][col]
        blocked = (k - w.cap) >= prev_lo[which]
        a = np.where(blocked, np.maximum(j, prev_e[which]), j)
    else:
        a = e if wake_ms <= 0 else e + np.ceil((pos + 1) / wake_c) * wake_ms
    if nd == 1:
        ack, durable, safe = comb([start[which]], [e], [a])
        total[0] += int(lanes.size)
        recorder.on_commits(lanes, buf.data[arrival][col], ack, durable, safe)
        return
    buf.data[f"e{d}"][col] = e
    if wake_ms > 0:
        buf.data[f"a{d}"][col] = a


def _resolve_dual(buf, frm, top, comb, recorder, total, arrival, wake) -> None:
    lanes, k, _, _ = expand(buf.rows, frm, top)
    if lanes.size == 0:
        return
    col = buf.flat(lanes, k - buf.base[lanes])
    e = [buf.data[f"e{d}"][col] for d in range(2)]
    a = [buf.data[f"a{d}"][col] for d in range(2)] if wake else e
    ack, durable, safe = comb([None, None], e, a)
    total[0] += int(lanes.size)
    recorder.on_commits(lanes, buf.data[arrival][col], ack, durable, safe)


class _Cpu:
    """The CPU station of an open workload: c FIFO servers, exponential work; departures
    are released to the writer in time order once no later arrival can precede them."""

    def __init__(self, host: HostParams, schedule: Schedule, exp: Pool, t0: np.ndarray,
                 recorder):
        self.free = np.repeat(t0[:, None], host.cpus, axis=1).astype(float)
        self.mean = np.asarray(host.cpu_mean_ms, dtype=float)
        self.schedule = schedule
        self.exp = exp
        self.rec = recorder
        n = t0.size
        self.rows = np.arange(n)
        self.carry_d = np.empty((n, 0))
        self.carry_a = np.empty((n, 0))

    def serve(self, arr: np.ndarray, known: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        dep = _cpu_station(self, arr, self.free, self.rec)
        dall = np.concatenate([self.carry_d, dep], axis=1)
        aall = np.concatenate([self.carry_a, arr], axis=1)
        order = np.argsort(dall, axis=1, kind="stable")
        dall = np.take_along_axis(dall, order, axis=1)
        aall = np.take_along_axis(aall, order, axis=1)
        final = dall < known[:, None]
        nfin = final.sum(axis=1)
        width = int(nfin.max(initial=0))
        join = np.where(final[:, :width], dall[:, :width], np.inf)
        origin = aall[:, :width]
        nfinite = np.isfinite(dall).sum(axis=1)
        rest = int((nfinite - nfin).max(initial=0))
        idx = np.minimum(nfin[:, None] + np.arange(rest)[None, :], dall.shape[1] - 1)
        valid = np.arange(rest)[None, :] < (nfinite - nfin)[:, None]
        self.carry_d = np.where(valid, np.take_along_axis(dall, idx, axis=1), np.inf)
        self.carry_a = np.where(valid, np.take_along_axis(aall, idx, axis=1), np.inf)
        return join, origin


def _cpu_station(st, arr: np.ndarray, free: np.ndarray, recorder) -> np.ndarray:
    """FIFO multi-server CPU: each arrival (in order) starts on the earliest free server
    (the Kiefer-Wolfowitz recursion, one step per arrival of every lane)."""
    n, width = arr.shape
    dep = np.full((n, width), np.inf)
    begin = np.full((n, width), np.inf)
    rows = st.rows
    fixed = st.schedule.fixed
    work = st.exp.take(n * width).reshape(n, width)
    if fixed is not None:
        work = work * st.mean[fixed]
    for c in range(width):
        a = arr[:, c]
        ok = a < np.inf
        if not ok.any():
            break
        j = free.argmin(axis=1)
        start = np.maximum(a, free[rows, j])
        svc = work[:, c] if fixed is not None else \
            work[:, c] * st.mean[st.schedule.index(start)]
        d = start + svc
        if ok.all():
            free[rows, j] = d
        else:
            free[rows[ok], j[ok]] = d[ok]
        dep[:, c] = np.where(ok, d, np.inf)
        begin[:, c] = start
    ok = np.isfinite(dep)
    lanes = np.broadcast_to(rows[:, None], dep.shape)[ok]
    b = begin[ok]
    recorder.on_cpu(lanes, b, dep[ok] - b)
    return dep


# --------------------------------------------------------------------------- closed sessions
class _Closed(_Lanes):
    """Closed-loop state. With one device a commit is resolved when its flush closes (the
    results are buffered and handed to the recorder in bulk); with two, in the ring."""

    def __init__(self, *args, m0: np.ndarray, m1: np.ndarray, **kw):
        super().__init__(*args, **kw)
        self.m0, self.m1 = m0, m1
        self.arrived = np.zeros(self.n, dtype=np.int64)
        self.done = np.zeros(self.n, dtype=np.int64)
        self.single = len(self.writers) == 1
        self.buf: list[tuple[np.ndarray, ...]] = []

    def resolved_hook(self, lanes: np.ndarray, arrival: np.ndarray) -> None:
        m = (arrival >= self.m0[lanes]) & (arrival < self.m1[lanes])
        self.done += np.bincount(lanes[m], minlength=self.n)

    def flush_results(self) -> None:
        for d in range(len(self.writers)):
            self.drain(d)
        if self.single:
            if self.buf:
                lanes, arrival, g, e, a = (np.concatenate(c) for c in zip(*self.buf,
                                                                          strict=True))
                self.buf = []
                ack, durable, safe = self.combine([g], [e], [a])
                self.commits += int(lanes.size)
                self.rec.on_commits(lanes, arrival, ack, durable, safe)
                self.resolved_hook(lanes, arrival)
        else:
            self.resolve()

    def oldest(self) -> np.ndarray:
        return self.writers[0].hi if self.single else self.frontier


def run_closed(strategy, host: HostParams, devices: list[DeviceParams], schedule: Schedule,
               rng: np.random.Generator, t_init: np.ndarray, m0: np.ndarray, m1: np.ndarray,
               recorder, *, stationary: bool = True, progress=None) -> int:
    """N sessions per lane from ``t_init``; each lane runs until its measurement window
    [m0, m1) is over and every commit that arrived in it is resolved. Returns the number
    of commits simulated."""
    fields: dict[str, type] = {"s": np.int64}
    if strategy.kind == "deferred" or len(devices) > 1:
        fields.update({"A": float, "a0": float})
    if len(devices) > 1:
        fields["ack"] = float
    st = _Closed(strategy, host, devices, schedule, rng, t_init, recorder, stationary,
                 fields, m0=m0, m1=m1)
    n, sessions = st.n, host.sessions
    z = host.think_ms or 0.0
    if host.think_fixed:
        # all sessions start together, as the fixed-think model's own steady state has
        # them: sessions acknowledged by one flush think alike and commit together again
        think = lambda k: np.full(k, z)  # noqa: E731
        first = np.full((n, sessions), z)
    else:
        think = lambda k: st.exp.take(k) * z  # noqa: E731
        first = rng.exponential(1.0, (n, sessions)) * z
    due = t_init[:, None] + first
    phase = np.zeros((n, sessions), dtype=np.int8)
    a_cur = np.zeros((n, sessions))
    cpus = host.cpus
    free = np.repeat(t_init[:, None], cpus, axis=1).astype(float) if cpus else None
    writers = st.writers
    alive = np.ones(n, dtype=bool)
    rows_all = st.rows
    cap = writers[0].cap if st.deferred else 0
    dual = len(writers) == 2
    steps = 0
    while alive.any():
        s = due.argmin(axis=1)
        ts = due[rows_all, s]
        g = writers[0].close_time()
        which = None
        if dual:
            g1 = writers[1].close_time()
            which = (g1 < g).astype(np.intp)
            g = np.minimum(g, g1)
        ev = np.minimum(ts, g)
        alive &= ~((ev >= m1) & (st.arrived == st.done))
        closing = alive & (g < ts)  # a commit joining at the start time is in the batch
        sess = alive & ~closing & (ts < np.inf)
        if not (closing | sess)[alive].all():
            raise RuntimeError("simulator invariant broken: a live lane has no next event")
        if closing.any():
            for d in range(len(writers)):
                rows = np.flatnonzero(closing if which is None else closing & (which == d))
                if rows.size:
                    _closed_flush(st, d, rows, due, phase, a_cur, think, cap)
        rows = np.flatnonzero(sess)
        if rows.size:
            sid = s[rows]
            t = ts[rows]
            if cpus:
                th = phase[rows, sid] == THINK
                r_t, s_t, t_t = rows[th], sid[th], t[th]
            else:
                th = None
                r_t, s_t, t_t = rows, sid, t
            if r_t.size:
                a_cur[r_t, s_t] = t_t
                m = (t_t >= m0[r_t]) & (t_t < m1[r_t])
                st.arrived += np.bincount(r_t[m], minlength=n)
            if cpus:
                if r_t.size:
                    j = free[r_t].argmin(axis=1)
                    fj = free[r_t, j]
                    start = np.maximum(t_t, fj)
                    svc = st.exp.take(r_t.size) * st.cpu_mean[schedule.index(start)]
                    fin = start + svc
                    free[r_t, j] = fin
                    due[r_t, s_t] = fin
                    phase[r_t, s_t] = CPU
                    recorder.on_cpu(r_t, start, svc)
                jn = ~th
                jr, js, jt = rows[jn], sid[jn], t[jn]
                if r_t.size:
                    # a commit leaving the CPU before any other event of its lane joins
                    # the writer in the same step (one step fewer per commit)
                    now = (fin <= due[r_t].min(axis=1)) & (fin <= g[r_t])
                    if now.any():
                        jr = np.concatenate([jr, r_t[now]])
                        js = np.concatenate([js, s_t[now]])
                        jt = np.concatenate([jt, fin[now]])
                if jr.size:
                    _closed_join(st, jr, js, jt, due, phase, a_cur, think, cap)
            else:
                _closed_join(st, rows, sid, t, due, phase, a_cur, think, cap)
        steps += 1
        if steps % 256 == 0:
            st.flush_results()
            if progress is not None and steps % 4096 == 0:
                progress(float(np.clip((ev - t_init) / (m1 - t_init), 0, 1).mean()))
    st.flush_results()
    return st.commits


def _closed_join(st: _Closed, rows, sid, t, due, phase, a_cur, think, cap) -> None:
    writers = st.writers
    ring = st.ring
    w0 = writers[0]
    k = w0.nj[rows]
    ring.ensure(st.oldest(), w0.nj + 1)
    slots = ring.slots(rows, k)
    ring.data["s"][slots] = sid
    if not st.single:
        ring.data["A"][slots] = a_cur[rows, sid]
        for d in range(len(writers)):
            ring.data[f"a{d}"][slots] = np.nan
        ring.data["ack"][slots] = np.nan
    if st.deferred:
        ring.data["A"][slots] = a_cur[rows, sid]
        durable_count = np.where(w0.e[rows] <= t, w0.hi[rows], w0.lo[rows])
        blocked = (k - cap) >= durable_count
        in_flight = blocked & ((k - cap) < w0.hi[rows])
        ack = np.where(in_flight, np.maximum(t, w0.e[rows]), t)
        known = ~blocked | in_flight
        ring.data["a0"][slots[known]] = ack[known]
        due[rows[known], sid[known]] = ack[known] + think(int(known.sum()))
        phase[rows[known], sid[known]] = THINK
        due[rows[~known], sid[~known]] = np.inf
        phase[rows[~known], sid[~known]] = BLOCKED
    else:
        due[rows, sid] = np.inf
        phase[rows, sid] = WAIT
    for w in writers:
        w.add(rows, t)


def _closed_flush(st: _Closed, d: int, rows, due, phase, a_cur, think, cap) -> None:
    w = st.writers[d]
    start, end, lo, hi = w.close(rows)
    ring = st.ring
    lanes, k, pos, which = expand(rows, lo, hi)
    slots = ring.slots(lanes, k)
    e = end[which]
    if st.deferred:
        if lanes.size:
            st.buf.append((lanes, ring.data["A"][slots], start[which], e,
                           ring.data["a0"][slots]))
        hi_b = np.minimum(hi + cap, w.nj[rows])
        bl, bk, _, bw = expand(rows, np.minimum(lo + cap, hi_b), hi_b)
        if bl.size:
            ack = end[bw]
            bslots = ring.slots(bl, bk)
            ring.data["a0"][bslots] = ack
            sess = ring.data["s"][bslots]
            due[bl, sess] = ack + think(bl.size)
            phase[bl, sess] = THINK
        return
    if lanes.size == 0:
        return
    a_mine = e if st.wake_ms <= 0 else e + st.wake(pos)
    sess_all = ring.data["s"][slots]
    if st.single:
        st.buf.append((lanes, a_cur[lanes, sess_all], start[which], e, a_mine))
        due[lanes, sess_all] = a_mine + think(lanes.size)
        phase[lanes, sess_all] = THINK
        return
    ring.data[f"G{d}"][slots] = start[which]
    ring.data[f"e{d}"][slots] = e
    ring.data[f"a{d}"][slots] = a_mine
    comb = st.combine
    if comb.ackers == [d]:
        ack = a_mine
        known = np.ones(lanes.size, dtype=bool)
    elif d not in comb.ackers:
        return
    else:
        # Both devices acknowledge: decide as soon as the answer cannot change, and never
        # later than the acknowledgement itself (a session must not start thinking in the
        # past). "first": once the other device has flushed the commit, or when its next
        # flush cannot start before this one's acknowledgement; "both": once both have.
        other = st.writers[1 - d]
        before = ~np.isnan(ring.data["ack"][slots])
        closed_other = k < other.hi[lanes]
        a_other = ring.data[f"a{1 - d}"][slots]
        if comb.both:
            ack = np.maximum(a_mine, a_other)
            known = closed_other
        else:
            ack = np.where(closed_other, np.minimum(a_mine, a_other), a_mine)
            known = closed_other | (other.close_time(lanes) >= a_mine)
        known &= ~before
        ring.data["ack"][slots[known]] = ack[known]
    sel = np.flatnonzero(known)
    if sel.size:
        sess = sess_all[sel]
        due[lanes[sel], sess] = ack[sel] + think(sel.size)
        phase[lanes[sel], sess] = THINK


# --------------------------------------------------------------------------- measured latency
def run_measured_latency(host: HostParams, dev: DeviceParams, schedule: Schedule,
                         rng: np.random.Generator, t_init: np.ndarray, m0: np.ndarray,
                         m1: np.ndarray, t_stop: np.ndarray, recorder, strategy,
                         block: int = 256) -> int:
    """A device whose profile already is the commit response time: ack = arrival + a draw
    from the profile (of the regime at arrival); no writer, no CPU station."""
    from commitadvisor.sim.engine import latency_pool

    n = t_init.size
    present = range(len(dev.latency)) if schedule.fixed is None else (schedule.fixed,)
    pools = {r: latency_pool(dev.latency[r], rng) for r in present}
    exp = Pool(lambda k: rng.exponential(1.0, k))
    comb = Combine(strategy, [dev])
    rows = np.arange(n)
    total = 0

    def draw(t: np.ndarray) -> np.ndarray:
        reg = schedule.index(t)
        out = np.empty(t.shape)
        for r in np.unique(reg):
            sel = reg == r
            out[sel] = pools[int(r)].take(int(sel.sum()))
        return out

    def emit(lanes, a, ack):
        nonlocal total
        total += lanes.size
        safe_ack, durable, safe = comb([a], [ack], [ack])
        recorder.on_commits(lanes, a, safe_ack, durable, safe)

    if host.kind == "open":
        rates = np.asarray(host.open_rate_per_ms, dtype=float)
        rmax = max(float(rates[r]) for r in present)
        uni = Pool(lambda k: rng.random(k))
        t_last = t_init.astype(float).copy()
        while (t_last < t_stop).any():
            arr = t_last[:, None] + np.cumsum(exp.take(n * block).reshape(n, block) / rmax, 1)
            t_last = arr[:, -1].copy()
            keep = uni.take(n * block).reshape(n, block) * rmax < rates[schedule.index(arr)]
            keep &= arr < t_stop[:, None]
            lanes = np.broadcast_to(rows[:, None], arr.shape)[keep]
            a = arr[keep]
            emit(lanes, a, a + draw(a))
        return total
    sessions = host.sessions
    z = host.think_ms or 0.0
    lanes_m = np.broadcast_to(rows[:, None], (n, sessions)).ravel()
    if host.think_fixed:
        nxt = (t_init[:, None] + np.full((n, sessions), z)).ravel()
    else:
        nxt = (t_init[:, None] + rng.exponential(1.0, (n, sessions)) * z).ravel()
    stop = np.repeat(np.maximum(m1, t_stop), sessions)
    while (nxt < stop).any():
        live = nxt < stop
        a = nxt[live]
        ack = a + draw(a)
        emit(lanes_m[live], a, ack)
        thk = np.full(a.size, z) if host.think_fixed else exp.take(a.size) * z
        nxt[live] = ack + thk
    return total
