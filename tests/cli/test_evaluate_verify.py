"""evaluate --verify: analytic and simulated figures side by side, flags pinned."""

from __future__ import annotations

import json
from pathlib import Path

from typer.testing import CliRunner

from commitadvisor.cli import app

ROOT = Path(__file__).resolve().parents[2]
runner = CliRunner()


def test_verify_json_carries_every_comparison_and_is_deterministic():
    args = ["evaluate", str(ROOT / "cases" / "plp_vs_volatile.toml"), "--verify",
            "--commits", "5000", "--seed", "3", "--format", "json"]
    first = runner.invoke(app, args)
    assert first.exit_code == 0, first.output
    doc = json.loads(first.output)
    ver = doc["verification"]
    assert ver["seed"] == 3 and ver["rows"]
    names = {r["strategy"] for r in ver["rows"]}
    assert names == {s["name"] for s in doc["strategies"]}
    for row in ver["rows"]:
        if row["relative_difference"] is not None and not row["flagged"]:
            assert abs(row["relative_difference"]) <= 0.5  # tolerances are all below 50 %
    assert ver["agrees"] == (not any(r["flagged"] for r in ver["rows"]))
    assert runner.invoke(app, args).output == first.output


def test_verify_table_names_each_strategy_and_the_flags():
    r = runner.invoke(app, ["evaluate", str(ROOT / "cases" / "plp_vs_volatile.toml"),
                            "--verify", "--commits", "5000", "--no-color"])
    assert r.exit_code == 0, r.output
    assert "Check against the simulator (seed 1)" in r.output
    for name in ("sync_plp", "sync_cheap", "deferred_cheap"):
        assert f"{name}: " in r.output
