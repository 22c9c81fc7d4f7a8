"""What the simulator measures, without keeping every commit.

- :class:`LogHist` counts durations (ms) on a log-spaced grid: 200 bins per decade from
  1e-4 ms to 1e8 ms (each bin 1.16 % wide), plus one bin for values below 1e-4 ms (zero
  windows land there) and one above. A percentile is read by log-linear interpolation inside
  its bin, so it is within half a bin (0.58 %) of the sample percentile; means are kept as
  exact sums, not read from the grid.
- :class:`Probes` samples the number of acknowledged-but-not-yet-safe commits at stratified
  random instants (one uniform instant in each of K equal slices of a lane's measurement
  window). Its mean estimates the time average without using Little's law; its percentiles
  are those of the time-sampled distribution.
- :class:`Steady` gathers a steady-state segment's figures; :class:`Series` the per-window
  figures of a continuous timeline.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["LogHist", "Probes", "Steady", "Series", "KINDS", "ratio_se"]

KINDS = ("process_crash", "host_crash", "device_loss")
_LO_MS = 1e-4
_PER_DECADE = 200
_DECADES = 12
_NBINS = _PER_DECADE * _DECADES + 2  # under, grid, over
_PROBE_BULK = 1 << 21  # commits' slots held before they are counted (16 MiB a side)


def hist_bins(values_ms: np.ndarray, per_decade: int = _PER_DECADE) -> np.ndarray:
    """Bin index of each duration (0: below 1e-4 ms; last: 1e8 ms and above)."""
    n = per_decade * _DECADES
    # float32 logarithms: twice as fast, and their 1e-7 relative error is far inside a bin
    x = np.maximum(values_ms, 1e-30).astype(np.float32)
    np.log10(x, out=x)
    x -= np.float32(math.log10(_LO_MS))
    x *= np.float32(per_decade)
    np.clip(x, -1, n, out=x)
    return x.astype(np.int64) + 1


def hist_quantile(counts: np.ndarray, q: float, per_decade: int = _PER_DECADE) -> float | None:
    """The q-quantile of a histogram made by :func:`hist_bins` (None when empty)."""
    total = counts.sum()
    if total == 0:
        return None
    cum = np.cumsum(counts)
    target = q * total
    i = int(np.searchsorted(cum, target, side="left"))
    i = min(i, counts.size - 1)
    if i == 0:
        return 0.0
    n = per_decade * _DECADES
    if i == n + 1:
        return 10 ** (math.log10(_LO_MS) + _DECADES)
    below = cum[i - 1] if i > 0 else 0
    frac = (target - below) / counts[i] if counts[i] else 0.0
    lo = math.log10(_LO_MS) + (i - 1) / per_decade
    return float(10 ** (lo + min(max(frac, 0.0), 1.0) / per_decade))


class LogHist:
    """Counts on the log grid, with the exact sum and count for the mean."""

    def __init__(self) -> None:
        self.counts = np.zeros(_NBINS, dtype=np.int64)
        self.total = 0
        self.sum_ms = 0.0

    def add(self, values_ms: np.ndarray) -> None:
        if values_ms.size == 0:
            return
        self.total += int(values_ms.size)
        self.sum_ms += float(values_ms.sum())
        # zeros (a deferred commit's acknowledgement) go to the bottom bin without logarithms
        zero = values_ms <= 0.0
        n_zero = int(np.count_nonzero(zero))
        if n_zero:
            self.counts[0] += n_zero
            if n_zero == values_ms.size:
                return
            values_ms = values_ms[~zero]
        self.counts += np.bincount(hist_bins(values_ms), minlength=_NBINS)

    @property
    def mean_ms(self) -> float | None:
        return self.sum_ms / self.total if self.total else None

    def quantile(self, q: float) -> float | None:
        return hist_quantile(self.counts, q)


class Probes:
    """At-risk counts at stratified random instants of each lane's window [t0, t1): probe k
    of a lane is at t0 + (k + u_k) x step, u_k uniform. A commit at risk over [start, end)
    is counted by every probe in that span: the count at probe k is the number of starts
    at or before it minus the number of ends at or before it, so each commit adds +1 at
    the first probe after its start and -1 at the first probe after its end."""

    def __init__(self, t0: np.ndarray, t1: np.ndarray, per_lane: int,
                 rng: np.random.Generator, u: np.ndarray | None = None):
        self.t0 = t0
        self.k = per_lane
        self.step = (t1 - t0) / per_lane
        self.lanes = t0.size
        self.u = rng.random((self.lanes, per_lane)) if u is None else u
        # each lane's u with one more column, +inf, for the slot past its last probe
        self._u = np.concatenate([self.u, np.full((self.lanes, 1), np.inf)], axis=1).ravel()
        self.steps = np.zeros(self.lanes * (per_lane + 1), dtype=np.int64)
        self._starts: list[np.ndarray] = []
        self._ends: list[np.ndarray] = []
        self._pending = 0

    def lane_terms(self, lanes: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per commit: its lane's window start, probes per ms and first slot, gathered once
        for every ``slot`` call on the same commits."""
        return self.t0[lanes], 1.0 / self.step[lanes], lanes * (self.k + 1)

    def slot(self, lanes: np.ndarray, t_ms: np.ndarray, terms=None) -> np.ndarray:
        """Flat index (lane, first probe at or after t); the slot past the last probe when
        t is after them all."""
        t0, per_ms, first = self.lane_terms(lanes) if terms is None else terms
        x = (t_ms - t0) * per_ms
        j = np.clip(x, 0, self.k).astype(np.int64)  # truncation is the floor once x >= 0
        at = first + j
        # probe j itself is before t: the first probe at or after t is the next one (never
        # past the slot after the last probe, whose u is +inf)
        at += self._u[at] + j < x
        return at

    def add(self, lanes: np.ndarray, start_ms: np.ndarray, end_ms: np.ndarray,
            start_slot: np.ndarray | None = None, terms=None) -> None:
        """Count each commit as at risk over [start, end) (an empty span counts nothing)."""
        terms = self.lane_terms(lanes) if terms is None else terms
        a = self.slot(lanes, start_ms, terms) if start_slot is None else start_slot
        b = self.slot(lanes, np.maximum(end_ms, start_ms), terms)
        # slots are counted in bulk: one pass over the (large) step array per few million
        # commits rather than one per batch
        self._starts.append(a)
        self._ends.append(b)
        self._pending += a.size
        if self._pending >= _PROBE_BULK:
            self._count()

    def _count(self) -> None:
        if not self._starts:
            return
        n = self.steps.size
        self.steps += np.bincount(np.concatenate(self._starts), minlength=n)
        self.steps -= np.bincount(np.concatenate(self._ends), minlength=n)
        self._starts, self._ends, self._pending = [], [], 0

    def values(self) -> np.ndarray:
        self._count()
        d = self.steps.reshape(self.lanes, self.k + 1)
        return np.cumsum(d, axis=1)[:, :self.k].ravel()


