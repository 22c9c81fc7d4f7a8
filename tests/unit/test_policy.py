"""The rule engine and the rule-file loader, on hand-made cases and evaluations.

The builders at the top make small fictional cases (parse_case on a mapping) and
Evaluation objects constructed directly, so each rule can be checked against figures chosen
for it. test_ranking.py and test_stack.py import them.
"""

from __future__ import annotations

import copy
import math
from dataclasses import FrozenInstanceError
from pathlib import Path

import pytest

from commitadvisor.case import parse_case
from commitadvisor.errors import InputError
from commitadvisor.latency import Lognormal
from commitadvisor.policy import (
    METRICS,
    Policy,
    PolicySet,
    Rule,
    Threshold,
    convert,
    format_value,
    judge,
    judge_strategy,
)
from commitadvisor.results import Evaluation, Exposure, RegimeResult, Saturation, StrategyResult
from commitadvisor.rules_file import (
    baseline_text,
    compose,
    load_baseline,
    load_policy,
    load_policy_set,
)


# --------------------------------------------------------------------------- builders
def case_dict() -> dict:
    """A small fictional case: Brambleway Tiles (invented) and its order log."""
    return {
        "schema_version": 1,
        "title": "Brambleway Tiles order log (fictional)",
        "workload": {"kind": "open", "commit_rate_per_s": 200.0, "log_bytes_per_commit": 1000},
        "recovery": {
            "process_crash": {"per_year": 4.0, "loss_window_s": 0.0},
            "host_crash": {"per_year": 1.0, "loss_window_s": 0.0},
            "device_loss": {"per_year": 0.05, "loss_window_s": 0.0},
            "value_per_commit": 10.0, "currency": "EUR", "copies_at_ack": 1,
        },
        "goals": {"commit_p99_ms": 10.0},
        "devices": {
            "dev_a": _device("power_loss_protected"),
            "dev_b": _device("none"),
            "dev_v": _device("volatile"),
        },
        "regimes": [{"name": "burst", "period_s": 3600, "duration_s": 300,
                     "description": "the nightly copy"}],
        "strategies": [
            {"name": "s_sync", "kind": "synchronous", "device": "dev_a"},
            {"name": "s_def", "kind": "deferred", "device": "dev_a", "flush_every_ms": 100.0,
             "buffer_bytes": 1 << 20},
            {"name": "s_dual", "kind": "dual_device", "devices": ["dev_a", "dev_b"]},
            {"name": "s_vol", "kind": "synchronous", "device": "dev_v"},
        ],
    }


def _device(cache: str) -> dict:
    return {"cache": cache, "bandwidth_mb_per_s": 500.0, "profile_block_bytes": 8192,
            "latency": {"normal": {"kind": "lognormal", "p50_ms": 0.5, "p99_ms": 2.0}}}


def make_case(mutate=None):
    d = copy.deepcopy(case_dict())
    if mutate is not None:
        mutate(d)
    return parse_case(d, "test-case")


def zero_exposure(failure: str) -> Exposure:
    return Exposure(failure, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, False, "durable at ack")


def unbounded(failure: str) -> Exposure:
    return Exposure(failure, None, None, None, None, None, None, None, None, True, "one copy")


def window(failure: str, p999_ms: float, mean_lost: float = 5.0, bound: float | None = 100.0,
           per_year: float = 1.0) -> Exposure:
    return Exposure(failure, p999_ms / 2, p999_ms * 0.9, p999_ms, mean_lost, mean_lost * 3,
                    bound, per_year * mean_lost, per_year * mean_lost * 10.0, False,
                    "lambda E[W]")


def regime(name: str, p99_ms: float | None = 2.0, exposures: tuple[Exposure, ...] | None = None,
           copies: int = 1, saturation: Saturation | None = None, flushes: float = 100.0,
           ack=None) -> RegimeResult:
    if exposures is None:
        exposures = (zero_exposure("process_crash"), zero_exposure("host_crash"),
                     unbounded("device_loss"))
    if ack is None and p99_ms is not None:
        ack = Lognormal.from_percentiles(p99_ms / 4, p99_ms)
    sat = saturation is not None
    return RegimeResult(
        regime=name, time_share=0.9 if name == "normal" else 0.1, commit_share=0.5,
        throughput_per_s=200.0, ack_mean_ms=None if sat else p99_ms / 3,
        ack_p50_ms=None if sat else p99_ms / 4, ack_p90_ms=None if sat else p99_ms / 2,
        ack_p99_ms=None if sat else p99_ms, ack_p999_ms=None if sat else p99_ms * 2,
        durable_mean_ms=None, durable_p99_ms=None, exposures=exposures,
        flushes_per_s=() if sat else (("dev_a", flushes),), mean_batch_commits=None,
        writer_utilisation=None, cpu_utilisation=None, copies_at_ack=copies,
        saturation=saturation, ack_latency=None if sat else ack)


