"""The organisation's recovery policy as rules, and the verdict each strategy gets under them.

A rule names a metric from the fixed registry below, a comparison from a fixed set, a
threshold (a literal in the metric's unit, or a field of the case's ``recovery`` or
``goals`` section converted to the metric's unit), the strategies it applies to, a severity
and a message template. Rules are data: nothing in a rule file is evaluated as code.

Judging is per regime: a rule is checked in every regime it applies to and fails if it fails
in any of them; a blended figure never overrides a failing regime. Figures per year
(expected loss) are judged on the whole year. The verdict is the gravest severity among the
broken rules (``not_allowed`` > ``needs_signoff``); a broken ``warning`` is reported and does
not change the verdict.

Device loss: when the case asks for fewer than two durable copies at acknowledgement
(``recovery.copies_at_ack`` < 2), the organisation has not asked the log to survive the loss
of a device, so device-loss figures (a single copy facing the loss of its device, which is
unbounded, and the lag of a second copy alike) are reported as cautions, not verdicts. With
``copies_at_ack`` >= 2 they are judged like any other figure (and a single-copy strategy is
already not allowed by the copies rule).

Pure: no I/O. The loader (commitadvisor.rules_file) builds the frozen rules given here.
"""

from __future__ import annotations

import math
import string
from dataclasses import dataclass
from typing import Any

from commitadvisor.case import Case, DualDevice
from commitadvisor.results import (
    FAILURE_KINDS,
    Evaluation,
    RegimeResult,
    StrategyResult,
    json_float,
)

__all__ = [
    "SEVERITIES",
    "VERDICTS",
    "COMPARISONS",
    "METRICS",
    "CASE_FIELDS",
    "PLACEHOLDERS",
    "Metric",
    "Threshold",
    "Rule",
    "Policy",
    "PolicySet",
    "Check",
    "RuleOutcome",
    "StrategyVerdict",
    "judge",
    "judge_strategy",
    "strategy_devices_count_as_durable",
    "convert",
    "format_value",
]

SEVERITIES = ("not_allowed", "needs_signoff", "warning")
VERDICTS = ("allowed", "needs_signoff", "not_allowed")
VERDICT_WORDS = {"allowed": "allowed", "needs_signoff": "needs sign-off",
                 "not_allowed": "not allowed"}

COMPARISONS: dict[str, str] = {
    "at_most": "at most",
    "below": "below",
    "at_least": "at least",
    "above": "above",
    "equals": "equal to",
    "is_true": "true",
    "is_false": "false",
}
_BOOL_COMPARISONS = ("is_true", "is_false")

FAILURE_WORDS = {
    "process_crash": "a crash of the database process",
    "host_crash": "a host crash or power loss",
    "device_loss": "the loss of a log device",
}


@dataclass(frozen=True)
class Metric:
    """One entry of the metric registry."""

    name: str
    unit: str  # ms, commits, copies, per_s, share, per_year, value, bool
    words: str
    scope: str  # "regime" (checked in each regime), "year" (whole year), "strategy" (once)
    per_failure: bool = False
    needs_stack: bool = False

    @property
    def is_bool(self) -> bool:
        return self.unit == "bool"


