"""Ranked options: verdict class first, then the case's objective, exposure, device work.

Order: allowed, then needs_signoff, then not_allowed. Within a class, by the objective
(top-tier p99 in the worst regime when the case has a stack, else commit p99 in the worst
regime; a saturated option last), then by exposure (the worst p99.9 exposure window to a
process or host crash, then to the loss of a device, unbounded last), then by device
operations (log flushes per second over the year), then in the case's order (stable).
Every position is explained in words against the option just above it.

:func:`build_advice` puts verdicts, ranking and cautions together into one frozen
:class:`Advice` for the renderers. Pure: no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from commitadvisor.case import Case
from commitadvisor.cautions import Caution, cautions_for
from commitadvisor.policy import (
    VERDICT_WORDS,
    VERDICTS,
    PolicySet,
    StrategyVerdict,
    format_value,
    judge_strategy,
)
from commitadvisor.results import FAILURE_KINDS, Evaluation, StrategyResult
from commitadvisor.stack import APPROXIMATIONS

__all__ = [
    "RankInput",
    "Ranked",
    "rank",
    "rank_input",
    "OptionRow",
    "Advice",
    "build_advice",
    "DEFERRAL",
]

DEFERRAL = (
    "These are model estimates computed from the figures in the case file, not measurements "
    "and not a decision. The organisation's recovery policy, its owners and the applicable "
    "regulation decide which option is acceptable."
)


@dataclass(frozen=True)
class RankInput:
    """What the ranking reads of one option."""

    name: str
    verdict: str  # allowed, needs_signoff, not_allowed
    objective_ms: float | None  # None: saturated
    objective_regime: str | None
    crash_exposure_ms: float  # worst p99.9 window to a process or host crash, over regimes
    device_exposure_ms: float  # worst p99.9 window to a device loss; inf when unbounded
    flushes_per_s: float
    position: int  # in the case file

    def key(self) -> tuple[Any, ...]:
        saturated = self.objective_ms is None
        return (VERDICTS.index(self.verdict), saturated,
                0.0 if saturated else shown(self.objective_ms),
                shown(self.crash_exposure_ms), shown(self.device_exposure_ms),
                shown(self.flushes_per_s), self.position)


def shown(x: float | None) -> float:
    """``x`` at the precision the output shows (3 significant figures): model estimates
    that differ by less than that do not decide a rank; the next figure does. Rounding is
    monotone, so a strictly better figure never ranks lower."""
    if x is None or x == 0 or math.isinf(x):
        return 0.0 if x is None else x
    return float(f"{x:.3g}")


@dataclass(frozen=True)
class Ranked:
    rank: int
    name: str
    verdict: str
    explanation: str


def _ms(x: float | None) -> str:
    return format_value(x, "ms")


def _explain(cur: RankInput, above: RankInput | None, objective_words: str) -> str:
    obj = ("saturated (no steady response time)" if cur.objective_ms is None
           else f"{objective_words} {_ms(cur.objective_ms)} (in {cur.objective_regime})")
    verdict = VERDICT_WORDS[cur.verdict]
    if above is None or above.verdict != cur.verdict:
        lead = f"first of the options that are {verdict}" if above is not None else \
            f"first: {verdict}"
        return f"{lead}; {obj}"
    if (above.objective_ms is None) != (cur.objective_ms is None):
        return f"same verdict as {above.name}, but {obj}: a saturated option comes last"
    if cur.objective_ms is not None and above.objective_ms is not None \
            and shown(cur.objective_ms) != shown(above.objective_ms):
        return f"same verdict as {above.name}; {obj}, against {_ms(above.objective_ms)}"
    same = "same verdict and " + ("saturated too" if cur.objective_ms is None
                                  else f"{objective_words} ({_ms(cur.objective_ms)})")
    if shown(cur.crash_exposure_ms) != shown(above.crash_exposure_ms):
        return (f"{same} as {above.name}; a crash can take commits acknowledged up to "
                f"{_ms(cur.crash_exposure_ms)} earlier (p99.9), against "
                f"{_ms(above.crash_exposure_ms)}")
    if shown(cur.device_exposure_ms) != shown(above.device_exposure_ms):
        return (f"{same} and crash exposure as {above.name}; the loss of a device can take "
                f"commits acknowledged up to {_ms(cur.device_exposure_ms)} earlier (p99.9), "
                f"against {_ms(above.device_exposure_ms)}")
    if shown(cur.flushes_per_s) != shown(above.flushes_per_s):
        return (f"{same} and exposure as {above.name}; "
                f"{format_value(cur.flushes_per_s, 'per_s')} log flushes against "
                f"{format_value(above.flushes_per_s, 'per_s')}")
    return f"ties with {above.name} on every figure shown; kept in the case's order"


def rank(options: Sequence[RankInput], objective_words: str = "commit p99"
         ) -> tuple[Ranked, ...]:
    """Order ``options`` (see the module docstring) and explain each position."""
    ordered = sorted(options, key=lambda o: o.key())
    out = []
    for i, cur in enumerate(ordered):
        above = ordered[i - 1] if i else None
        out.append(Ranked(i + 1, cur.name, cur.verdict, _explain(cur, above, objective_words)))
    return tuple(out)


def _worst_window(sr: StrategyResult, failures: tuple[str, ...]) -> float:
    worst = 0.0
    for rr in sr.regimes:
        for e in rr.exposures:
            if e.failure not in failures:
                continue
            if e.unbounded:
                return math.inf
            worst = max(worst, e.window_p999_ms or 0.0)
    return worst


def rank_input(sr: StrategyResult, verdict: str, stack: Any, position: int) -> RankInput:
    """The ranking's view of one strategy (``stack`` its StackResult, or None)."""
    if stack is not None:
        w = stack.worst
        objective = None if (w.saturated or sr.saturated) else w.top_p99_ms
        regime = w.regime
    else:
        w = sr.worst
        objective = None if sr.saturated else w.ack_p99_ms
        regime = w.regime
    return RankInput(
        name=sr.name, verdict=verdict, objective_ms=objective, objective_regime=regime,
        crash_exposure_ms=_worst_window(sr, ("process_crash", "host_crash")),
        device_exposure_ms=_worst_window(sr, ("device_loss",)),
        flushes_per_s=sum(v for _, v in sr.blended.flushes_per_s),
        position=position,
    )


