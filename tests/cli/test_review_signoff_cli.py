"""review-benchmark and signoff on the shipped cases, in-process."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

import commitadvisor.evaluate
import commitadvisor.review
import commitadvisor.stack
from commitadvisor.cli import app

ROOT = Path(__file__).resolve().parents[2]
BENCH = ROOT / "cases" / "benchmark_deferred_review.toml"
LEDGER = ROOT / "cases" / "ledger_backup_burst.toml"
BASELINE = ROOT / "rules" / "baseline.toml"
runner = CliRunner()


def memoised(fn):
    """The same pure computation once per test module (the commands still call it)."""
    seen = {}

    def wrapper(case, *args, **kwargs):
        key = (case.model_dump_json(), args, tuple(sorted(kwargs.items())))
        if key not in seen:
            seen[key] = fn(case, *args, **kwargs)
        return seen[key]

    return wrapper


_REVIEW = memoised(commitadvisor.review.review_benchmark)
_EVALUATE = memoised(commitadvisor.evaluate.evaluate)
_STACKS = memoised(commitadvisor.stack.evaluate_stacks)


@pytest.fixture(autouse=True)
def fast(monkeypatch):
    monkeypatch.setattr(commitadvisor.review, "review_benchmark", _REVIEW)
    monkeypatch.setattr(commitadvisor.evaluate, "evaluate", _EVALUATE)
    monkeypatch.setattr(commitadvisor.stack, "evaluate_stacks", _STACKS)


# --------------------------------------------------------------------------- review-benchmark
def test_review_text():
    r = runner.invoke(app, ["review-benchmark", str(BENCH), "--no-color"])
    assert r.exit_code == 0, r.output
    out = r.output
    for words in ("Benchmark review", "With durable commits", "synchronous", "batched",
                  "at risk", "Is the reported rate possible", "Verdict", "recovery policy"):
        assert words in out
    assert "\x1b[" not in out  # --no-color: no escape codes


def test_review_json_is_the_reviews_own_figures():
    r = runner.invoke(app, ["review-benchmark", str(BENCH), "--format", "json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output)
    assert doc["format"] == "commitadvisor-benchmark-review" and doc["format_version"] == 1
    b = doc
    # Little's law on the document's own figures (Little 1961): L = lambda W
    a = b["at_risk"]
    assert a["host_at_risk_mean"] == pytest.approx(
        a["rate_per_s"] / 1000 * a["host_window_mean_ms"], rel=1e-8)
    # the interactive response time law on every durable figure: R = N/X - Z
    z = b["think"]["think_ms"]
    for f in b["durable"]:
        assert f["law_mean_ms"] == pytest.approx(
            b["sessions"] / (f["throughput_per_s"] / 1000) - z, rel=1e-8)
    assert {f["strategy"] for f in b["durable"]} == {"synchronous", "batched"}
    assert b["verdict"] and "recovery policy" in b["deferral"]


def test_review_markdown():
    r = runner.invoke(app, ["review-benchmark", str(BENCH), "--format", "markdown"])
    assert r.exit_code == 0, r.output
    md = r.output
    assert md.startswith("## Benchmark review")
    assert "| strategy | regime | commits/s |" in md
    assert "### Verdict" in md and "regulation" in md


def test_review_without_a_benchmark_section_exits_2():
    r = runner.invoke(app, ["review-benchmark", str(LEDGER)])
    assert r.exit_code == 2
    assert "no [benchmark] section" in r.output


# --------------------------------------------------------------------------- signoff
POLICY = '''
format_version = 1
policy = "Hollowmere data policy"

[[rule]]
id = "hollowmere-commit-p99"
metric = "commit_p99_ms"
comparison = "at_most"
threshold = 5.0
severity = "warning"
message = "{strategy}: commit p99 {value} in {regime}, above 5 ms."
'''


def _signoff(tmp_path, *extra, strategy="deferred_array", out="signoff.md"):
    target = tmp_path / out
    args = ["signoff", str(LEDGER), "--strategy", strategy, "--out", str(target), *extra]
    return runner.invoke(app, args), target


def test_signoff_writes_the_document_with_hashes_cautions_and_deferral(tmp_path):
    policy = tmp_path / "hollowmere.toml"
    policy.write_text(POLICY, encoding="utf-8")
    r, out = _signoff(tmp_path, "--policy", str(policy), "--no-verify", "--seed", "5")
    assert r.exit_code == 0, r.output
    md = out.read_text(encoding="utf-8")
    for path in (LEDGER, BASELINE, policy):
        assert hashlib.sha256(path.read_bytes()).hexdigest() in md
    assert "hollowmere-commit-p99" in md  # the organisation's rule is judged too
    from commitadvisor.case import load_case
    from commitadvisor.cautions import cautions_for
    from commitadvisor.stack import evaluate_stack

    case = load_case(LEDGER)
    sr = _EVALUATE(case).strategy("deferred_array")
    cautions = cautions_for(case, sr, evaluate_stack(case, sr))
    assert cautions
    for c in cautions:
        assert c.text in md
    assert "Skipped (--no-verify)" in md and "| seed | 5" in md
    assert "recovery policy, its owners and the applicable regulation" in md
    assert set(tmp_path.iterdir()) == {out, policy}  # no temporary file left behind


def test_signoff_refuses_to_overwrite_without_force(tmp_path):
    out = tmp_path / "signoff.md"
    out.write_text("keep me", encoding="utf-8")
    r, _ = _signoff(tmp_path, "--no-verify")
    assert r.exit_code == 2 and "--force" in r.output
    assert out.read_text(encoding="utf-8") == "keep me"
    r, _ = _signoff(tmp_path, "--no-verify", "--force")
    assert r.exit_code == 0, r.output
    assert out.read_text(encoding="utf-8").startswith("# Risk sign-off")


def test_signoff_unknown_strategy_exits_2_listing_the_names(tmp_path):
    r, out = _signoff(tmp_path, "--no-verify", strategy="fastest_please")
    assert r.exit_code == 2
    for name in ("sync_array", "batched_array", "deferred_array", "dual_first"):
        assert name in r.output
    assert not out.exists()


def test_no_file_is_left_when_rendering_fails(tmp_path, monkeypatch):
    import commitadvisor.render.signoff_md as md

    def broken(doc):
        raise RuntimeError("renderer failed")

    monkeypatch.setattr(md, "signoff_markdown", broken)
    r, out = _signoff(tmp_path, "--no-verify")
    assert r.exit_code != 0
    assert list(tmp_path.iterdir()) == []


def test_no_partial_file_when_the_write_fails(tmp_path, monkeypatch):
    import commitadvisor.files as files

    def failing_replace(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(files.os, "replace", failing_replace)
    r, out = _signoff(tmp_path, "--no-verify")
    assert r.exit_code == 2 and "cannot be written" in r.output
    assert list(tmp_path.iterdir()) == []  # neither the document nor its temporary file


def test_signoff_checks_the_shown_strategies_with_the_simulator(tmp_path, monkeypatch):
    import commitadvisor.simulate as simulate

    real = simulate.simulate_case
    calls = []

    def small(case, *, seed, **kwargs):
        # 10,000 commits per regime instead of the default million, to keep the test fast;
        # the figures are then noisier, which this test does not judge
        calls.append((case.strategy_names(), seed))
        return real(case, seed=seed, commits=10_000)

    monkeypatch.setattr(simulate, "simulate_case", small)
    r, out = _signoff(tmp_path, "--seed", "3")
    assert r.exit_code == 0, r.output
    assert calls == [(("deferred_array", "dual_first"), 3)]  # the chosen and its alternative
    md = out.read_text(encoding="utf-8")
    section = md.split("## 7. Check by simulation")[1].split("## 8.")[0]
    assert "Checked against the discrete-event simulator with seed 3" in section
    assert "Incomplete section" not in section
    for name in ("deferred_array", "dual_first"):
        assert f"| {name} | normal | ack_p99_ms |" in section


def test_signoff_with_a_missing_policy_file_exits_2(tmp_path):
    r, out = _signoff(tmp_path, "--no-verify", "--policy", str(tmp_path / "absent.toml"))
    assert r.exit_code == 2 and "no such file" in r.output
    assert not out.exists()