METRICS: dict[str, Metric] = {m.name: m for m in (
    Metric("commit_mean_ms", "ms", "mean commit acknowledgement time", "regime"),
    Metric("commit_p99_ms", "ms", "commit acknowledgement p99", "regime"),
    Metric("commit_p999_ms", "ms", "commit acknowledgement p99.9", "regime"),
    Metric("top_tier_mean_ms", "ms", "mean top-tier response time", "regime", needs_stack=True),
    Metric("top_tier_p99_ms", "ms", "top-tier response p99", "regime", needs_stack=True),
    Metric("slow_request_chance", "share",
           "chance that a top-tier request meets a commit slower than the commit goal",
           "regime", needs_stack=True),
    Metric("exposure_window_mean_ms", "ms", "mean exposure window", "regime", per_failure=True),
    Metric("exposure_window_p99_ms", "ms", "exposure window p99", "regime", per_failure=True),
    Metric("exposure_window_p999_ms", "ms", "exposure window p99.9", "regime", per_failure=True),
    Metric("lost_commits_per_crash_mean", "commits",
           "acknowledged commits lost per failure, on average", "regime", per_failure=True),
    Metric("lost_commits_per_crash_p999", "commits",
           "acknowledged commits lost per failure, p99.9", "regime", per_failure=True),
    Metric("lost_commits_per_crash_bound", "commits",
           "acknowledged commits lost per failure, hard bound", "regime", per_failure=True),
    Metric("expected_lost_commits_per_year", "commits",
           "expected acknowledged commits lost per year", "year", per_failure=True),
    Metric("expected_loss_value_per_year", "value",
           "expected value of the acknowledged commits lost per year", "year", per_failure=True),
    Metric("durable_copies_at_ack", "copies",
           "durable copies of a commit when it is acknowledged", "regime"),
    Metric("flushes_per_s", "per_s", "log device flushes per second (all devices)", "regime"),
    Metric("writer_utilisation", "share", "log writer busy share", "regime"),
    Metric("cpu_utilisation", "share", "host CPU utilisation", "regime"),
    Metric("saturated", "bool", "saturated (the database or a tier above it)", "regime"),
    Metric("device_counts_as_durable", "bool",
           "a log device the strategy acknowledges from counts as durable", "strategy"),
)}

# case fields a threshold can name; "{failure}" stands for the failure kind being checked
CASE_FIELDS: dict[str, str] = {
    "goals.commit_p99_ms": "ms",
    "goals.top_tier_p99_ms": "ms",
    "recovery.copies_at_ack": "copies",
    "recovery.value_per_commit": "value",
    "recovery.{failure}.loss_window_s": "s",
    "recovery.{failure}.per_year": "per_year",
    **{f"recovery.{k}.loss_window_s": "s" for k in FAILURE_KINDS},
    **{f"recovery.{k}.per_year": "per_year" for k in FAILURE_KINDS},
}

_TIME_MS = {"us": 1e-3, "ms": 1.0, "s": 1000.0}

PLACEHOLDERS = {
    "strategy": "the strategy's name",
    "kind": "the strategy's kind",
    "regime": "the regime where the figure was read (\"the whole year\" for yearly figures)",
    "failure": "the failure kind (process_crash, host_crash, device_loss), or empty",
    "failure_words": "the failure kind in words",
    "failure_clause": "\" for <the failure kind in words>\" when the metric is per failure, "
                      "else empty",
    "value": "the figure, with its unit",
    "threshold": "the threshold, with its unit",
    "threshold_source": "where the threshold came from (a literal or the case field and its "
                        "value before conversion)",
    "metric": "the metric's registry name",
    "metric_words": "the metric in words",
    "comparison": "the comparison in words",
    "detail": "what lies behind the figure (the saturated resource, the law behind an "
              "exposure), or empty",
    "policy": "the name of the policy the rule belongs to",
    "rule": "the rule's id",
}


def convert(value: float, from_unit: str, to_unit: str) -> float:
    """``value`` in ``from_unit`` expressed in ``to_unit``; only times convert (us, ms, s)."""
    if from_unit == to_unit:
        return value
    if from_unit in _TIME_MS and to_unit in _TIME_MS:
        return value * _TIME_MS[from_unit] / _TIME_MS[to_unit]
    raise ValueError(f"a figure in {from_unit} cannot be compared with one in {to_unit}")


def units_compatible(a: str, b: str) -> bool:
    return a == b or (a in _TIME_MS and b in _TIME_MS)


def template_fields(template: str) -> tuple[str, ...]:
    """The placeholder names a message template uses (``{name}``)."""
    return tuple(f for _, f, _, _ in string.Formatter().parse(template) if f is not None)


# --------------------------------------------------------------------------- rules
@dataclass(frozen=True)
class Threshold:
    """A literal figure in the metric's unit, or a case field (converted), times a factor."""

    literal: float | None = None
    case_field: str | None = None
    factor: float = 1.0


@dataclass(frozen=True)
class Rule:
    id: str
    metric: str
    comparison: str
    severity: str
    threshold: Threshold | None = None
    failures: tuple[str, ...] = FAILURE_KINDS
    kinds: tuple[str, ...] = ()  # empty: every kind
    names: tuple[str, ...] = ()  # empty: every name
    regimes: tuple[str, ...] = ()  # empty: every regime
    message: str = ""
    description: str = ""

    def applies_to(self, name: str, kind: str) -> bool:
        if not self.kinds and not self.names:
            return True
        return kind in self.kinds or name in self.names


