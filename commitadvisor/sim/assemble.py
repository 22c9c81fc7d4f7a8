"""Turn what a segment measured into the project's result objects, and blend regimes.

Blending (one figure set for the whole cycle): per-commit figures come from the pooled
commits of all regimes, each regime's histogram weighted by the commits it carries (time
share x its measured throughput); per-time figures (throughput, at risk at a random
instant, flushes, utilisation) are weighted by time share; the at-risk p99.9 is read from
the time-share mixture of the regimes' probe distributions. A saturated regime makes the
blend saturated: it has no steady state, and no figure hides that.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from commitadvisor import latency as lat
from commitadvisor.results import FAILURE_KINDS, Exposure, RegimeResult, Saturation
from commitadvisor.sim.record import Steady, hist_quantile, ratio_se

__all__ = ["Measured", "measured_from", "regime_result", "saturated", "blend"]

_QS = (0.5, 0.9, 0.99, 0.999)


@dataclass(frozen=True)
class Measured:
    """A steady segment's figures, kept for blending (histogram counts as tuples)."""

    regime: str
    time_share: float
    time_ms: float
    commits: int
    ack_counts: tuple[int, ...]
    ack_mean_ms: float | None
    durable_counts: tuple[int, ...]
    durable_mean_ms: float | None
    window_counts: tuple[tuple[str, tuple[int, ...], float | None], ...]
    probe_counts: tuple[tuple[str, tuple[int, ...]], ...]  # at-risk value -> instants
    flushes: tuple[int, ...]
    batch_sum: tuple[float, ...]
    busy_ms: tuple[float, ...]
    cpu_busy_ms: float
    probes: int
    ack_mean_se_ms: float | None  # standard error over the independent lanes
    at_risk_se: tuple[tuple[str, float | None], ...]


def measured_from(rec: Steady, regime: str, time_share: float) -> Measured:
    probe_counts, risk_se = [], []
    for kind, p in rec.probes.items():
        v = p.values()
        probe_counts.append((kind, tuple(int(c) for c in np.bincount(np.maximum(v, 0)))))
        per_lane = v.reshape(p.lanes, p.k).sum(axis=1).astype(float)
        risk_se.append((kind, ratio_se(per_lane, np.full(p.lanes, float(p.k)))))
    return Measured(
        regime=regime, time_share=time_share, time_ms=rec.time_ms, commits=rec.ack.total,
        ack_counts=tuple(rec.ack.counts.tolist()), ack_mean_ms=rec.ack.mean_ms,
        durable_counts=tuple(rec.durable.counts.tolist()), durable_mean_ms=rec.durable.mean_ms,
        window_counts=tuple((k, tuple(h.counts.tolist()), h.mean_ms)
                            for k, h in rec.window.items()),
        probe_counts=tuple(probe_counts),
        flushes=tuple(rec.flushes.tolist()), batch_sum=tuple(rec.batch_sum.tolist()),
        busy_ms=tuple(rec.busy_ms.tolist()), cpu_busy_ms=rec.cpu_busy_ms,
        probes=sum(p.k * p.lanes for p in rec.probes.values()) // max(1, len(rec.probes)),
        ack_mean_se_ms=ratio_se(rec.lane_sum, rec.lane_n), at_risk_se=tuple(risk_se))


def _q(counts, q: float) -> float | None:
    return hist_quantile(np.asarray(counts, dtype=float), q)


def _probe_quantile(counts: np.ndarray, q: float) -> float | None:
    total = counts.sum()
    if total <= 0:
        return None
    return float(np.searchsorted(np.cumsum(counts), q * total - 1e-9 * total, side="left"))


def _grid_latency(counts: np.ndarray, mean_ms: float | None) -> lat.GridLatency | None:
    """The measured distribution as a grid latency (cdf at the bins' upper edges)."""
    total = counts.sum()
    if total <= 0 or mean_ms is None:
        return None
    n = counts.size - 2
    edges = np.concatenate([[1e-4], 10 ** (-4 + np.arange(1, n + 1) / 200.0)])
    cdf = np.cumsum(counts[:-1]) / total
    x = np.concatenate([[0.0], edges])
    c = np.concatenate([[0.0], cdf])
    mid = np.concatenate([[0.0], np.sqrt(edges[:-1] * edges[1:])])
    second = float((counts[:-1] * mid**2).sum() / total)
    return lat.GridLatency(x, np.clip(c, 0, 1), mean_ms, second,
                           float(counts[-1] / total), "simulated")