# --------------------------------------------------------------------------- advice
@dataclass(frozen=True)
class OptionRow:
    """One ranked option with the figures the table shows and the words below it."""

    rank: int
    name: str
    kind: str
    settings: str
    verdict: str
    explanation: str
    commit_p99_ms: tuple[tuple[str, float | None], ...]  # per regime
    top_tier_p99_ms: tuple[tuple[str, float | None], ...]  # per regime; () without a stack
    exposure_p999_ms: tuple[tuple[str, float | None], ...]  # per failure, worst regime; inf
    lost_per_crash_mean: float | None  # host crash, in the regime where it loses most
    lost_per_crash_p999: float | None  # ... the p99.9 of the count at risk
    lost_per_crash_hard_bound: float | None  # ... the log buffer's bound; None: no bound
    expected_lost_per_year: float | None  # process and host crash, over the year
    expected_value_lost_per_year: float | None
    flushes_per_s: float | None  # over the year; None when a saturated regime has no figure
    saturated_in: tuple[str, ...]
    judgement: StrategyVerdict
    cautions: tuple[Caution, ...]
    stack_amplification: tuple[tuple[str, float | None], ...] = ()
    slow_request_chance: tuple[tuple[str, float | None], ...] = ()

    @property
    def verdict_words(self) -> str:
        return VERDICT_WORDS[self.verdict]


@dataclass(frozen=True)
class Advice:
    title: str
    method: str
    regimes: tuple[tuple[str, float], ...]  # name, time share
    policies: tuple[tuple[str, str], ...]  # name, source file
    switched_off: tuple[tuple[str, str], ...]  # rule id, policy that switched it off
    objective: str
    summary: str
    options: tuple[OptionRow, ...]
    currency: str | None
    has_stack: bool
    notes: tuple[str, ...]
    deferral: str = DEFERRAL


def _summary(rows: Sequence[OptionRow], policies: PolicySet) -> str:
    counts = {v: sum(1 for r in rows if r.verdict == v) for v in VERDICTS}
    parts = []
    for v in VERDICTS:
        n = counts[v]
        if v == "allowed":
            parts.append(f"{n} option{'s' if n != 1 else ''} allowed")
        elif v == "needs_signoff":
            parts.append(f"{n} need{'s' if n == 1 else ''} sign-off")
        else:
            parts.append(f"{n} not allowed")
    return ", ".join(parts) + " under " + " + ".join(policies.names)


