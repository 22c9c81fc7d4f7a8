"""The analytic evaluator: every strategy in every regime, then blended over time.

Regimes last minutes and flushes milliseconds, so each regime is evaluated as a steady
state (quasi-static) and then blended: per-commit figures (latency percentiles) from the
mixture of the regimes' distributions weighted by the commits each carries, per-time
figures (commits at risk at a random instant, utilisation, expected loss) by time share.
A regime that saturates marks the blend saturated too.
"""

from __future__ import annotations

from commitadvisor import latency as L
from commitadvisor.case import Case, regime_time_shares, strategy_name
from commitadvisor.results import FAILURE_KINDS, Evaluation, Exposure, RegimeResult, StrategyResult
from commitadvisor.strategies import batched, deferred, dual_device, synchronous
from commitadvisor.strategies.common import at_risk_quantile
from commitadvisor.strategies.context import build_context
from commitadvisor.summary import _settings

__all__ = ["evaluate", "blend"]

_MODULES = {
    "synchronous": synchronous,
    "batched": batched,
    "deferred": deferred,
    "dual_device": dual_device,
}


def evaluate(case: Case) -> Evaluation:
    """Evaluate every strategy of ``case`` in every regime and blended (analytic models)."""
    shares = regime_time_shares(case)
    contexts = [build_context(case, name, share) for name, share in shares.items()]
    results = []
    for s in case.strategies:
        module = _MODULES[s.kind]
        per_regime = tuple(module.evaluate_regime(case, s, ctx) for ctx in contexts)
        per_regime = _with_commit_shares(per_regime)
        results.append(StrategyResult(
            name=strategy_name(s), kind=s.kind, settings=_settings(s), regimes=per_regime,
            blended=blend(case, per_regime)))
    return Evaluation(title=case.title, method="analytic",
                      regimes=tuple(shares.items()), strategies=tuple(results))


def _with_commit_shares(rs: tuple[RegimeResult, ...]) -> tuple[RegimeResult, ...]:
    from dataclasses import replace

    carried = [r.time_share * r.throughput_per_s for r in rs]
    total = sum(carried) or 1.0
    return tuple(replace(r, commit_share=c / total) for r, c in zip(rs, carried, strict=True))


def _blend_exposure(case: Case, failure: str, rs: tuple[RegimeResult, ...]) -> Exposure:
    es = [r.exposure(failure) for r in rs]
    if any(e.unbounded for e in es):
        return next(e for e in es if e.unbounded)
    if any(e.at_risk_mean is None for e in es):
        return next(e for e in es if e.at_risk_mean is None)
    at_risk = sum(r.time_share * e.at_risk_mean for r, e in zip(rs, es, strict=True))
    per_year = getattr(case.recovery, failure).per_year
    value = case.recovery.value_per_commit
    bounds = [e.at_risk_bound for e in es if e.at_risk_bound is not None]
    if all(e.window is not None for e in es):
        # per-commit figures: percentiles of the commit-weighted mixture of the windows
        mixed = L.mixture([r.commit_share for r in rs], [e.window for e in es])
        p99, p999 = (float(v) for v in mixed.quantile([0.99, 0.999]))
        at_risk_p999 = at_risk_quantile(
            [(r.time_share, e.window, r.throughput_per_s / 1000.0, e.at_risk_bound)
             for r, e in zip(rs, es, strict=True)], 0.999)
        basis = ("window percentiles from the commit-weighted mixture of the regimes; "
                 "at-risk mean and p99.9 from the time-weighted mixture")
    else:
        mixed = None
        # a regime whose buffer stays full has commits at risk but no steady window
        windows = all(e.window_mean_ms is not None for e in es)
        p99 = max(e.window_p99_ms for e in es) if windows else None
        p999 = max(e.window_p999_ms for e in es) if windows else None
        at_risk_p999 = max(e.at_risk_p999 for e in es)
        basis = "time-weighted mean over the regimes; percentiles are the worst regime's"
    window_mean = (sum(r.commit_share * e.window_mean_ms for r, e in zip(rs, es, strict=True))
                   if all(e.window_mean_ms is not None for e in es) else None)
    return Exposure(
        failure=failure,
        window_mean_ms=window_mean,
        window_p99_ms=p99,
        window_p999_ms=p999,
        at_risk_mean=at_risk,
        at_risk_p999=at_risk_p999,
        at_risk_bound=max(bounds) if bounds else None,
        expected_lost_per_year=per_year * at_risk,
        value_lost_per_year=per_year * at_risk * value if value else None,
        basis=basis,
        window=mixed,
    )


def blend(case: Case, rs: tuple[RegimeResult, ...]) -> RegimeResult:
    """One figure set for the whole cycle; never hides a saturated regime."""
    sat = next((r for r in rs if r.saturated), None)
    exposures = tuple(_blend_exposure(case, k, rs) for k in FAILURE_KINDS)
    throughput = sum(r.time_share * r.throughput_per_s for r in rs)
    if sat is not None:
        return RegimeResult(
            regime="blended", time_share=1.0, commit_share=1.0, throughput_per_s=throughput,
            ack_mean_ms=None, ack_p50_ms=None, ack_p90_ms=None, ack_p99_ms=None,
            ack_p999_ms=None, durable_mean_ms=None, durable_p99_ms=None, exposures=exposures,
            flushes_per_s=(), mean_batch_commits=None, writer_utilisation=None,
            cpu_utilisation=None, copies_at_ack=min(r.copies_at_ack for r in rs),
            saturation=sat.saturation,
            notes=(f"saturated in regime {sat.regime}: the blend has no steady state",))
    weights = [r.commit_share for r in rs]
    ack = L.mixture(weights, [r.ack_latency for r in rs])
    q = [float(v) for v in ack.quantile([0.5, 0.9, 0.99, 0.999])]
    durable = None
    if all(r.durable_latency is not None for r in rs):
        durable = L.mixture(weights, [r.durable_latency for r in rs])
    devices = sorted({d for r in rs for d, _ in r.flushes_per_s})
    flushes = tuple((d, sum(r.time_share * dict(r.flushes_per_s).get(d, 0.0) for r in rs))
                    for d in devices)

    def tw(attr: str) -> float | None:
        vals = [getattr(r, attr) for r in rs]
        if any(v is None for v in vals):
            return None
        return sum(r.time_share * v for r, v in zip(rs, vals, strict=True))

    return RegimeResult(
        regime="blended", time_share=1.0, commit_share=1.0, throughput_per_s=throughput,
        ack_mean_ms=ack.mean_ms, ack_p50_ms=q[0], ack_p90_ms=q[1], ack_p99_ms=q[2],
        ack_p999_ms=q[3],
        durable_mean_ms=None if durable is None else durable.mean_ms,
        durable_p99_ms=None if durable is None else float(durable.quantile(0.99)),
        exposures=exposures, flushes_per_s=flushes,
        mean_batch_commits=tw("mean_batch_commits"), writer_utilisation=tw("writer_utilisation"),
        cpu_utilisation=tw("cpu_utilisation"), copies_at_ack=min(r.copies_at_ack for r in rs),
        notes=("blended: latency percentiles from the commit-weighted mixture of the regimes; "
               "look at each regime as well, a burst's tail hides in an hourly figure",),
        ack_latency=ack, durable_latency=durable,
    )