def strategy(name: str, kind: str, normal: RegimeResult, burst: RegimeResult,
             blended: RegimeResult | None = None) -> StrategyResult:
    return StrategyResult(name, kind, "settings in words", (normal, burst),
                          blended or normal)


def cpu_saturation() -> Saturation:
    return Saturation("cpu", 150.0, 200.0, 50.0, None,
                      "the host's CPU saturates at 150 commits/s; 200/s are offered")


def evaluation(*strategies: StrategyResult) -> Evaluation:
    return Evaluation("Brambleway Tiles order log (fictional)", "analytic",
                      (("normal", 0.9), ("burst", 0.1)), tuple(strategies))


def default_evaluation() -> Evaluation:
    """Four strategies whose verdicts under the baseline a reader can tell by eye."""
    sync = strategy("s_sync", "synchronous", regime("normal", 3.0), regime("burst", 40.0))
    dfr_exp = (window("process_crash", 99.9, per_year=4.0), window("host_crash", 150.0),
               unbounded("device_loss"))
    dfr = strategy("s_def", "deferred", regime("normal", 0.5, dfr_exp, copies=0),
                   regime("burst", 0.5, dfr_exp, copies=0))
    dual_exp = (zero_exposure("process_crash"), zero_exposure("host_crash"),
                window("device_loss", 30.0))
    dual = strategy("s_dual", "dual_device", regime("normal", 1.0, dual_exp),
                    regime("burst", 1.2, dual_exp))
    vol_exp = (zero_exposure("process_crash"), unbounded("host_crash"), unbounded("device_loss"))
    vol = strategy("s_vol", "synchronous", regime("normal", 0.8, vol_exp, copies=0),
                   regime("burst", 0.8, vol_exp, copies=0))
    return evaluation(sync, dfr, dual, vol)


def one_rule_set(**kw) -> PolicySet:
    rule = Rule(**{"id": "r1", "severity": "not_allowed", **kw})
    return PolicySet((Policy("Test policy", "test.toml", (rule,)),))