@dataclass(frozen=True)
class Figures:
    """How a strategy's exposures are to be read (which are unbounded and why)."""

    unbounded: tuple[tuple[str, str], ...]
    bound: float | None  # at-risk hard bound for process and host crash (deferred)
    copies_at_ack: int
    devices: tuple[str, ...]
    cpus: int | None
    per_year: tuple[tuple[str, float], ...]
    value_per_commit: float | None


def _exposure(kind: str, counts, mean, probe, fig: Figures, basis: str) -> Exposure:
    why = dict(fig.unbounded).get(kind)
    if why is not None:
        return Exposure(kind, None, None, None, None, None, None, None, None, True, why)
    counts = np.asarray(counts, dtype=float)
    if probe is None:
        # nothing probed: every window is zero by construction (acknowledged after the copy)
        at_risk, p999 = 0.0, 0.0
    else:
        values = np.arange(probe.size)
        at_risk = float((values * probe).sum() / probe.sum())
        p999 = _probe_quantile(probe, 0.999)
    bound = fig.bound if kind in ("process_crash", "host_crash") else None
    per_year = dict(fig.per_year)[kind]
    lost = per_year * at_risk
    value = lost * fig.value_per_commit if fig.value_per_commit else None
    return Exposure(kind, mean, _q(counts, 0.99), _q(counts, 0.999), at_risk, p999, bound,
                    lost, value, False, basis, window=_grid_latency(counts, mean))


def regime_result(m: Measured, fig: Figures, notes: tuple[str, ...]) -> RegimeResult:
    """A steady segment as a RegimeResult (commit_share is set later, by the caller)."""
    t = m.time_ms
    ack = np.asarray(m.ack_counts, dtype=float)
    q = [_q(ack, x) for x in _QS]
    probes = dict(m.probe_counts)
    windows = {k: (c, mean) for k, c, mean in m.window_counts}
    basis = (f"simulated: windows of {m.commits:,} commits; at risk seen at {m.probes:,} "
             "random instants (time average, not Little's law)")
    exposures = tuple(
        _exposure(k, windows[k][0], windows[k][1],
                  np.asarray(probes[k], dtype=float) if k in probes else None, fig, basis)
        for k in FAILURE_KINDS)
    nd = len(fig.devices)
    batch = [m.batch_sum[i] / m.flushes[i] if m.flushes[i] else None for i in range(nd)]
    busy = [m.busy_ms[i] / t for i in range(nd)]
    durable = np.asarray(m.durable_counts, dtype=float)
    return RegimeResult(
        regime=m.regime, time_share=m.time_share, commit_share=0.0,
        throughput_per_s=m.commits / t * 1000.0,
        ack_mean_ms=m.ack_mean_ms, ack_p50_ms=q[0], ack_p90_ms=q[1], ack_p99_ms=q[2],
        ack_p999_ms=q[3],
        durable_mean_ms=m.durable_mean_ms if durable.sum() else None,
        durable_p99_ms=_q(durable, 0.99) if durable.sum() else None,
        exposures=exposures,
        flushes_per_s=tuple((fig.devices[i], m.flushes[i] / t * 1000.0) for i in range(nd)),
        mean_batch_commits=max((b for b in batch if b is not None), default=None),
        writer_utilisation=max(busy) if busy else None,
        cpu_utilisation=(m.cpu_busy_ms / (fig.cpus * t)) if fig.cpus else None,
        copies_at_ack=fig.copies_at_ack, notes=notes,
        ack_latency=_grid_latency(ack, m.ack_mean_ms))


def saturated(regime: str, time_share: float, sat: Saturation, copies: int,
              notes: tuple[str, ...]) -> RegimeResult:
    none = tuple(Exposure(k, None, None, None, None, None, None, None, None, False,
                          "saturated: no steady state") for k in FAILURE_KINDS)
    return RegimeResult(
        regime=regime, time_share=time_share, commit_share=0.0,
        throughput_per_s=sat.saturating_rate_per_s, ack_mean_ms=None, ack_p50_ms=None,
        ack_p90_ms=None, ack_p99_ms=None, ack_p999_ms=None, durable_mean_ms=None,
        durable_p99_ms=None, exposures=none, flushes_per_s=(), mean_batch_commits=None,
        writer_utilisation=None, cpu_utilisation=None, copies_at_ack=copies,
        saturation=sat, notes=notes)


def with_commit_shares(rs: list[RegimeResult]) -> list[RegimeResult]:
    carried = [r.time_share * r.throughput_per_s for r in rs]
    total = sum(carried) or 1.0
    return [replace(r, commit_share=c / total) for r, c in zip(rs, carried, strict=True)]