class Steady:
    """A steady-state segment: per-commit histograms for commits arriving in each lane's
    window [t0, t1), per-time sums over the same windows."""

    def __init__(self, t0: np.ndarray, t1: np.ndarray, kinds_probed: tuple[str, ...],
                 devices: int, rng: np.random.Generator, probes: int = 1 << 20):
        self.t0, self.t1 = t0, t1
        self.ack = LogHist()
        self.durable = LogHist()
        self.window = {k: LogHist() for k in KINDS}
        per_lane = int(np.clip(probes // t0.size, 16, 4096))
        u = rng.random((t0.size, per_lane))  # the same instants for every failure kind
        self.probes = {k: Probes(t0, t1, per_lane, rng, u) for k in kinds_probed}
        self.flushes = np.zeros(devices, dtype=np.int64)
        self.batch_sum = np.zeros(devices)
        self.busy_ms = np.zeros(devices)
        self.cpu_busy_ms = 0.0
        self.time_ms = float((t1 - t0).sum())
        self.commits_seen = 0
        self.lane_n = np.zeros(t0.size)
        self.lane_sum = np.zeros(t0.size)

    def on_flush(self, device: int, rows, start, end, batch) -> None:
        t0, t1 = self.t0[rows], self.t1[rows]
        inside = (start >= t0) & (start < t1)
        if inside.any():
            self.flushes[device] += int(inside.sum())
            self.batch_sum[device] += float(batch[inside].sum())
        # busy time is the part of each flush inside the window (a share, never above 1)
        self.busy_ms[device] += float(np.clip(np.minimum(end, t1) - np.maximum(start, t0),
                                              0.0, None).sum())

    def on_cpu(self, rows, start, service) -> None:
        t0, t1 = self.t0[rows], self.t1[rows]
        self.cpu_busy_ms += float(np.clip(np.minimum(start + service, t1)
                                          - np.maximum(start, t0), 0.0, None).sum())

    def on_commits(self, lanes, arrival, ack, durable, safe: dict) -> None:
        """``safe[kind]``: when each commit survives that failure (None: never bounded)."""
        self.commits_seen += int(lanes.size)
        m = (arrival >= self.t0[lanes]) & (arrival < self.t1[lanes])
        before = self.ack.counts.copy() if durable is ack else None
        lat = (ack - arrival)[m]
        self.ack.add(lat)
        lm = lanes[m]
        self.lane_n += np.bincount(lm, minlength=self.lane_n.size)
        self.lane_sum += np.bincount(lm, weights=lat, minlength=self.lane_n.size)
        if before is not None:  # durable when acknowledged: the same histogram
            h = self.durable
            h.counts += self.ack.counts - before
            h.total = self.ack.total
            h.sum_ms = self.ack.sum_ms
        elif durable is not None:
            self.durable.add((durable - arrival)[m])
        ack_slot = None
        for kind, s in safe.items():
            if s is None:
                continue
            if s is ack:  # acknowledged once safe: a zero window, no logarithms needed
                h = self.window[kind]
                n = int(m.sum())
                h.counts[0] += n
                h.total += n
                continue
            self.window[kind].add(np.maximum(s - ack, 0.0)[m])
            if kind in self.probes:
                p = self.probes[kind]
                if ack_slot is None:  # every probed kind shares the instants
                    terms = p.lane_terms(lanes)
                    ack_slot = p.slot(lanes, ack, terms)
                p.add(lanes, ack, s, ack_slot, terms)


def ratio_se(sums: np.ndarray, counts: np.ndarray) -> float | None:
    """Standard error of sum(sums) / sum(counts) over independent lanes (the delta method
    for a ratio estimator; Cochran, Sampling Techniques, 1977, ch. 6 — from memory)."""
    k = counts.size
    total = counts.sum()
    if k < 2 or total <= 0:
        return None
    r = sums.sum() / total
    resid = sums - r * counts
    return float(np.sqrt((resid**2).sum() * k / (k - 1)) / total)


class Series:
    """Per window of simulated time: commits that arrived in it (their ack latency and host
    crash exposure), acknowledgements and flushes that fell in it. Each lane owns the
    commits that arrived in its segment [t0, t1) and the flushes that started in it."""

    PER_DECADE = 50

    def __init__(self, t0: np.ndarray, t1: np.ndarray, window_ms: float, windows: int):
        self.t0, self.t1 = t0, t1
        self.window_ms = window_ms
        self.n = windows
        nb = self.PER_DECADE * _DECADES + 2
        self.nb = nb
        self.ack = np.zeros(windows * nb, dtype=np.int64)
        self.exposure = np.zeros(windows * nb, dtype=np.int64)
        self.arrivals = np.zeros(windows, dtype=np.int64)
        self.ack_sum_ms = np.zeros(windows)
        self.acks = np.zeros(windows, dtype=np.int64)
        self.flushes = np.zeros(windows, dtype=np.int64)
        self.exposure_known = True

    def _win(self, t: np.ndarray) -> np.ndarray:
        return np.clip((t // self.window_ms).astype(np.int64), 0, self.n - 1)

    def on_flush(self, device: int, rows, start, end, batch) -> None:
        inside = (start >= self.t0[rows]) & (start < self.t1[rows])
        if inside.any():
            self.flushes += np.bincount(self._win(start[inside]), minlength=self.n)

    def on_cpu(self, rows, start, service) -> None:
        return None

    def on_commits(self, lanes, arrival, ack, durable, safe: dict) -> None:
        m = (arrival >= self.t0[lanes]) & (arrival < self.t1[lanes])
        if not m.any():
            return
        a, k = arrival[m], ack[m]
        w = self._win(a)
        self.arrivals += np.bincount(w, minlength=self.n)
        self.ack_sum_ms += np.bincount(w, weights=k - a, minlength=self.n)
        inside = k < self.n * self.window_ms
        self.acks += np.bincount(self._win(k[inside]), minlength=self.n)
        self.ack += np.bincount(w * self.nb + hist_bins(k - a, self.PER_DECADE),
                                minlength=self.ack.size)
        host = safe.get("host_crash")
        if host is None:
            self.exposure_known = False
        else:
            x = np.maximum(host[m] - k, 0.0)
            self.exposure += np.bincount(w * self.nb + hist_bins(x, self.PER_DECADE),
                                         minlength=self.exposure.size)

    def quantile(self, which: str, window: int, q: float) -> float | None:
        arr = self.ack if which == "ack" else self.exposure
        return hist_quantile(arr[window * self.nb:(window + 1) * self.nb], q, self.PER_DECADE)
