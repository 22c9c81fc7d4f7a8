"""The simulate command on the shipped cases, its series file and its input errors."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from commitadvisor.cli import app

ROOT = Path(__file__).resolve().parents[2]
CASES = sorted((ROOT / "cases").glob("*.toml"))
LEDGER = ROOT / "cases" / "ledger_backup_burst.toml"
BASKET = ROOT / "cases" / "basket_deferred_tolerated.toml"
runner = CliRunner()
QUICK = ["--commits", "1000", "--duration", "3s", "--window", "1s", "--no-color"]


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.name)
def test_simulate_runs_on_every_shipped_case(case):
    r = runner.invoke(app, ["simulate", str(case), *QUICK])
    assert r.exit_code == 0, r.output
    assert "simulated estimates" in r.output and "Seed 1" in r.output
    assert "Steady segments" in r.output and "windows of 1 s over 3 s" in r.output


def test_series_is_written_as_csv(tmp_path):
    out = tmp_path / "series.csv"
    r = runner.invoke(app, ["simulate", str(LEDGER), *QUICK, "--series", str(out),
                            "--seed", "7"])
    assert r.exit_code == 0, r.output
    rows = list(csv.DictReader(out.read_text().splitlines()))
    names = {row["strategy"] for row in rows}
    assert names == {"sync_array", "batched_array", "deferred_array", "dual_first"}
    assert len(rows) == 4 * 3  # four strategies, three windows of 1 s
    assert [float(r["start_s"]) for r in rows if r["strategy"] == "sync_array"] == \
        [0.0, 1.0, 2.0]
    assert all(row["regime"] == "backup_burst" for row in rows)  # the hour starts with it
    assert all(int(row["commits"]) > 0 for row in rows)
    assert "wrote" in r.output


def test_json_document_carries_the_seed_and_series():
    r = runner.invoke(app, ["simulate", str(BASKET), *QUICK, "--format", "json",
                            "--seed", "5"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output)
    assert doc["format"] == "commitadvisor-simulation" and doc["seed"] == 5
    assert doc["evaluation"]["method"] == "simulated" and doc["evaluation"]["seed"] == 5
    assert len(doc["series"]) == 3 * 3  # three strategies, three windows of 1 s
    assert {s["regime"] for s in doc["segments"]} == {"normal", "timeline"}


@pytest.mark.parametrize("args, message", [
    (["--duration", "2x"], "--duration: '2x' is not a duration"),
    (["--duration", "-5m"], "--duration: '-5m' is not a duration"),
    (["--window", "soon"], "--window: 'soon' is not a duration"),
    (["--duration", "20s", "--window", "1m"], "--window (60 s) is longer than --duration"),
])
def test_bad_durations_exit_2_with_one_message(args, message):
    r = runner.invoke(app, ["simulate", str(BASKET), "--commits", "1000", *args])
    assert r.exit_code == 2
    assert message in r.output
    assert "Traceback" not in r.output


def test_missing_case_and_bad_series_directory_exit_2(tmp_path):
    r = runner.invoke(app, ["simulate", str(tmp_path / "none.toml")])
    assert r.exit_code == 2 and "no such file" in r.output
    r = runner.invoke(app, ["simulate", str(LEDGER), "--series",
                            str(tmp_path / "missing" / "s.csv")])
    assert r.exit_code == 2 and "directory does not exist" in r.output


def test_help_names_the_units():
    r = runner.invoke(app, ["simulate", "--help"])
    assert r.exit_code == 0
    for words in ("90s, 5m, 2h", "latencies in ms", "non-negative integer"):
        assert words in " ".join(r.output.split())