def blend(rs: list[RegimeResult], ms: list[Measured | None], fig: Figures) -> RegimeResult:
    """The whole cycle: see the module docstring."""
    throughput = sum(r.time_share * r.throughput_per_s for r in rs)
    sat = next((r for r in rs if r.saturated), None)
    if sat is not None:
        none = tuple(Exposure(k, None, None, None, None, None, None, None, None,
                              any(r.exposure(k).unbounded for r in rs),
                              "saturated in a regime: no steady state")
                     for k in FAILURE_KINDS)
        return RegimeResult(
            regime="blended", time_share=1.0, commit_share=1.0, throughput_per_s=throughput,
            ack_mean_ms=None, ack_p50_ms=None, ack_p90_ms=None, ack_p99_ms=None,
            ack_p999_ms=None, durable_mean_ms=None, durable_p99_ms=None, exposures=none,
            flushes_per_s=(), mean_batch_commits=None, writer_utilisation=None,
            cpu_utilisation=None, copies_at_ack=fig.copies_at_ack, saturation=sat.saturation,
            notes=(f"saturated in regime {sat.regime}: the blend has no steady state",))
    weights = np.array([r.commit_share for r in rs])

    def pooled(get) -> np.ndarray:
        out = None
        for w, m in zip(weights, ms, strict=True):
            c = np.asarray(get(m), dtype=float)
            tot = c.sum()
            if tot <= 0:
                continue
            part = w * c / tot
            out = part if out is None else out + part
        return out if out is not None else np.zeros(1)

    def wmean(vals) -> float | None:
        if any(v is None for v in vals):
            return None
        return float(sum(w * v for w, v in zip(weights, vals, strict=True)))

    def tmean(vals) -> float | None:
        if any(v is None for v in vals):
            return None
        return float(sum(r.time_share * v for r, v in zip(rs, vals, strict=True)))

    ack = pooled(lambda m: m.ack_counts)
    durable = pooled(lambda m: m.durable_counts)
    exposures = []
    for k in FAILURE_KINDS:
        es = [r.exposure(k) for r in rs]
        if any(e.unbounded for e in es):
            exposures.append(next(e for e in es if e.unbounded))
            continue
        counts = pooled(lambda m, k=k: dict((a, b) for a, b, _ in m.window_counts)[k])
        probe_parts = [dict(m.probe_counts).get(k) for m in ms]
        p999 = 0.0
        if all(p is not None for p in probe_parts):
            size = max(len(p) for p in probe_parts)
            mix = np.zeros(size)
            for r, p in zip(rs, probe_parts, strict=True):
                arr = np.zeros(size)
                arr[:len(p)] = p
                mix += r.time_share * arr / arr.sum()
            p999 = _probe_quantile(mix, 0.999)
        at_risk = tmean([e.at_risk_mean for e in es])
        per_year = dict(fig.per_year)[k]
        lost = per_year * at_risk if at_risk is not None else None
        exposures.append(Exposure(
            k, wmean([e.window_mean_ms for e in es]), _q(counts, 0.99), _q(counts, 0.999),
            at_risk, p999, es[0].at_risk_bound, lost,
            lost * fig.value_per_commit if (lost is not None and fig.value_per_commit) else None,
            False, "simulated: pooled commits of all regimes; at risk by time share",
            window=_grid_latency(counts, wmean([e.window_mean_ms for e in es]))))
    devices = fig.devices
    flushes = tuple((d, sum(r.time_share * dict(r.flushes_per_s).get(d, 0.0) for r in rs))
                    for d in devices)
    ack_mean = wmean([r.ack_mean_ms for r in rs])
    return RegimeResult(
        regime="blended", time_share=1.0, commit_share=1.0, throughput_per_s=throughput,
        ack_mean_ms=ack_mean, ack_p50_ms=_q(ack, 0.5), ack_p90_ms=_q(ack, 0.9),
        ack_p99_ms=_q(ack, 0.99), ack_p999_ms=_q(ack, 0.999),
        durable_mean_ms=wmean([r.durable_mean_ms for r in rs]),
        durable_p99_ms=_q(durable, 0.99) if durable.sum() else None,
        exposures=tuple(exposures), flushes_per_s=flushes,
        mean_batch_commits=tmean([r.mean_batch_commits for r in rs]),
        writer_utilisation=tmean([r.writer_utilisation for r in rs]),
        cpu_utilisation=tmean([r.cpu_utilisation for r in rs]),
        copies_at_ack=fig.copies_at_ack,
        notes=("blended: percentiles from the pooled commits of all regimes (weighted by the "
               "commits each carries); look at each regime too, a burst hides in the blend",),
        ack_latency=_grid_latency(ack, ack_mean))