@dataclass(frozen=True)
class Policy:
    """One rule file: its name, where it came from and its rules."""

    name: str
    source: str  # the file as the user named it (rules/baseline.toml for the baseline)
    rules: tuple[Rule, ...]
    replaces_baseline: bool = False
    switch_off: tuple[str, ...] = ()
    is_baseline: bool = False
    description: str = ""


@dataclass(frozen=True)
class PolicySet:
    """The policies in force, in order, and the rules that remain after switch-offs."""

    policies: tuple[Policy, ...]
    switched_off: tuple[tuple[str, str], ...] = ()  # (rule id, policy that switched it off)

    def rules(self) -> tuple[tuple[Policy, Rule], ...]:
        off = {rid for rid, _ in self.switched_off}
        return tuple((p, r) for p in self.policies for r in p.rules if r.id not in off)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.policies)


# --------------------------------------------------------------------------- outcomes
@dataclass(frozen=True)
class Check:
    """A rule checked in one regime (and for one failure kind)."""

    regime: str
    failure: str | None
    value: float | bool | None
    threshold: float | None
    status: str  # met, broken, caution, no_figure
    message: str


@dataclass(frozen=True)
class RuleOutcome:
    rule: str
    policy: str
    source: str
    severity: str
    metric: str
    status: str  # met, broken, caution, not_applicable
    message: str  # the filled-in message of the deciding check, or why it is met
    deciding_regime: str | None
    checks: tuple[Check, ...]

    @property
    def broken(self) -> bool:
        return self.status == "broken"


@dataclass(frozen=True)
class StrategyVerdict:
    strategy: str
    kind: str
    verdict: str  # allowed, needs_signoff, not_allowed
    outcomes: tuple[RuleOutcome, ...]
    decided_by: tuple[str, ...]  # the policies whose broken rules set the verdict
    deciding_regimes: tuple[str, ...]

    @property
    def verdict_words(self) -> str:
        return VERDICT_WORDS[self.verdict]

    def broken(self, severity: str | None = None) -> tuple[RuleOutcome, ...]:
        return tuple(o for o in self.outcomes if o.broken
                     and (severity is None or o.severity == severity))


# --------------------------------------------------------------------------- figures
def format_value(value: float | bool | None, unit: str, currency: str | None = None) -> str:
    """A figure with its unit, rounded for reading (3 significant figures, no exponent)."""
    if value is None:
        return "no figure"
    if isinstance(value, bool) or unit == "bool":
        return "yes" if value else "no"
    if math.isinf(value):
        return "unbounded"
    if unit == "share":
        if 0 < value < 1e-5:
            return "under 0.001 %"
        return f"{_sig(value * 100)} %"
    if unit == "copies":
        n = int(round(value))
        return f"{n} cop{'y' if n == 1 else 'ies'}"
    value = json_float(value)
    text = f"{value:,.0f}" if unit == "commits" and abs(value) >= 10 else _sig(value)
    suffix = {"ms": " ms", "commits": " commits", "copies": " copies", "per_s": "/s",
              "per_year": "/year", "s": " s", "us": " us"}.get(unit, "")
    if unit == "value":
        suffix = f" {currency}" if currency else ""
    return text + suffix


def _sig(x: float) -> str:
    """Three significant figures, thousands grouped, never in exponent form."""
    if x == 0:
        return "0"
    a = abs(x)
    if a >= 100:
        return f"{x:,.0f}"
    digits = max(0, 2 - math.floor(math.log10(a)))
    return f"{x:.{digits}f}"


def strategy_devices_count_as_durable(case: Case, name: str) -> bool:
    """True when a device the strategy acknowledges from counts as durable: the one device
    of a single-device strategy, or at least one of the two of a dual-device one (a device
    that does not count cannot acknowledge; its completions are ignored for durability)."""
    s = next(s for s in case.strategies if _name(s) == name)
    if isinstance(s, DualDevice):
        return any(case.devices[d].counts_as_durable for d in s.devices)
    return case.devices[s.device].counts_as_durable