def write(tmp_path: Path, text: str, name: str = "ours.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


# --------------------------------------------------------------------------- comparisons
@pytest.mark.parametrize(("comparison", "threshold", "met"), [
    ("at_most", 40.0, True), ("at_most", 39.9, False),
    ("below", 40.0, False), ("below", 40.1, True),
    ("at_least", 40.0, True), ("at_least", 40.1, False),
    ("above", 40.0, False), ("above", 39.9, True),
    ("equals", 40.0, True), ("equals", 40.5, False),
])
def test_each_numeric_comparison_at_its_boundary(comparison, threshold, met):
    # the worst regime (burst) has commit p99 exactly 40 ms; "at_least"/"above" fail on the
    # smallest figure, normal's 3 ms, so those rules look only at the burst here
    case = make_case()
    sr = default_evaluation().strategy("s_sync")
    rules = one_rule_set(metric="commit_p99_ms", comparison=comparison,
                         threshold=Threshold(literal=threshold), regimes=("burst",))
    v = judge_strategy(rules, case, sr)
    assert v.outcomes[0].status == ("met" if met else "broken")
    assert v.verdict == ("allowed" if met else "not_allowed")


@pytest.mark.parametrize(("comparison", "met_for_sync", "met_for_vol"), [
    ("is_true", True, False), ("is_false", False, True),
])
def test_boolean_comparisons(comparison, met_for_sync, met_for_vol):
    case = make_case()
    ev = default_evaluation()
    rules = one_rule_set(metric="device_counts_as_durable", comparison=comparison)
    assert judge_strategy(rules, case, ev.strategy("s_sync")).outcomes[0].status == \
        ("met" if met_for_sync else "broken")
    assert judge_strategy(rules, case, ev.strategy("s_vol")).outcomes[0].status == \
        ("met" if met_for_vol else "broken")


def test_threshold_from_the_case_is_converted_from_seconds_to_ms():
    # loss window 0.12 s = 120 ms: the deferred option's process-crash window p99.9 99.9 ms
    # is within it, its host-crash window 150 ms is not
    def loose(d):
        d["recovery"]["process_crash"]["loss_window_s"] = 0.12
        d["recovery"]["host_crash"]["loss_window_s"] = 0.12

    case = make_case(loose)
    rules = one_rule_set(metric="exposure_window_p999_ms", comparison="at_most",
                         threshold=Threshold(case_field="recovery.{failure}.loss_window_s"),
                         failures=("process_crash", "host_crash"))
    out = judge_strategy(rules, case, default_evaluation().strategy("s_def")).outcomes[0]
    by_failure = {c.failure: c for c in out.checks if c.regime == "normal"}
    assert by_failure["process_crash"].status == "met"
    assert by_failure["process_crash"].threshold == pytest.approx(120.0)
    assert by_failure["host_crash"].status == "broken"
    assert out.status == "broken"
    assert "150 ms" in out.message and "120 ms" in out.message
    assert "recovery.host_crash.loss_window_s = 0.120 s, converted from s to ms" in out.message


def test_threshold_factor_scales_a_case_field():
    case = make_case()
    sr = default_evaluation().strategy("s_sync")  # burst p99 40 ms, goal 10 ms
    four = one_rule_set(metric="commit_p99_ms", comparison="at_most",
                        threshold=Threshold(case_field="goals.commit_p99_ms", factor=4.0))
    three = one_rule_set(metric="commit_p99_ms", comparison="at_most",
                         threshold=Threshold(case_field="goals.commit_p99_ms", factor=3.0))
    assert judge_strategy(four, case, sr).verdict == "allowed"
    assert judge_strategy(three, case, sr).verdict == "not_allowed"


def test_a_missing_case_field_makes_the_rule_not_applicable():
    case = make_case()  # no goals.top_tier_p99_ms and no stack
    rules = one_rule_set(metric="commit_p99_ms", comparison="at_most",
                         threshold=Threshold(case_field="goals.top_tier_p99_ms"))
    out = judge_strategy(rules, case, default_evaluation().strategy("s_sync")).outcomes[0]
    assert out.status == "not_applicable"
    assert "not given in the case" in out.message


def test_stack_metric_without_a_stack_is_not_applicable():
    case = make_case()
    rules = one_rule_set(metric="top_tier_p99_ms", comparison="at_most",
                         threshold=Threshold(literal=100.0))
    out = judge_strategy(rules, case, default_evaluation().strategy("s_sync")).outcomes[0]
    assert out.status == "not_applicable" and "no stack" in out.message


def test_unit_conversion():
    assert convert(0.25, "s", "ms") == pytest.approx(250.0)
    assert convert(250.0, "us", "ms") == pytest.approx(0.25)
    with pytest.raises(ValueError):
        convert(1.0, "copies", "ms")


# --------------------------------------------------------------------------- severities
def test_severities_set_the_verdict_and_warnings_do_not():
    case = make_case()
    sr = default_evaluation().strategy("s_sync")
    breach = {"metric": "commit_p99_ms", "comparison": "at_most",
              "threshold": Threshold(literal=5.0)}
    for severity, verdict in (("warning", "allowed"), ("needs_signoff", "needs_signoff"),
                              ("not_allowed", "not_allowed")):
        rules = one_rule_set(**{**breach, "severity": severity})
        v = judge_strategy(rules, case, sr)
        assert v.verdict == verdict
        assert v.outcomes[0].status == "broken"
    both = PolicySet((Policy("A", "a.toml", (
        Rule("soft", "commit_p99_ms", "at_most", "needs_signoff", Threshold(literal=5.0)),
        Rule("hard", "commit_p99_ms", "at_most", "not_allowed", Threshold(literal=30.0)),
    )),))
    v = judge_strategy(both, case, sr)
    assert v.verdict == "not_allowed" and v.decided_by == ("A",)
    assert {o.rule for o in v.broken()} == {"soft", "hard"}


def test_strategy_filters_by_kind_and_by_name():
    case = make_case()
    ev = default_evaluation()
    rule = {"metric": "commit_p99_ms", "comparison": "at_most",
            "threshold": Threshold(literal=0.1)}
    by_kind = one_rule_set(**rule, kinds=("deferred",))
    by_name = one_rule_set(**rule, names=("s_dual",))
    judged_kind = {v.strategy: len(v.outcomes) for v in judge(by_kind, case, ev)}
    judged_name = {v.strategy: len(v.outcomes) for v in judge(by_name, case, ev)}
    assert judged_kind == {"s_sync": 0, "s_def": 1, "s_dual": 0, "s_vol": 0}
    assert judged_name == {"s_sync": 0, "s_def": 0, "s_dual": 1, "s_vol": 0}


def test_a_failing_regime_is_named_and_the_blend_cannot_hide_it():
    # blended p99 3 ms (the normal regime's figures as the blend), burst 40 ms
    case = make_case()
    sr = default_evaluation().strategy("s_sync")
    assert sr.blended.ack_p99_ms == 3.0
    rules = one_rule_set(metric="commit_p99_ms", comparison="at_most",
                         threshold=Threshold(case_field="goals.commit_p99_ms"),
                         message="In {regime}, p99 {value} against {threshold}.")
    out = judge_strategy(rules, case, sr).outcomes[0]
    assert out.status == "broken"
    assert out.deciding_regime == "burst"
    assert out.message == "In burst, p99 40.0 ms against 10.0 ms."


def test_regime_filter_limits_the_check():
    case = make_case()
    sr = default_evaluation().strategy("s_sync")
    rules = one_rule_set(metric="commit_p99_ms", comparison="at_most",
                         threshold=Threshold(literal=10.0), regimes=("normal",))
    out = judge_strategy(rules, case, sr).outcomes[0]
    assert out.status == "met" and [c.regime for c in out.checks] == ["normal"]


def test_saturated_regime_breaks_the_saturation_rule_and_names_the_resource():
    case = make_case()
    sr = strategy("s_sync", "synchronous", regime("normal", 3.0),
                  regime("burst", None, saturation=cpu_saturation()))
    rules = one_rule_set(metric="saturated", comparison="is_false",
                         message="{strategy} cannot keep up in {regime}: {detail}.")
    out = judge_strategy(rules, case, sr).outcomes[0]
    assert out.status == "broken" and out.deciding_regime == "burst"
    assert "cpu" in out.message and "150 commits/s" in out.message
    # the latency rule cannot read a figure in the saturated regime and says so
    lat = one_rule_set(metric="commit_p99_ms", comparison="at_most",
                       threshold=Threshold(literal=10.0))
    o2 = judge_strategy(lat, case, sr).outcomes[0]
    assert o2.status == "met" and "saturated" in o2.message


# --------------------------------------------------------------------------- device loss
def test_unbounded_device_loss_is_a_caution_with_one_required_copy():
    case = make_case()
    rules = one_rule_set(metric="exposure_window_p999_ms", comparison="at_most",
                         threshold=Threshold(literal=0.0), failures=("device_loss",))
    v = judge_strategy(rules, case, default_evaluation().strategy("s_sync"))
    assert v.outcomes[0].status == "caution"
    assert v.verdict == "allowed"
    assert "not a verdict" in v.outcomes[0].message


def test_device_loss_is_judged_when_two_copies_are_required():
    def two(d):
        d["recovery"]["copies_at_ack"] = 2

    case = make_case(two)
    rules = one_rule_set(metric="exposure_window_p999_ms", comparison="at_most",
                         threshold=Threshold(literal=0.0), failures=("device_loss",))
    v = judge_strategy(rules, case, default_evaluation().strategy("s_sync"))
    assert v.outcomes[0].status == "broken" and v.verdict == "not_allowed"
    assert "unbounded" in v.outcomes[0].message


# --------------------------------------------------------------------------- the baseline
def test_baseline_verdicts_on_the_hand_made_evaluation():
    case = make_case()
    verdicts = {v.strategy: v for v in judge(load_policy_set(), case, default_evaluation())}
    # synchronous on a protected device: nothing lost on a crash, burst p99 above the goal
    assert verdicts["s_sync"].verdict == "allowed"
    assert [o.rule for o in verdicts["s_sync"].broken()] == ["commit-p99-goal"]
    # deferred: no durable copy at acknowledgement and exposure beyond a zero loss window
    assert verdicts["s_def"].verdict == "not_allowed"
    assert {o.rule for o in verdicts["s_def"].broken("not_allowed")} == {
        "exposure-within-loss-window", "copies-at-acknowledgement"}
    # two devices, the second lagging: the device-loss lag is a caution with one copy
    assert verdicts["s_dual"].verdict == "allowed"
    assert any(o.status == "caution" for o in verdicts["s_dual"].outcomes)
    # a volatile cache not declared honoured: not durable, not allowed
    assert verdicts["s_vol"].verdict == "not_allowed"
    assert "durable-device" in {o.rule for o in verdicts["s_vol"].broken()}
    assert all(v.decided_by in ((), ("Cautious baseline",)) for v in verdicts.values())


def test_baseline_counts_a_volatile_cache_declared_honoured_as_durable():
    def honoured(d):
        d["devices"]["dev_v"]["flushes_honoured"] = True
        d["devices"]["dev_v"]["flushes_honoured_evidence"] = "power-cut test, 100 cycles"

    case = make_case(honoured)
    sr = strategy("s_vol", "synchronous", regime("normal", 0.8), regime("burst", 0.8))
    v = judge_strategy(load_policy_set(), case, sr)
    assert v.verdict == "allowed"
    assert next(o for o in v.outcomes if o.rule == "durable-device").status == "met"


def test_baseline_any_exposure_needs_signoff_within_the_loss_window():
    # the organisation tolerates 1 s on crashes and has switched off the copies rule
    def tolerant(d):
        d["recovery"]["process_crash"]["loss_window_s"] = 1.0
        d["recovery"]["host_crash"]["loss_window_s"] = 1.0

    case = make_case(tolerant)
    base = load_baseline()
    ours = Policy("Ours", "ours.toml", (), switch_off=("copies-at-acknowledgement",))
    v = judge_strategy(compose([ours], base), case, default_evaluation().strategy("s_def"))
    assert v.verdict == "needs_signoff"
    assert [o.rule for o in v.broken()] == ["any-exposure-needs-signoff"]


# --------------------------------------------------------------------------- rule files
GOOD = '''
format_version = 1
policy = "Brambleway data policy"

[[rule]]
id = "burst-p99-hard"
metric = "commit_p99_ms"
comparison = "at_most"
threshold = "goals.commit_p99_ms"
threshold_factor = 2.0
regimes = ["burst"]
strategies = { kinds = ["synchronous"] }
severity = "not_allowed"
message = "{strategy}: {value} in {regime}, more than twice the goal ({threshold})."
'''


def test_an_organisation_policy_extends_the_baseline(tmp_path):
    ps = load_policy_set([write(tmp_path, GOOD)])
    assert ps.names == ("Cautious baseline", "Brambleway data policy")
    v = {x.strategy: x for x in judge(ps, make_case(), default_evaluation())}
    assert v["s_sync"].verdict == "not_allowed"  # 40 ms > 2 x 10 ms in the burst
    assert v["s_sync"].decided_by == ("Brambleway data policy",)
    assert v["s_sync"].broken("not_allowed")[0].message == \
        "s_sync: 40.0 ms in burst, more than twice the goal (20.0 ms)."


def test_an_organisation_policy_switches_off_a_baseline_rule(tmp_path):
    text = GOOD.replace('policy = "Brambleway data policy"',
                        'policy = "Brambleway data policy"\nswitch_off = ["commit-p99-goal"]')
    ps = load_policy_set([write(tmp_path, text)])
    assert ps.switched_off == (("commit-p99-goal", "Brambleway data policy"),)
    v = judge_strategy(ps, make_case(), default_evaluation().strategy("s_sync"))
    assert "commit-p99-goal" not in {o.rule for o in v.outcomes}
    assert "burst-p99-hard" in {o.rule for o in v.outcomes}


def test_an_organisation_policy_replaces_the_baseline(tmp_path):
    text = GOOD.replace('policy = "Brambleway data policy"',
                        'policy = "Brambleway data policy"\nreplaces_baseline = true')
    ps = load_policy_set([write(tmp_path, text)])
    assert ps.names == ("Brambleway data policy",)
    v = {x.strategy: x.verdict for x in judge(ps, make_case(), default_evaluation())}
    # only the one rule remains: the deferred and volatile options are no longer judged
    assert v == {"s_sync": "not_allowed", "s_def": "allowed", "s_dual": "allowed",
                 "s_vol": "allowed"}


BAD_FILES = [
    # (what is wrong, text after the header, field named, words in the message)
    ("unknown key with a hint", 'severty = "warning"', "rule[0].severty",
     "did you mean 'severity'"),
    ("unknown metric with a hint", 'metric = "comit_p99_ms"', "rule[0].metric",
     "did you mean 'commit_p99_ms'"),
    ("unknown comparison", 'comparison = "less_or_equal"', "rule[0].comparison",
     "unknown comparison"),
    ("bad severity", 'severity = "forbidden"', "rule[0].severity", "not_allowed"),
    ("unknown case field", 'threshold = "goals.commit_p90_ms"', "rule[0].threshold",
     "did you mean 'goals.commit_p99_ms'"),
    ("unknown placeholder", 'message = "{strategy} is at {valeu}"', "rule[0].message",
     "did you mean 'value'"),
    ("format spec in a placeholder", 'message = "{value:.2f}"', "rule[0].message",
     "takes no format"),
    ("bad id", 'id = "Has Spaces"', "rule[0].id", "pattern"),
]


def _rule_text(change: str) -> str:
    fields = {
        "id": 'id = "r1"', "metric": 'metric = "commit_p99_ms"',
        "comparison": 'comparison = "at_most"', "threshold": "threshold = 5.0",
        "severity": 'severity = "warning"', "message": 'message = "{strategy}"',
    }
    key = change.split("=")[0].strip()
    if key in fields:
        fields[key] = change
    else:
        fields["extra"] = change
    return ('format_version = 1\npolicy = "Test"\n\n[[rule]]\n'
            + "\n".join(fields.values()) + "\n")


@pytest.mark.parametrize(("what", "change", "field", "words"), BAD_FILES,
                         ids=[b[0] for b in BAD_FILES])
def test_bad_rule_files_name_the_file_and_the_field(tmp_path, what, change, field, words):
    path = write(tmp_path, _rule_text(change))
    with pytest.raises(InputError) as exc:
        load_policy(path)
    rendered = exc.value.render()
    assert str(path) in rendered
    assert any(p.field == field for p in exc.value.problems), rendered
    assert words in rendered, rendered


@pytest.mark.parametrize(("what", "rule", "field", "words"), [
    ("threshold missing", 'metric = "commit_p99_ms"\ncomparison = "at_most"',
     "rule[0].threshold", "required"),
    ("threshold on a yes/no metric",
     'metric = "saturated"\ncomparison = "is_false"\nthreshold = 1.0',
     "rule[0].threshold", "takes no threshold"),
    ("numeric comparison on a yes/no metric", 'metric = "saturated"\ncomparison = "at_most"',
     "rule[0].comparison", "is_true or is_false"),
    ("yes/no comparison on a figure",
     'metric = "commit_p99_ms"\ncomparison = "is_true"\nthreshold = 1.0',
     "rule[0].comparison", "at_most"),
    ("incompatible units",
     'metric = "durable_copies_at_ack"\ncomparison = "at_least"\n'
     'threshold = "goals.commit_p99_ms"', "rule[0].threshold", "cannot be compared"),
    ("failure on a metric that has none",
     'metric = "commit_p99_ms"\ncomparison = "at_most"\nthreshold = 1.0\nfailure = "host_crash"',
     "rule[0].failure", "not per failure"),
    ("unknown failure kind",
     'metric = "exposure_window_p999_ms"\ncomparison = "at_most"\nthreshold = 1.0\n'
     'failure = "host_crsh"', "rule[0].failure", "did you mean 'host_crash'"),
    ("regimes on a yearly metric",
     'metric = "expected_lost_commits_per_year"\ncomparison = "at_most"\nthreshold = 1.0\n'
     'regimes = ["normal"]', "rule[0].regimes", "whole year"),
])
def test_inconsistent_rules_are_refused(tmp_path, what, rule, field, words):
    text = ('format_version = 1\npolicy = "Test"\n\n[[rule]]\nid = "r1"\n'
            f'severity = "warning"\n{rule}\n')
    with pytest.raises(InputError) as exc:
        load_policy(write(tmp_path, text))
    assert any(p.field == field for p in exc.value.problems), exc.value.render()
    assert words in exc.value.render()


def test_file_level_problems(tmp_path):
    with pytest.raises(InputError) as exc:
        load_policy(write(tmp_path, 'format_version = 2\npolicy = "X"\nswitch_off = ["a"]\n'))
    assert exc.value.problems[0].field == "format_version"
    with pytest.raises(InputError) as exc:
        load_policy(write(tmp_path, 'format_version = 1\npolicy = "X"\n[[rule\n'))
    assert "TOML syntax" in exc.value.render()
    dup = _rule_text('id = "r1"') + '\n[[rule]]\nid = "r1"\nmetric = "saturated"\n' \
        'comparison = "is_false"\nseverity = "warning"\n'
    with pytest.raises(InputError) as exc:
        load_policy(write(tmp_path, dup))
    assert exc.value.problems[0].field == "rule[1].id"
    with pytest.raises(InputError) as exc:
        load_policy(tmp_path / "missing.toml")
    assert "no such file" in exc.value.render()


def test_set_level_problems(tmp_path):
    off = write(tmp_path, 'format_version = 1\npolicy = "X"\nswitch_off = ["comit-p99-goal"]\n')
    with pytest.raises(InputError) as exc:
        load_policy_set([off])
    assert exc.value.problems[0].field == "switch_off[0]"
    assert "did you mean 'commit-p99-goal'" in exc.value.render()
    clash = write(tmp_path, _rule_text('id = "no-saturation"'), "clash.toml")
    with pytest.raises(InputError) as exc:
        load_policy_set([clash])
    assert exc.value.problems[0].field == "rule[0].id"
    assert "switch it off" in exc.value.render()


# --------------------------------------------------------------------------- registry, values
def test_every_metric_can_be_read_from_a_hand_made_result():
    # a rule on each registry metric gives a verdict or says why it cannot (never raises)
    case = make_case()
    sr = default_evaluation().strategy("s_def")
    for m in METRICS.values():
        if m.is_bool:
            rule = {"metric": m.name, "comparison": "is_true"}
        else:
            rule = {"metric": m.name, "comparison": "at_most", "threshold": Threshold(literal=1e9)}
        out = judge_strategy(one_rule_set(**rule), case, sr).outcomes[0]
        assert out.status in ("met", "broken", "caution", "not_applicable"), m.name
        assert out.message


def test_figures_are_rounded_with_units():
    assert format_value(0.12345, "ms") == "0.123 ms"
    assert format_value(1234.4, "commits") == "1,234 commits"
    assert format_value(1.357, "commits") == "1.36 commits"
    assert format_value(1.0, "copies") == "1 copy" and format_value(0.0, "copies") == "0 copies"
    assert format_value(1e-9, "share") == "under 0.001 %"
    assert format_value(math.inf, "ms") == "unbounded"
    assert format_value(0.634, "share") == "63.4 %"
    assert format_value(12.5, "value", "EUR") == "12.5 EUR"
    assert format_value(None, "ms") == "no figure"


def test_outcomes_are_frozen():
    v = judge_strategy(load_policy_set(), make_case(), default_evaluation().strategy("s_sync"))
    with pytest.raises(FrozenInstanceError):
        v.verdict = "allowed"  # type: ignore[misc]
    assert isinstance(v.outcomes, tuple) and isinstance(v.outcomes[0].checks, tuple)


def test_the_baseline_is_read_from_the_repository_and_its_absence_is_a_clear_error(tmp_path):
    from importlib import resources

    root = Path(__file__).resolve().parents[2]
    assert baseline_text() == (root / "rules" / "baseline.toml").read_text(encoding="utf-8")
    shipped = resources.files("commitadvisor").joinpath("rules/baseline.toml").is_file()
    if shipped:  # an installed package: its own copy is used outside the repository
        assert 'policy = "Cautious baseline"' in baseline_text(tmp_path)
    else:  # running from the source tree: outside it there is no baseline to be found
        with pytest.raises(InputError, match="not installed with this package"):
            baseline_text(tmp_path)


def test_docs_list_every_metric_placeholder_comparison_field_and_baseline_rule():
    from commitadvisor.policy import CASE_FIELDS, COMPARISONS, PLACEHOLDERS

    text = (Path(__file__).resolve().parents[2] / "docs" / "rules.md").read_text("utf-8")
    for name in (*METRICS, *COMPARISONS):
        assert f"`{name}`" in text, name
    for name in PLACEHOLDERS:
        assert f"`{{{name}}}`" in text, name
    for field in CASE_FIELDS:
        if "{failure}" in field:
            assert f"`{field.replace('{failure}', '<kind>')}`" in text, field
    for _, rule in load_policy_set().rules():
        assert f"`{rule.id}`" in text, rule.id
