"""The sign-off document's content on a shipped case: hashes, figures, rules, cautions, the
simulator's section and the deferral."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from commitadvisor.case import load_case
from commitadvisor.cautions import cautions_for
from commitadvisor.evaluate import evaluate
from commitadvisor.policy import format_value
from commitadvisor.ranking import build_advice
from commitadvisor.render.signoff_md import signoff_markdown
from commitadvisor.rules_file import load_policy_set
from commitadvisor.signoff import (
    DEFERRAL,
    MODEL_LIMITS,
    ROLES,
    Bullets,
    PolicyFile,
    Table,
    UnknownStrategy,
    Verification,
    VerifyRow,
    best_durable_alternative,
    build_signoff,
    sha256_hex,
)
from commitadvisor.stack import evaluate_stacks

ROOT = Path(__file__).resolve().parents[2]
CASE = ROOT / "cases" / "ledger_backup_burst.toml"
BASELINE = ROOT / "rules" / "baseline.toml"


@pytest.fixture(scope="module")
def inputs():
    case = load_case(CASE)
    ev = evaluate(case)
    stacks = evaluate_stacks(case, ev.strategies)
    policies = load_policy_set([])
    advice = build_advice(case, ev, policies, stacks)
    files = tuple(PolicyFile(p.name, p.source, sha256_hex(BASELINE.read_bytes()))
                  for p in policies.policies)
    return case, ev, stacks, advice, files


def build(inputs, strategy, verification=None):
    case, ev, _, advice, files = inputs
    return build_signoff(
        case, case_file="cases/ledger_backup_burst.toml",
        case_sha256=sha256_hex(CASE.read_bytes()), policies=files, tool_version="9.9.9",
        seed=11, strategy=strategy, evaluation=ev, advice=advice,
        verification=verification or Verification("skipped", 11))


def _text(doc) -> str:
    return signoff_markdown(doc)


def test_sha256_helper_matches_hashlib():
    data = CASE.read_bytes()
    assert sha256_hex(data) == hashlib.sha256(data).hexdigest()
    # the one-block example of the SHA-256 standard, SHA-256("abc") (FIPS 180-2, appendix B.1;
    # from memory)
    assert sha256_hex(b"abc") == ("ba7816bf8f01cfea414140de5dae2223"
                                  "b00361a396177a9cb410ff61f20015ad")


def test_hashes_version_and_seed_are_in_the_document(inputs):
    doc = build(inputs, "deferred_array")
    md = _text(doc)
    assert hashlib.sha256(CASE.read_bytes()).hexdigest() in md
    assert hashlib.sha256(BASELINE.read_bytes()).hexdigest() in md
    assert doc.case_sha256 == hashlib.sha256(CASE.read_bytes()).hexdigest()
    assert "9.9.9" in md and "| seed | 11" in md


def test_every_caution_of_the_strategy_is_present(inputs):
    case, ev, stacks, _, _ = inputs
    for name in ("deferred_array", "sync_array", "dual_first"):
        doc = build(inputs, name)
        sr = ev.strategy(name)
        stack = next(s for s in stacks if s.strategy == name)
        expected = [c.text for c in cautions_for(case, sr, stack)]
        assert list(doc.cautions) == expected
        md = _text(doc)
        for text in expected:
            assert text in md
    assert build(inputs, "deferred_array").cautions  # deferred commit has cautions to show


def test_the_deferral_closes_the_document(inputs):
    md = _text(build(inputs, "sync_array"))
    assert md.rstrip().endswith(DEFERRAL)
    assert "recovery policy" in DEFERRAL and "regulation" in DEFERRAL and "owners" in DEFERRAL


def test_blank_fields_for_every_role(inputs):
    doc = build(inputs, "sync_array")
    table = next(b for b in doc.sections[0].blocks if isinstance(b, Table))
    assert tuple(r[0] for r in table.rows) == ROLES
    assert all(cell == "" for r in table.rows for cell in r[1:])


def test_best_durable_alternative_is_the_best_ranked_with_no_host_crash_exposure(inputs):
    case, ev, _, advice, _ = inputs
    alt = best_durable_alternative(advice, "deferred_array")
    assert alt is not None and alt.name != "deferred_array"
    # zero host-crash exposure in every regime of the evaluation itself
    assert all(rr.exposure("host_crash").window_p999_ms == 0.0
               for rr in ev.strategy(alt.name).regimes)
    better = [o for o in advice.options if o.rank < alt.rank and o.name != "deferred_array"]
    assert all(dict(o.exposure_p999_ms)["host_crash"] != 0.0 for o in better)
    doc = build(inputs, "deferred_array")
    assert doc.alternative == alt.name
    # choosing the alternative itself gives the next durable option (or none)
    other = best_durable_alternative(advice, alt.name)
    assert other is None or other.name != alt.name


def test_figures_per_regime_for_both_options_are_the_evaluators(inputs):
    _, ev, _, _, _ = inputs
    doc = build(inputs, "deferred_array")
    tables = [b for b in doc.section("Figures per regime").blocks
              if isinstance(b, Table) and b.head[0] == "regime" and "p99" in b.head]
    assert len(tables) == 2
    for table, name in zip(tables, ("deferred_array", doc.alternative), strict=True):
        sr = ev.strategy(name)
        assert [r[0] for r in table.rows] == [*(rr.regime for rr in sr.regimes), "blended"]
        for row, rr in zip(table.rows, sr.regimes, strict=False):
            assert row[5] == format_value(rr.ack_p99_ms, "ms")


def test_exposure_in_plain_words_gives_the_numbers_of_a_losing_strategy(inputs):
    _, ev, _, _, _ = inputs
    doc = build(inputs, "deferred_array")
    words = " ".join(b.text for b in doc.section("Exposure and loss, in plain words").blocks
                     if hasattr(b, "text"))
    sr = ev.strategy("deferred_array")
    worst = max(sr.regimes, key=lambda r: r.exposure("host_crash").window_p999_ms)
    e = worst.exposure("host_crash")
    assert format_value(e.window_p999_ms, "ms") in words
    assert format_value(e.at_risk_mean, "commits") in words
    assert format_value(sr.blended.exposure("host_crash").expected_lost_per_year, "commits") \
        in words
    assert "no acknowledged commit is lost" not in words.split("For comparison")[0]
    durable = " ".join(b.text for b in build(inputs, "sync_array").section(
        "Exposure and loss, in plain words").blocks if hasattr(b, "text"))
    assert "A host crash or power loss: no acknowledged commit is lost" in durable


def test_every_rule_outcome_is_listed(inputs):
    _, _, _, advice, _ = inputs
    doc = build(inputs, "deferred_array")
    row = next(o for o in advice.options if o.name == "deferred_array")
    table = next(b for b in doc.section("Rules met and broken").blocks if isinstance(b, Table))
    assert [r[1] for r in table.rows] == [o.rule for o in row.judgement.outcomes]
    assert any(r[3] == "BROKEN" for r in table.rows)  # deferred commit breaks the baseline
    assert "not allowed" in doc.sections[0].blocks[1].text


def test_model_limits_and_evaluator_notes_are_listed(inputs):
    _, ev, _, _, _ = inputs
    doc = build(inputs, "dual_first")
    sec = doc.section("Assumptions and the model's limits")
    items = [i for b in sec.blocks if isinstance(b, Bullets) for i in b.items]
    for limit in MODEL_LIMITS:
        assert limit in items
    for rr in ev.strategy("dual_first").regimes:
        for note in rr.notes:
            assert any(note in i for i in items)
    joined = " ".join(items)
    for word in ("lies about durability", "Firmware", "Operator error", "Replication"):
        assert word in joined


def test_skipped_check_is_marked_incomplete(inputs):
    doc = build(inputs, "sync_array")
    sec = doc.section("Check by simulation")
    assert not sec.complete
    md = _text(doc)
    assert "Skipped (--no-verify)" in md and "Incomplete section" in md


def test_a_flagged_figure_of_the_simulator_check_is_shown(inputs):
    rows = (VerifyRow("sync_array", "normal", "commit p99 ms", 1.9, 1.95, "5 %", False),
            VerifyRow("sync_array", "backup_burst", "commit p99 ms", 10.0, 14.0, "5 %", True,
                      "outside by 40 %"))
    doc = build(inputs, "sync_array", Verification("checked", 11, rows))
    sec = doc.section("Check by simulation")
    assert sec.complete
    flagged_table, every = [b for b in sec.blocks if isinstance(b, Table)]
    assert [r[7] for r in flagged_table.rows] == ["FLAGGED"]
    assert [r[7] for r in every.rows] == ["ok", "FLAGGED"]
    assert "1 of 2 figures FLAGGED" in sec.blocks[0].text and "seed 11" in sec.blocks[0].text


def test_a_real_comparison_is_carried_row_for_row(inputs):
    from dataclasses import replace

    from commitadvisor.signoff import verification_from
    from commitadvisor.verify import compare

    _, ev, _, _, _ = inputs
    sub = replace(ev, strategies=tuple(s for s in ev.strategies if s.name == "sync_array"),
                  seed=3)
    same = compare(sub, sub)
    v = verification_from(same)
    assert v.status == "checked" and v.seed == 3 and len(v.rows) == len(same.rows)
    assert not any(r.flagged for r in v.rows)
    # a simulated p99 40 % above the model's must come out flagged, with its difference
    sr = sub.strategies[0]
    normal = sr.regimes[0]
    moved = replace(sub, strategies=(replace(sr, regimes=(
        replace(normal, ack_p99_ms=normal.ack_p99_ms * 1.4), *sr.regimes[1:])),))
    v = verification_from(compare(sub, moved))
    bad = [r for r in v.rows if r.flagged]
    assert [(r.regime, r.figure) for r in bad] == [("normal", "ack_p99_ms")]
    assert bad[0].relative_difference == pytest.approx(0.4)
    md = _text(build(inputs, "sync_array", v))
    assert "+40 %" in md and "FLAGGED" in md


def test_unknown_strategy_lists_the_names(inputs):
    case = inputs[0]
    with pytest.raises(UnknownStrategy) as err:
        build(inputs, "no_such")
    for name in case.strategy_names():
        assert name in str(err.value)


def test_the_same_inputs_give_the_same_document(inputs):
    assert _text(build(inputs, "batched_array")) == _text(build(inputs, "batched_array"))