def _loss_figures(sr: StrategyResult) -> tuple[float | None, float | None, float | None]:
    """Mean, p99.9 and hard bound of the commits a host crash loses, in the regime where
    its p99.9 (then its mean) is largest."""
    best: tuple[tuple[float, float], Any] | None = None
    for rr in sr.regimes:
        e = next((x for x in rr.exposures if x.failure == "host_crash"), None)
        if e is None or e.unbounded or e.at_risk_mean is None:
            continue
        k = (e.at_risk_p999 or 0.0, e.at_risk_mean or 0.0)
        if best is None or k > best[0]:
            best = (k, e)
    if best is None:
        return None, None, None
    e = best[1]
    return e.at_risk_mean, e.at_risk_p999, e.at_risk_bound


def _yearly(sr: StrategyResult) -> tuple[float | None, float | None]:
    lost = value = None
    for e in sr.blended.exposures:
        if e.failure == "device_loss":
            continue  # reported in its own caution: with one copy it has no finite figure
        if e.expected_lost_per_year is not None:
            lost = (lost or 0.0) + e.expected_lost_per_year
        if e.value_lost_per_year is not None:
            value = (value or 0.0) + e.value_lost_per_year
    return lost, value


def _per_failure_exposure(sr: StrategyResult) -> tuple[tuple[str, float | None], ...]:
    out = []
    for f in FAILURE_KINDS:
        vals = [e for rr in sr.regimes for e in rr.exposures if e.failure == f]
        if any(e.unbounded for e in vals):
            out.append((f, math.inf))
        elif any(e.window_p999_ms is not None for e in vals):
            out.append((f, max(e.window_p999_ms or 0.0 for e in vals)))
        else:
            out.append((f, None))
    return tuple(out)


def build_advice(case: Case, evaluation: Evaluation, policies: PolicySet,
                 stacks: tuple[Any, ...] = ()) -> Advice:
    """Verdicts, ranking and cautions for every strategy of ``evaluation``."""
    by_name = {s.strategy: s for s in stacks}
    verdicts = {sr.name: judge_strategy(policies, case, sr, by_name.get(sr.name))
                for sr in evaluation.strategies}
    inputs = [rank_input(sr, verdicts[sr.name].verdict, by_name.get(sr.name), i)
              for i, sr in enumerate(evaluation.strategies)]
    objective = "top-tier p99" if case.stack else "commit p99"
    ranked = rank(inputs, objective + " in the worst regime")
    rows = []
    for r in ranked:
        sr = evaluation.strategy(r.name)
        st = by_name.get(r.name)
        mean, p999, bound = _loss_figures(sr)
        lost, value = _yearly(sr)
        rows.append(OptionRow(
            rank=r.rank, name=sr.name, kind=sr.kind, settings=sr.settings,
            verdict=r.verdict, explanation=r.explanation,
            commit_p99_ms=tuple((rr.regime, rr.ack_p99_ms) for rr in sr.regimes),
            top_tier_p99_ms=tuple((x.regime, x.top_p99_ms) for x in st.regimes) if st else (),
            exposure_p999_ms=_per_failure_exposure(sr),
            lost_per_crash_mean=mean, lost_per_crash_p999=p999,
            lost_per_crash_hard_bound=bound,
            expected_lost_per_year=lost, expected_value_lost_per_year=value,
            flushes_per_s=sum(v for _, v in sr.blended.flushes_per_s)
            if sr.blended.flushes_per_s or not sr.saturated else None,
            saturated_in=tuple(rr.regime for rr in sr.regimes if rr.saturated)
            + (tuple(x.regime for x in st.regimes if x.saturated and not
                     sr.regime(x.regime).saturated) if st else ()),
            judgement=verdicts[sr.name],
            cautions=cautions_for(case, sr, st),
            stack_amplification=tuple((x.regime, x.amplification) for x in st.regimes
                                      if x.regime != "normal") if st else (),
            slow_request_chance=tuple((x.regime, x.slow_request_chance) for x in st.regimes)
            if st else (),
        ))
    notes = list(evaluation.notes)
    if stacks:
        notes += [f"stack model: {a}" for a in APPROXIMATIONS]
    return Advice(
        title=evaluation.title, method=evaluation.method, regimes=evaluation.regimes,
        policies=tuple((p.name, p.source) for p in policies.policies),
        switched_off=policies.switched_off, objective=objective,
        summary=_summary(rows, policies), options=tuple(rows),
        currency=case.recovery.currency, has_stack=bool(case.stack), notes=tuple(notes),
    )