def _name(s: Any) -> str:
    from commitadvisor.case import strategy_name

    return strategy_name(s)


@dataclass(frozen=True)
class _Figure:
    value: float | bool | None
    detail: str = ""
    why_none: str = ""
    unbounded: bool = False


def _stack_regime(stack: Any, regime: str) -> Any:
    if stack is None:
        return None
    return next((r for r in stack.regimes if r.regime == regime), None)


def _exposure_figure(rr: RegimeResult, failure: str, metric: str) -> _Figure:
    e = next((x for x in rr.exposures if x.failure == failure), None)
    if e is None:
        return _Figure(None, why_none=f"no {failure} figures for this regime")
    attr = {
        "exposure_window_mean_ms": "window_mean_ms",
        "exposure_window_p99_ms": "window_p99_ms",
        "exposure_window_p999_ms": "window_p999_ms",
        "lost_commits_per_crash_mean": "at_risk_mean",
        "lost_commits_per_crash_p999": "at_risk_p999",
        "lost_commits_per_crash_bound": "at_risk_bound",
        "expected_lost_commits_per_year": "expected_lost_per_year",
        "expected_loss_value_per_year": "value_lost_per_year",
    }[metric]
    value = getattr(e, attr)
    if e.unbounded and metric not in ("expected_lost_commits_per_year",
                                      "expected_loss_value_per_year"):
        return _Figure(math.inf, e.basis, unbounded=True)
    if value is None and metric == "lost_commits_per_crash_bound":
        if not e.can_lose:
            return _Figure(0.0, e.basis)
        return _Figure(math.inf, (e.basis + "; " if e.basis else "") + "no hard bound")
    if value is None:
        why = "saturated" if rr.saturated else "not given for this failure"
        return _Figure(None, e.basis, why_none=why)
    return _Figure(float(value), e.basis)


def _figure(metric: Metric, case: Case, sr: StrategyResult, rr: RegimeResult,
            stack: Any, failure: str | None) -> _Figure:
    name = metric.name
    if metric.per_failure:
        assert failure is not None
        return _exposure_figure(rr, failure, name)
    if name == "device_counts_as_durable":
        return _Figure(strategy_devices_count_as_durable(case, sr.name))
    if name == "saturated":
        st = _stack_regime(stack, rr.regime)
        if rr.saturation is not None:
            return _Figure(True, f"{rr.saturation.resource}: {rr.saturation.message}")
        if st is not None and st.saturation is not None:
            return _Figure(True, f"{st.saturation.resource}: {st.saturation.message}")
        return _Figure(False)
    if metric.needs_stack:
        st = _stack_regime(stack, rr.regime)
        if st is None:
            return _Figure(None, why_none="the case has no stack")
        if st.saturation is not None:
            return _Figure(None, why_none=f"saturated ({st.saturation.resource})")
        attr = {"top_tier_mean_ms": "top_mean_ms", "top_tier_p99_ms": "top_p99_ms",
                "slow_request_chance": "slow_request_chance"}[name]
        return _Figure(getattr(st, attr))
    if name == "flushes_per_s":
        return _Figure(sum(v for _, v in rr.flushes_per_s))
    if name == "durable_copies_at_ack":
        return _Figure(float(rr.copies_at_ack))
    attr = {"commit_mean_ms": "ack_mean_ms", "commit_p99_ms": "ack_p99_ms",
            "commit_p999_ms": "ack_p999_ms", "writer_utilisation": "writer_utilisation",
            "cpu_utilisation": "cpu_utilisation"}[name]
    value = getattr(rr, attr)
    if value is None:
        return _Figure(None, why_none="saturated" if rr.saturated else "not given")
    return _Figure(float(value))


def _case_field(case: Case, path: str) -> float | None:
    obj: Any = case
    for part in path.split("."):
        obj = getattr(obj, part, None)
        if obj is None:
            return None
    return float(obj)


