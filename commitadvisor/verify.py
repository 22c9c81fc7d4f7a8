"""The analytic evaluation against the simulated one: figure by figure, with a tolerance.

``compare(analytic, simulated)`` pairs every strategy and regime (and the blend) by name and
compares each figure both evaluations give. A figure is flagged when its relative difference
exceeds the figure's tolerance and its absolute difference exceeds the floor (so that two
near-zero figures never flag), when one side has it and the other does not, when one side
says saturated or unbounded and the other does not.

Default tolerances (relative, unless the name says otherwise):

- means (ack, durable, exposure window, at risk, throughput, flushes per second, mean
  batch): 3 %
- p99 figures: 5 %; p50 and p90: 5 %
- p99.9 figures (latency and at-risk count): 10 % — a p99.9 rests on a thousandth of the
  commits, so it is the noisiest figure of a simulation
- utilisations (writer, CPU): 0.02 absolute
- floor: differences under 0.005 ms (5 microseconds) or 0.5 commits are not flagged.

Given the simulation's own standard error of each ack mean (``mean_noise``), a flagged mean
whose difference is within three of them says so in its note; it stays flagged.
"""

from __future__ import annotations

from dataclasses import dataclass

from commitadvisor.results import FAILURE_KINDS, Evaluation, RegimeResult

__all__ = ["Tolerances", "ComparisonRow", "Comparison", "compare", "mean_noise"]


@dataclass(frozen=True)
class Tolerances:
    mean: float = 0.03
    p99: float = 0.05
    quantile: float = 0.05
    tail: float = 0.10
    utilisation_abs: float = 0.02
    floor_ms: float = 0.005
    floor_commits: float = 0.5


@dataclass(frozen=True)
class ComparisonRow:
    strategy: str
    regime: str
    figure: str
    analytic: float | None
    simulated: float | None
    relative_difference: float | None  # (simulated - analytic) / |analytic|
    tolerance: str  # the tolerance used, in words ("3 %", "0.02 absolute", "must agree")
    flagged: bool
    note: str = ""


@dataclass(frozen=True)
class Comparison:
    rows: tuple[ComparisonRow, ...]
    seed: int | None
    tolerances: Tolerances

    @property
    def flagged(self) -> tuple[ComparisonRow, ...]:
        return tuple(r for r in self.rows if r.flagged)

    @property
    def agrees(self) -> bool:
        return not self.flagged

    def summary(self) -> str:
        bad = self.flagged
        if not bad:
            return (f"all {len(self.rows)} figures agree within tolerance "
                    f"(simulation seed {self.seed})")
        worst = ", ".join(f"{r.strategy}/{r.regime}/{r.figure}" for r in bad[:5])
        more = f" and {len(bad) - 5} more" if len(bad) > 5 else ""
        return (f"{len(bad)} of {len(self.rows)} figures differ beyond tolerance "
                f"(simulation seed {self.seed}): {worst}{more}")


def _pct(x: float) -> str:
    return f"{x * 100:g} %"


def _rel(strategy, regime, figure, a, s, tol: float, floor: float) -> ComparisonRow:
    if a is None and s is None:
        return ComparisonRow(strategy, regime, figure, None, None, None, _pct(tol), False,
                             "neither gives it")
    if a is None or s is None:
        return ComparisonRow(strategy, regime, figure, a, s, None, _pct(tol), True,
                             "only one of the two gives it")
    diff = s - a
    rel = diff / abs(a) if a != 0 else (0.0 if diff == 0 else None)
    flagged = abs(diff) > floor and (rel is None or abs(rel) > tol)
    return ComparisonRow(strategy, regime, figure, a, s, rel, _pct(tol), flagged)


def _abs(strategy, regime, figure, a, s, tol: float) -> ComparisonRow:
    words = f"{tol:g} absolute"
    if a is None or s is None:
        return ComparisonRow(strategy, regime, figure, a, s, None, words,
                             (a is None) != (s is None),
                             "" if a is None and s is None else "only one of the two gives it")
    rel = (s - a) / abs(a) if a else None
    return ComparisonRow(strategy, regime, figure, a, s, rel, words, abs(s - a) > tol)


