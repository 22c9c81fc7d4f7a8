"""``commitadvisor advise`` on the shipped cases: cautions carry the loss figures, the
deferral is always there, the three formats carry the same figures, every shipped case's
expected section is what advise produces, and organisation policies work end to end.

The evaluator is memoised per case file for this module (the command itself runs as it
does for a user); that keeps the module within a few seconds.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest
from typer.testing import CliRunner

import commitadvisor.evaluate as evaluate_module
import commitadvisor.stack as stack_module
from commitadvisor.case import load_case
from commitadvisor.cli import app
from commitadvisor.policy import format_value
from commitadvisor.ranking import DEFERRAL
from commitadvisor.render.advise_text import cell_ms

ROOT = Path(__file__).resolve().parents[2]
CASES = sorted((ROOT / "cases").glob("*.toml"))
LEDGER = ROOT / "cases" / "ledger_backup_burst.toml"
runner = CliRunner()
_real_evaluate = evaluate_module.evaluate
_real_stacks = stack_module.evaluate_stacks
_memo: dict[tuple[str, str], object] = {}


def _memo_evaluate(case):
    key = ("evaluate", case.model_dump_json())
    if key not in _memo:
        _memo[key] = _real_evaluate(case)
    return _memo[key]


def _memo_stacks(case, strategies):
    key = ("stacks", case.model_dump_json())
    if key not in _memo:
        _memo[key] = _real_stacks(case, strategies)
    return _memo[key]


@pytest.fixture(autouse=True, scope="module")
def _memoised_models():
    mp = pytest.MonkeyPatch()
    mp.setattr(evaluate_module, "evaluate", _memo_evaluate)
    mp.setattr(stack_module, "evaluate_stacks", _memo_stacks)
    yield
    mp.undo()


_outputs: dict[tuple[str, str], str] = {}


def advise(case: Path, fmt: str = "table", *extra: str) -> str:
    key = (str(case), fmt + " ".join(extra))
    if key not in _outputs:
        args = ["advise", str(case), "--format", fmt, *extra]
        if fmt == "table":
            args.append("--no-color")
        r = runner.invoke(app, args)
        assert r.exit_code == 0, r.output
        _outputs[key] = r.output
    return _outputs[key]


def doc(case: Path) -> dict:
    return json.loads(advise(case, "json"))


def _flat(text: str) -> str:
    """Terminal output wraps long lines; join them to search for a sentence."""
    return re.sub(r"\s+", " ", text)


# --------------------------------------------------------------------------- every format
@pytest.mark.parametrize("case", CASES, ids=lambda p: p.stem)
def test_summary_first_and_deferral_always(case):
    table = advise(case)
    d = doc(case)
    first = table.splitlines()[0]
    assert re.fullmatch(r"\d+ options? allowed, \d+ needs? sign-off, \d+ not allowed under .+",
                        first), first
    assert first == d["summary"]
    md = advise(case, "markdown")
    assert d["deferral"] == DEFERRAL
    for text in (_flat(table), _flat(md)):
        assert _flat(DEFERRAL) in text
        assert "recovery policy, its owners and the applicable regulation decide" in text
    assert d["format"] == "commitadvisor-advice" and d["format_version"] == 1
    assert "\x1b[" not in table


def _table_rows(table: str, n: int) -> list[list[str]]:
    rows = []
    for line in table.splitlines():
        m = re.match(r"^\s*(\d+)\s{2,}\S", line)
        if m and len(rows) < n:
            rows.append([c for c in re.split(r"\s{2,}", line.strip())])
    return rows


def _md_rows(md: str) -> list[list[str]]:
    out = []
    for line in md.splitlines():
        if re.match(r"^\| \d+ \|", line):
            out.append([c.strip() for c in line.strip("|").split(" | ")])
    return out


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.stem)
def test_json_markdown_and_table_carry_the_same_figures(case):
    d = doc(case)
    n = len(d["options"])
    table_rows = _table_rows(advise(case), n)
    md_rows = _md_rows(advise(case, "markdown"))
    assert len(table_rows) == len(md_rows) == n
    assert table_rows == md_rows
    regimes = [r["name"] for r in d["regimes"]]
    for row, opt in zip(md_rows, d["options"], strict=True):
        assert row[0] == str(opt["rank"]) and row[1] == opt["strategy"]
        assert row[2] == opt["verdict_words"]
        f = opt["figures"]
        for i, reg in enumerate(regimes):
            v = f["commit_p99_ms"][reg]
            assert row[3 + i] == ("saturated" if v is None and reg in f["saturated_in"]
                                  else cell_ms(v)), (opt["strategy"], reg)
        exposure = " / ".join(
            cell_ms(math.inf if x == "unbounded" else x)
            for x in f["exposure_window_p999_ms"].values())
        assert exposure in row
        lost = f["lost_per_host_crash"]
        if lost["mean_commits"] is not None:
            cells = [format_value(lost[k], "commits").removesuffix(" commits")
                     if lost[k] is not None else "-"
                     for k in ("mean_commits", "p999_commits", "bound_commits")]
            assert " / ".join(cells) in row
        if f["expected_lost_commits_per_year"] is not None and \
                f["exposure_window_p999_ms"]["host_crash"] != "unbounded":
            per_year = format_value(f["expected_lost_commits_per_year"], "commits")
            assert per_year.removesuffix(" commits") in row
        if f["flushes_per_s"] is not None:
            assert format_value(f["flushes_per_s"], "per_s").removesuffix("/s") == row[-1]


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.stem)
def test_every_strategy_with_exposure_says_so_with_its_numbers(case):
    d = doc(case)
    table, md = _flat(advise(case)), _flat(advise(case, "markdown"))
    for opt in d["options"]:
        exposures = opt["figures"]["exposure_window_p999_ms"]
        for failure, value in exposures.items():
            if value is None or value == 0:
                continue
            topic = "device_loss" if failure == "device_loss" else "loss"
            found = [c for c in opt["cautions"] if c["failure"] == failure
                     and c["topic"] == topic]
            assert found, (opt["strategy"], failure)
            c = found[0]
            assert _flat(c["text"]) in table and _flat(c["text"]) in md
            figs = c["figures"]
            if value == "unbounded":
                # no count can be given: the caution says that plainly, with what is known
                assert "bound" in c["text"]
                if failure == "device_loss":
                    per_year = load_case(case).recovery.device_loss.per_year
                    assert f"{per_year:g} device losses a year" in c["text"]
                continue
            # a finite exposure: the mean, the most that can be lost and the yearly loss
            assert format_value(figs["lost_commits_mean"], "commits") in c["text"]
            assert format_value(figs["lost_commits_p999"], "commits").split()[0] in c["text"]
            assert format_value(figs["exposure_window_p999_ms"], "ms") in c["text"]
            if figs.get("expected_lost_commits_per_year") is not None:
                assert format_value(figs["expected_lost_commits_per_year"], "commits") \
                    in c["text"]
            if figs.get("expected_loss_value_per_year") is not None:
                currency = d["options"][0]["figures"]["currency"]
                assert format_value(figs["expected_loss_value_per_year"], "value",
                                    currency) in c["text"]


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.stem)
def test_each_option_lists_its_rules_and_the_deciding_regime(case):
    d = doc(case)
    table = _flat(advise(case))
    for opt in d["options"]:
        assert f"{opt['rank']}. {opt['strategy']}: {opt['verdict_words']}" in table
        assert opt["rules"], opt["strategy"]
        for r in opt["rules"]:
            assert _flat(r["message"]) in table
        if opt["verdict"] != "allowed":
            assert opt["decided_by"] and "Decided by" in table
            for p in opt["decided_by"]:
                assert p in [x["name"] for x in d["policies"]]
        broken = [r for r in opt["rules"] if r["status"] == "broken"
                  and r["severity"] == opt["verdict"]]
        assert bool(broken) == (opt["verdict"] != "allowed")


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.stem)
def test_shipped_expected_section_is_what_advise_produces(case):
    expected = load_case(case).expected
    assert expected is not None and expected.verdicts, f"{case.name} has no expected section"
    d = doc(case)
    got = {o["strategy"]: o["verdict"] for o in d["options"]}
    assert got == dict(expected.verdicts)
    assert [o["strategy"] for o in d["options"]] == list(expected.order)


def test_output_is_the_same_twice(monkeypatch):
    # the stack model runs afresh (not memoised) so that its figures are compared too
    monkeypatch.setattr(stack_module, "evaluate_stacks", _real_stacks)
    r1 = runner.invoke(app, ["advise", str(LEDGER), "--format", "json"])
    assert r1.exit_code == 0
    assert r1.output == advise(LEDGER, "json")


# --------------------------------------------------------------------------- policies
OURS = '''
format_version = 1
policy = "Larkspur Mutual payments policy"
switch_off = ["commit-p99-goal"]

[[rule]]
id = "payments-top-tier-hard"
metric = "top_tier_p99_ms"
comparison = "at_most"
threshold = "goals.top_tier_p99_ms"
severity = "not_allowed"
message = "In {regime}, card authorisations take {value} at p99; the limit is {threshold}."
'''


def test_an_organisation_policy_decides_and_is_named(tmp_path):
    ours = tmp_path / "ours.toml"
    ours.write_text(OURS, encoding="utf-8")
    base = doc(LEDGER)
    out = runner.invoke(app, ["advise", str(LEDGER), "--policy", str(ours), "--format", "json"])
    assert out.exit_code == 0, out.output
    d = json.loads(out.output)
    assert [p["name"] for p in d["policies"]] == ["Cautious baseline",
                                                  "Larkspur Mutual payments policy"]
    assert d["policies"][1]["source"] == str(ours)
    assert d["switched_off"] == [{"rule": "commit-p99-goal",
                                  "by": "Larkspur Mutual payments policy"}]
    assert d["summary"].endswith("under Cautious baseline + Larkspur Mutual payments policy")
    before = {o["strategy"]: o for o in base["options"]}
    for o in d["options"]:
        assert all(r["rule"] != "commit-p99-goal" for r in o["rules"])
        top = o["figures"]["top_tier_p99_ms"]
        over = any(v is None or v > 250.0 for v in top.values())
        if over:
            # the organisation's own rule makes an option above the top-tier goal not allowed
            assert o["verdict"] == "not_allowed"
            assert "Larkspur Mutual payments policy" in o["decided_by"]
        else:
            assert o["verdict"] == before[o["strategy"]]["verdict"]
    table = runner.invoke(app, ["advise", str(LEDGER), "--policy", str(ours), "--no-color"])
    decided_by_ours = [o for o in d["options"]
                       if "Larkspur Mutual payments policy" in o["decided_by"]]
    assert decided_by_ours, "the top-tier rule should decide at least one option here"
    assert f"Decided by Larkspur Mutual payments policy ({ours})" in _flat(table.output)


def test_a_policy_that_replaces_the_baseline(tmp_path):
    ours = tmp_path / "only.toml"
    ours.write_text(OURS.replace('switch_off = ["commit-p99-goal"]', "replaces_baseline = true"),
                    encoding="utf-8")
    r = runner.invoke(app, ["advise", str(LEDGER), "--policy", str(ours), "--format", "json"])
    assert r.exit_code == 0, r.output
    d = json.loads(r.output)
    assert [p["name"] for p in d["policies"]] == ["Larkspur Mutual payments policy"]
    for o in d["options"]:
        assert {r["rule"] for r in o["rules"]} == {"payments-top-tier-hard"}


BAD = [
    ('severty = "warning"', "rule[0].severty", "did you mean 'severity'"),
    ('metric = "top_tier_p99"', "rule[0].metric", "did you mean 'top_tier_p99_ms'"),
    ('comparison = "at_mots"', "rule[0].comparison", "did you mean 'at_most'"),
    ('severity = "blocker"', "rule[0].severity", "not_allowed"),
    ('threshold = "goals.top_p99_ms"', "rule[0].threshold", "did you mean"),
    ('message = "{vallue}"', "rule[0].message", "did you mean 'value'"),
    ('threshold = "recovery.copies_at_ack"', "rule[0].threshold", "cannot be compared"),
    ('comparison = "is_true"', "rule[0].comparison", "at_most"),
    ('switch_off = ["no-saturaton"]', "switch_off[0]", "did you mean 'no-saturation'"),
    ('format_version = 7', "format_version", "format_version 1"),
]


@pytest.mark.parametrize(("change", "field", "words"), BAD, ids=[b[1] + ":" + b[0] for b in BAD])
def test_bad_policy_files_exit_2_naming_file_and_field(tmp_path, change, field, words):
    key = change.split("=")[0].strip()
    lines = OURS.strip().splitlines()
    replaced = False
    for i, line in enumerate(lines):
        if line.split("=")[0].strip() == key:
            lines[i] = change
            replaced = True
    if not replaced:
        lines.append(change)
    bad = tmp_path / "bad_policy.toml"
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")
    r = runner.invoke(app, ["advise", str(LEDGER), "--policy", str(bad)])
    assert r.exit_code == 2, r.output
    assert f"{bad}: {field}:" in r.output, r.output
    assert words in r.output
    assert "Traceback" not in r.output


def test_a_missing_policy_file_exits_2(tmp_path):
    r = runner.invoke(app, ["advise", str(LEDGER), "--policy", str(tmp_path / "none.toml")])
    assert r.exit_code == 2 and "no such file" in r.output


def test_every_json_key_is_documented():
    text = (ROOT / "docs" / "advise-json.md").read_text("utf-8")
    d = doc(LEDGER)
    keys = set(d) | set(d["options"][0]) | set(d["options"][0]["figures"])
    keys |= set(d["options"][0]["rules"][0]) | set(d["options"][0]["cautions"][0])
    keys |= set(d["options"][0]["figures"]["lost_per_host_crash"])
    for c in (c for o in d["options"] for c in o["cautions"]):
        keys |= set(c["figures"])
    for k in keys:
        assert f"`{k}`" in text, k