def _resolve(rule: Rule, metric: Metric, case: Case, failure: str | None
             ) -> tuple[float | None, str]:
    """The threshold in the metric's unit and words saying where it came from."""
    t = rule.threshold
    if t is None:
        return None, ""
    factor_words = f" x {t.factor:g}" if t.factor != 1.0 else ""
    if t.literal is not None:
        return t.literal * t.factor, "the rule's own figure" + factor_words
    assert t.case_field is not None
    path = t.case_field.replace("{failure}", failure or "")
    raw = _case_field(case, path)
    if raw is None:
        return None, f"{path} (not given in the case)"
    unit = CASE_FIELDS[t.case_field]
    value = convert(raw, unit, metric.unit) if unit != metric.unit else raw
    src = f"{path} = {format_value(raw, unit, case.recovery.currency)}{factor_words}"
    if unit != metric.unit:
        src += f", converted from {unit} to {metric.unit}"
    return value * t.factor, src


def _compare(value: float | bool, comparison: str, threshold: float | None) -> bool:
    if comparison == "is_true":
        return bool(value)
    if comparison == "is_false":
        return not bool(value)
    assert threshold is not None
    v = float(value)
    return {
        "at_most": v <= threshold,
        "below": v < threshold,
        "at_least": v >= threshold,
        "above": v > threshold,
        "equals": math.isclose(v, threshold, rel_tol=1e-9, abs_tol=1e-12),
    }[comparison]


def _fill(template: str, fields: dict[str, str]) -> str:
    return template.format_map(fields)


_DEFAULT_MESSAGE = ("{strategy}: {metric_words} is {value} in {regime}{failure_clause}; "
                    "the rule asks for {comparison} {threshold} ({threshold_source})")


def judge_strategy(policies: PolicySet, case: Case, sr: StrategyResult,
                   stack: Any = None) -> StrategyVerdict:
    """The verdict on one strategy: every rule that applies, met or broken, with its message.

    ``stack`` is the strategy's :class:`commitadvisor.stack.StackResult` or None.
    """
    outcomes = []
    for policy, rule in policies.rules():
        if not rule.applies_to(sr.name, sr.kind):
            continue
        outcomes.append(_judge_rule(policy, rule, case, sr, stack))
    broken = [o for o in outcomes if o.broken and o.severity != "warning"]
    if any(o.severity == "not_allowed" for o in broken):
        verdict = "not_allowed"
    elif broken:
        verdict = "needs_signoff"
    else:
        verdict = "allowed"
    deciding = [o for o in broken if o.severity == verdict]
    decided_by = tuple(dict.fromkeys(o.policy for o in deciding))
    regimes = tuple(dict.fromkeys(o.deciding_regime for o in deciding if o.deciding_regime))
    return StrategyVerdict(sr.name, sr.kind, verdict, tuple(outcomes), decided_by, regimes)


def judge(policies: PolicySet, case: Case, evaluation: Evaluation,
          stacks: tuple[Any, ...] = ()) -> tuple[StrategyVerdict, ...]:
    """Verdicts for every strategy of ``evaluation``, in the evaluation's order."""
    by_name = {s.strategy: s for s in stacks}
    return tuple(judge_strategy(policies, case, sr, by_name.get(sr.name))
                 for sr in evaluation.strategies)