def _regime_rows(name: str, a: RegimeResult, s: RegimeResult, t: Tolerances):
    reg = a.regime
    if a.saturated or s.saturated:
        same = a.saturated and s.saturated
        note = "both saturated" if same else (
            f"{'analytic' if a.saturated else 'simulated'} says saturated, the other does not")
        yield ComparisonRow(name, reg, "saturated", float(a.saturated), float(s.saturated),
                            None, "must agree", not same, note)
        if same:
            yield _rel(name, reg, "saturating_rate_per_s", a.saturation.saturating_rate_per_s,
                       s.saturation.saturating_rate_per_s, t.mean, t.floor_commits)
        return
    ms, n = t.floor_ms, t.floor_commits
    yield _rel(name, reg, "throughput_per_s", a.throughput_per_s, s.throughput_per_s, t.mean, n)
    yield _rel(name, reg, "ack_mean_ms", a.ack_mean_ms, s.ack_mean_ms, t.mean, ms)
    yield _rel(name, reg, "ack_p50_ms", a.ack_p50_ms, s.ack_p50_ms, t.quantile, ms)
    yield _rel(name, reg, "ack_p90_ms", a.ack_p90_ms, s.ack_p90_ms, t.quantile, ms)
    yield _rel(name, reg, "ack_p99_ms", a.ack_p99_ms, s.ack_p99_ms, t.p99, ms)
    yield _rel(name, reg, "ack_p999_ms", a.ack_p999_ms, s.ack_p999_ms, t.tail, ms)
    yield _rel(name, reg, "durable_mean_ms", a.durable_mean_ms, s.durable_mean_ms, t.mean, ms)
    yield _rel(name, reg, "durable_p99_ms", a.durable_p99_ms, s.durable_p99_ms, t.p99, ms)
    for kind in FAILURE_KINDS:
        ea, es = a.exposure(kind), s.exposure(kind)
        if ea.unbounded or es.unbounded:
            same = ea.unbounded and es.unbounded
            yield ComparisonRow(name, reg, f"{kind}.unbounded", float(ea.unbounded),
                                float(es.unbounded), None, "must agree", not same,
                                "both unbounded" if same else "only one says unbounded")
            continue
        yield _rel(name, reg, f"{kind}.window_mean_ms", ea.window_mean_ms, es.window_mean_ms,
                   t.mean, ms)
        yield _rel(name, reg, f"{kind}.window_p99_ms", ea.window_p99_ms, es.window_p99_ms,
                   t.p99, ms)
        yield _rel(name, reg, f"{kind}.window_p999_ms", ea.window_p999_ms, es.window_p999_ms,
                   t.tail, ms)
        yield _rel(name, reg, f"{kind}.at_risk_mean", ea.at_risk_mean, es.at_risk_mean,
                   t.mean, n)
        yield _rel(name, reg, f"{kind}.at_risk_p999", ea.at_risk_p999, es.at_risk_p999,
                   t.tail, n)
    fa, fs = dict(a.flushes_per_s), dict(s.flushes_per_s)
    for dev in sorted(set(fa) | set(fs)):
        yield _rel(name, reg, f"flushes_per_s[{dev}]", fa.get(dev), fs.get(dev), t.mean, n)
    yield _rel(name, reg, "mean_batch_commits", a.mean_batch_commits, s.mean_batch_commits,
               t.mean, n)
    yield _abs(name, reg, "writer_utilisation", a.writer_utilisation, s.writer_utilisation,
               t.utilisation_abs)
    yield _abs(name, reg, "cpu_utilisation", a.cpu_utilisation, s.cpu_utilisation,
               t.utilisation_abs)
    yield ComparisonRow(name, reg, "copies_at_ack", float(a.copies_at_ack),
                        float(s.copies_at_ack), None, "must agree",
                        a.copies_at_ack != s.copies_at_ack)


def mean_noise(simulation) -> dict[tuple[str, str], float]:
    """Relative standard error of the simulated ack mean per (strategy, regime), from the
    independent lanes of each steady segment of a ``simulate.Simulation``."""
    out = {}
    for seg in simulation.segments:
        se = getattr(seg, "ack_mean_se_ms", None)
        if not se:
            continue
        try:
            r = simulation.evaluation.strategy(seg.strategy).regime(seg.regime)
        except (StopIteration, KeyError, ValueError):
            continue
        if r.ack_mean_ms:
            out[(seg.strategy, seg.regime)] = se / r.ack_mean_ms
    return out


def _with_noise(row: ComparisonRow, rel_se: float | None) -> ComparisonRow:
    """A flagged mean whose difference is within three of the simulation's own standard
    errors says so (it stays flagged: the tolerance does not widen)."""
    if (not row.flagged or rel_se is None or row.relative_difference is None
            or row.figure not in ("ack_mean_ms", "durable_mean_ms")):
        return row
    if abs(row.relative_difference) > 3 * rel_se:
        return row
    from dataclasses import replace

    return replace(row, note=f"within 3 standard errors of the simulation (±{rel_se:.1%}): "
                             "rerun with more --commits to tell")


def compare(analytic: Evaluation, simulated: Evaluation,
            tolerances: Tolerances | None = None,
            noise: dict[tuple[str, str], float] | None = None) -> Comparison:
    """Every figure of every strategy and regime (and the blend), analytic against
    simulated; see the module docstring for the tolerances. ``noise``: the simulated ack
    mean's relative standard error per (strategy, regime) (see :func:`mean_noise`), used
    only to annotate flagged means."""
    t = tolerances or Tolerances()
    rows: list[ComparisonRow] = []
    sim_names = {s.name for s in simulated.strategies}
    for sa in analytic.strategies:
        if sa.name not in sim_names:
            rows.append(ComparisonRow(sa.name, "-", "strategy", None, None, None,
                                      "must agree", True, "not simulated"))
            continue
        ss = simulated.strategy(sa.name)
        sim_regimes = {r.regime: r for r in ss.regimes}
        for ra in (*sa.regimes, sa.blended):
            rs = ss.blended if ra.regime == "blended" else sim_regimes.get(ra.regime)
            if rs is None:
                rows.append(ComparisonRow(sa.name, ra.regime, "regime", None, None, None,
                                          "must agree", True, "not simulated"))
                continue
            se = (noise or {}).get((sa.name, ra.regime))
            rows.extend(_with_noise(r, se) for r in _regime_rows(sa.name, ra, rs, t))
    return Comparison(rows=tuple(rows), seed=simulated.seed, tolerances=t)
