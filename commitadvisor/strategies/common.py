"""Pieces every strategy uses: exposure figures, saturation, and assembling a RegimeResult."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from commitadvisor import latency as L
from commitadvisor.case import Case
from commitadvisor.results import FAILURE_KINDS, Exposure, RegimeResult, Saturation

__all__ = ["Partial", "safe", "unbounded", "from_window", "assemble", "saturated_result",
           "full_buffer", "mixed_poisson_quantile", "at_risk_quantile"]


@dataclass(frozen=True)
class Partial:
    """What a strategy computed for one regime, before the common figures are added."""

    ack: L.Latency
    durable: L.Latency | None  # None when no device the strategy uses counts as durable
    throughput_per_ms: float
    exposures: tuple[Exposure, ...]
    flushes_per_ms: tuple[tuple[str, float], ...]
    mean_batch: float | None
    writer_busy: float | None
    cpu_busy: float | None
    copies_at_ack: int
    notes: tuple[str, ...] = ()


def safe(failure: str) -> Exposure:
    """No acknowledged commit is lost to this failure (the commit waited for a durable copy)."""
    return Exposure(failure, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, False,
                    "acknowledged only after a durable copy")


def unbounded(failure: str, why: str) -> Exposure:
    return Exposure(failure, None, None, None, None, None, None, None, None, True, why)


def mixed_poisson_quantile(window: L.Latency, rate_per_ms: float, q: float) -> float:
    """q-quantile of the at-risk count at a random instant: a Poisson count with random mean
    lambda W (the distributional form of Little's law for Poisson arrivals and first-in
    first-out durability; Haji and Newell, Operations Research 1971 — from memory)."""
    return at_risk_quantile([(1.0, window, rate_per_ms, None)], q)


# quadrature of W's quantiles: 700 points in each of (0, 0.99), (0.99, 0.9999) and the top
# (on the shipped cases 700 and 2000 points give the same counts)
_U_BODY = (np.arange(700) + 0.5) / 700
_U_AT_RISK = np.concatenate([_U_BODY * 0.99, 0.99 + _U_BODY * 0.0099, 0.9999 + _U_BODY * 0.0000999])
_W_AT_RISK = np.concatenate([np.full(700, 0.99), np.full(700, 0.0099),
                             np.full(700, 0.0000999)]) / 700
_W_AT_RISK = _W_AT_RISK / _W_AT_RISK.sum()


def at_risk_quantile(parts: list[tuple[float, L.Latency, float, float | None]], q: float) -> float:
    """q-quantile of the at-risk count at a random instant when, with probability w_i, the
    instant falls in part i (a regime) whose count is mixed Poisson with mean lambda_i W_i,
    capped by the hard bound b_i when there is one: P(N <= n) = sum_i w_i P_i(N <= n).
    ``parts`` holds (w_i, W_i, lambda_i per ms, b_i)."""
    from scipy.special import pdtr

    total = sum(p[0] for p in parts)
    comps = [(w / total, rate * np.asarray(win.quantile(_U_AT_RISK), dtype=float), bound)
             for w, win, rate, bound in parts if w > 0]

    def cdf(n: int) -> float:
        return sum(w * (1.0 if bound is not None and n >= bound
                        else float(_W_AT_RISK @ pdtr(n, means)))
                   for w, means, bound in comps)

    hi_all = max(4 * float(m.max()) + 50 for _, m, _ in comps)
    lo, hi = -1, int(max(10, hi_all))
    while hi - lo > 1:  # smallest n with P(count <= n) >= q, by bisection
        mid = (lo + hi) // 2
        if cdf(mid) >= q:
            hi = mid
        else:
            lo = mid
    return float(hi)


def from_window(case: Case, failure: str, window: L.Latency, rate_per_ms: float,
                bound: float | None, basis: str) -> Exposure:
    """Exposure figures from the window W (ack to safe): at risk = lambda E[W] (Little's law,
    Little 1961), its p99.9 by the mixed-Poisson form, capped by the hard bound."""
    mean_at_risk = rate_per_ms * window.mean_ms
    p999 = mixed_poisson_quantile(window, rate_per_ms, 0.999)
    if bound is not None:
        p999 = min(p999, bound)
        mean_at_risk = min(mean_at_risk, bound)
    per_year = getattr(case.recovery, failure).per_year
    lost = per_year * mean_at_risk
    value = lost * case.recovery.value_per_commit if case.recovery.value_per_commit else None
    return Exposure(failure, window.mean_ms, float(window.quantile(0.99)),
                    float(window.quantile(0.999)), mean_at_risk, p999, bound, lost, value,
                    False, basis, window)


def assemble(regime: str, time_share: float, p: Partial) -> RegimeResult:
    ack = p.ack
    notes = list(p.notes)
    if ack.lost_mass > 1e-6:
        notes.append(f"numeric grid lost {ack.lost_mass:.1e} of the ack-latency mass beyond its "
                     "span; the highest percentiles may read low")
    q = ack.quantile(np.array([0.5, 0.9, 0.99, 0.999]))
    return RegimeResult(
        regime=regime, time_share=time_share, commit_share=0.0,
        throughput_per_s=p.throughput_per_ms * 1000.0,
        ack_mean_ms=ack.mean_ms, ack_p50_ms=float(q[0]), ack_p90_ms=float(q[1]),
        ack_p99_ms=float(q[2]), ack_p999_ms=float(q[3]),
        durable_mean_ms=p.durable.mean_ms if p.durable is not None else None,
        durable_p99_ms=float(p.durable.quantile(0.99)) if p.durable is not None else None,
        exposures=p.exposures,
        flushes_per_s=tuple((d, f * 1000.0) for d, f in p.flushes_per_ms),
        mean_batch_commits=p.mean_batch, writer_utilisation=p.writer_busy,
        cpu_utilisation=p.cpu_busy, copies_at_ack=p.copies_at_ack,
        saturation=None, notes=tuple(notes), ack_latency=ack, durable_latency=p.durable,
    )


def saturated_result(regime: str, time_share: float, sat: Saturation, copies: int,
                     notes: tuple[str, ...] = (),
                     exposures: tuple[Exposure, ...] | None = None) -> RegimeResult:
    """A regime that cannot keep up: the saturation, and no latency figures. ``exposures``
    where the loss is still known (a deferred buffer that stays full); else none."""
    none_exp = exposures or tuple(Exposure(k, None, None, None, None, None, None, None, None,
                                           False, "saturated: no steady state")
                                  for k in FAILURE_KINDS)
    return RegimeResult(
        regime=regime, time_share=time_share, commit_share=0.0,
        throughput_per_s=sat.saturating_rate_per_s,
        ack_mean_ms=None, ack_p50_ms=None, ack_p90_ms=None, ack_p99_ms=None, ack_p999_ms=None,
        durable_mean_ms=None, durable_p99_ms=None, exposures=none_exp, flushes_per_s=(),
        mean_batch_commits=None, writer_utilisation=None, cpu_utilisation=None,
        copies_at_ack=copies, saturation=sat, notes=notes,
    )


def saturation(resource: str, capacity_per_ms: float, offered_per_ms: float,
               regime_duration_s: float | None, what: str) -> Saturation:
    """Backlog growth while the regime lasts and its drain time afterwards (at the normal
    regime's spare capacity, which the caller does not know here: reported as None when the
    regime is normal, which has no end)."""
    growth = max(0.0, offered_per_ms - capacity_per_ms) * 1000.0
    return Saturation(
        resource=resource, saturating_rate_per_s=capacity_per_ms * 1000.0,
        offered_rate_per_s=offered_per_ms * 1000.0, backlog_growth_per_s=growth,
        drain_time_s=None,
        message=(f"{what} saturates at {capacity_per_ms * 1000:.0f} commits/s; "
                 f"{offered_per_ms * 1000:.0f}/s are offered, so the backlog grows by "
                 f"{growth:.0f} commits each second"
                 + (f" (about {growth * regime_duration_s:.0f} commits over the "
                    f"{regime_duration_s:g} s regime)" if regime_duration_s else "")),
    )


def full_buffer(case: Case, failure: str, bound: float) -> Exposure:
    """A buffer that stays full (its flushes cannot keep up): every instant holds ``bound``
    acknowledged commits that this failure would take; no steady window exists."""
    per_year = getattr(case.recovery, failure).per_year
    lost = per_year * bound
    value = lost * case.recovery.value_per_commit if case.recovery.value_per_commit else None
    return Exposure(failure, None, None, None, float(bound), float(bound), float(bound), lost,
                    value, False, "saturated: the log buffer stays full")