def _judge_rule(policy: Policy, rule: Rule, case: Case, sr: StrategyResult,
                stack: Any) -> RuleOutcome:
    metric = METRICS[rule.metric]
    currency = case.recovery.currency
    if metric.needs_stack and not case.stack:
        return RuleOutcome(rule.id, policy.name, policy.source, rule.severity, rule.metric,
                           "not_applicable", "the case has no stack", None, ())
    if metric.scope == "year":
        places: list[tuple[str, RegimeResult]] = [("the whole year", sr.blended)]
    elif metric.scope == "strategy":
        places = [("every regime", sr.blended)]
    else:
        places = [(r.regime, r) for r in sr.regimes
                  if not rule.regimes or r.regime in rule.regimes]
    failures: tuple[str | None, ...] = rule.failures if metric.per_failure else (None,)
    checks: list[Check] = []
    worst: tuple[float, Check] | None = None
    worst_caution: tuple[float, Check] | None = None
    for regime_label, rr in places:
        for failure in failures:
            fig = _figure(metric, case, sr, rr, stack, failure)
            threshold, source = _resolve(rule, metric, case, failure)
            fields = {
                "strategy": sr.name, "kind": sr.kind, "regime": regime_label,
                "failure": failure or "", "failure_words": FAILURE_WORDS.get(failure or "", ""),
                "failure_clause": f" for {FAILURE_WORDS[failure]}" if failure else "",
                "value": format_value(fig.value, metric.unit, currency),
                "threshold": format_value(threshold, metric.unit, currency)
                if threshold is not None else "",
                "threshold_source": source, "metric": metric.name,
                "metric_words": metric.words, "comparison": COMPARISONS[rule.comparison],
                "detail": fig.detail, "policy": policy.name, "rule": rule.id,
            }
            if fig.value is None:
                checks.append(Check(regime_label, failure, None, threshold, "no_figure",
                                    f"no figure in {regime_label}: {fig.why_none}"))
                continue
            if rule.threshold is not None and threshold is None:
                checks.append(Check(regime_label, failure, fig.value, None, "no_figure",
                                    f"no threshold: {source}"))
                continue
            ok = _compare(fig.value, rule.comparison, threshold)
            message = _fill(rule.message or _DEFAULT_MESSAGE, fields)
            if ok:
                status = "met"
            elif failure == "device_loss" and case.recovery.copies_at_ack < 2:
                status = "caution"
                message += (f" (a caution, not a verdict: the case asks for "
                            f"{case.recovery.copies_at_ack} durable copy at acknowledgement, "
                            "so the loss of a device is not judged)")
            else:
                status = "broken"
            check = Check(regime_label, failure, fig.value, threshold, status, message)
            checks.append(check)
            badness = _badness(fig.value, rule.comparison, threshold)
            if status == "broken" and (worst is None or badness > worst[0]):
                worst = (badness, check)
            if status == "caution" and (worst_caution is None or badness > worst_caution[0]):
                worst_caution = (badness, check)
    return _outcome(policy, rule, metric, checks, worst or worst_caution, currency)


def _badness(value: float | bool, comparison: str, threshold: float | None) -> float:
    """How far a breach goes, for choosing the deciding regime (larger is worse)."""
    if comparison in _BOOL_COMPARISONS or threshold is None:
        return 0.0
    v = float(value)
    if comparison in ("at_most", "below"):
        return v - threshold
    if comparison in ("at_least", "above"):
        return threshold - v
    return abs(v - threshold)


def _outcome(policy: Policy, rule: Rule, metric: Metric, checks: list[Check],
             worst: tuple[float, Check] | None, currency: str | None) -> RuleOutcome:
    base = (rule.id, policy.name, policy.source, rule.severity, rule.metric)
    if worst is not None and worst[1].status == "caution":
        check = worst[1]
        return RuleOutcome(*base, "caution", check.message, check.regime, tuple(checks))
    if worst is not None:
        check = worst[1]
        others = sorted({c.regime for c in checks if c.status == "broken"} - {check.regime})
        message = check.message
        if others:
            message += f" (also broken in: {', '.join(others)})"
        return RuleOutcome(*base, "broken", message, check.regime, tuple(checks))
    met = [c for c in checks if c.status == "met"]
    if not met:
        why = checks[0].message if checks else "no regime to check"
        return RuleOutcome(*base, "not_applicable", why, None, tuple(checks))
    message = _met_message(rule, metric, met, currency)
    missing = [c for c in checks if c.status == "no_figure"]
    if missing:
        message += "; " + "; ".join(sorted({c.message for c in missing}))
    return RuleOutcome(*base, "met", message, None, tuple(checks))


def _met_message(rule: Rule, metric: Metric, met: list[Check], currency: str | None) -> str:
    comparison = COMPARISONS[rule.comparison]
    if metric.is_bool:
        answer = "yes" if rule.comparison == "is_true" else "no"
        where = "" if met[0].regime == "every regime" else " (in every regime checked)"
        return f"{metric.words}: {answer}{where}"
    if rule.comparison in ("at_most", "below"):
        c = max(met, key=lambda c: float(c.value or 0.0))
    else:
        c = min(met, key=lambda c: float(c.value or 0.0))
    where = c.regime + (f", {c.failure}" if c.failure else "")
    return (f"{metric.words} {format_value(c.value, metric.unit, currency)} at worst "
            f"({where}), {comparison} {format_value(c.threshold, metric.unit, currency)}")
