"""The real commands on the shipped cases and on broken case files."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from typer.testing import CliRunner

from commitadvisor.cli import app

ROOT = Path(__file__).resolve().parents[2]
CASES = sorted((ROOT / "cases").glob("*.toml"))
LEDGER = (ROOT / "cases" / "ledger_backup_burst.toml").read_text()
runner = CliRunner()


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.name)
def test_check_passes_on_every_shipped_case(case):
    r = runner.invoke(app, ["check", str(case), "--no-color"])
    assert r.exit_code == 0, r.output
    assert "valid" in r.output and "Strategies" in r.output


@pytest.mark.parametrize("case", CASES, ids=lambda p: p.name)
def test_evaluate_json_on_every_shipped_case(case):
    r = runner.invoke(app, ["evaluate", str(case), "--format", "json"])
    assert r.exit_code == 0, r.output
    doc = json.loads(r.output)
    assert doc["format_version"] == 1
    names = [s["name"] for s in doc["strategies"]]
    assert len(names) == len(set(names)) >= 2
    for s in doc["strategies"]:
        for reg in s["regimes"]:
            if reg["saturation"] is None:
                assert reg["ack_p99_ms"] > 0 and reg["ack_p99_ms"] >= reg["ack_p50_ms"]
            else:
                assert reg["ack_p99_ms"] is None  # saturated: no made-up latency


def test_evaluate_table_names_regimes_and_defers():
    r = runner.invoke(app, ["evaluate", str(ROOT / "cases" / "ledger_backup_burst.toml")])
    assert r.exit_code == 0, r.output
    assert "backup_burst" in r.output
    assert "recovery policy" in r.output


BROKEN = [
    ("unknown key with hint", ("gather_window_ms = 1.0", "gather_windw_ms = 1.0"),
     "gather_windw_ms", "did you mean 'gather_window_ms'"),
    ("percentiles out of order", ("p50_ms = 0.6, p99_ms = 3.0", "p50_ms = 0.6, p99_ms = 0.3"),
     "devices.array_lun.latency.normal", "must be greater"),
    ("unknown device", ('kind = "synchronous"\ndevice = "array_lun"',
                        'kind = "synchronous"\ndevice = "array_lnu"'),
     "strategies[0]", "array_lnu"),
    ("regime longer than its period", ("duration_s = 300", "duration_s = 4000"),
     "regimes[0]", "shorter than period_s"),
    ("same device twice", ('devices = ["local_plp", "array_lun"]',
                           'devices = ["array_lun", "array_lun"]'), "strategies[3]", "twice"),
    ("negative rate", ("requests_per_s = 400.0", "requests_per_s = -4.0"),
     "stack[0].requests_per_s", "greater than 0"),
    ("unknown strategy kind", ('kind = "batched"', 'kind = "batchy"'), "strategies[1]",
     "batchy"),
    ("stack contradicts workload", ('kind = "open"                       # the commit rate',
                                    'kind = "open"\ncommit_rate_per_s = 9999.0 # the commit rate'),
     "workload.commit_rate_per_s", "contradicts"),
    ("unknown regime in device", ("latency.backup_burst =", "latency.backup_brust ="),
     "devices.array_lun.latency.backup_brust", "did you mean 'backup_burst'"),
    ("closed without sessions", ('kind = "open"                       # the commit rate',
                                 'kind = "closed"\nthink_time_ms = 5.0 #'),
     "workload", "sessions"),
    ("missing section", ("[goals]\ncommit_p99_ms = 10.0\ntop_tier_p99_ms = 250.0\n", ""),
     "goals", "required"),
    ("wrong schema version", ("schema_version = 1", "schema_version = 7"), "schema_version",
     "reads schema_version 1"),
    ("volatile honoured without evidence",
     ('cache = "power_loss_protected"\nbandwidth_mb_per_s = 2000.0',
      'cache = "volatile"\nflushes_honoured = true\nbandwidth_mb_per_s = 2000.0'),
     "devices.local_plp", "evidence"),
    ("TOML syntax", ("[goals]", "[goals"), "", "TOML syntax"),
    ("value of the wrong type", ("threads = 64", 'threads = "many"'), "stack[0].threads",
     "integer"),
]


@pytest.mark.parametrize("label, edit, field, words", BROKEN, ids=[b[0] for b in BROKEN])
def test_broken_case_exits_2_and_names_the_field(tmp_path, label, edit, field, words):
    old, new = edit
    assert old in LEDGER, f"test setup: {old!r} not in the demo case"
    bad = tmp_path / "bad.toml"
    bad.write_text(LEDGER.replace(old, new, 1))
    r = runner.invoke(app, ["check", str(bad)])
    assert r.exit_code == 2, r.output
    out = r.output
    assert str(bad) in out
    assert field in out and words in out, out
    assert "Traceback" not in out


def test_missing_file_is_a_clear_error(tmp_path):
    r = runner.invoke(app, ["check", str(tmp_path / "nope.toml")])
    assert r.exit_code == 2 and "no such file" in r.output


def test_json_case_files_are_read_too(tmp_path):
    import tomllib

    data = tomllib.loads(LEDGER)
    p = tmp_path / "case.json"
    p.write_text(json.dumps(data))
    assert runner.invoke(app, ["check", str(p)]).exit_code == 0


def test_new_case_passes_check_and_refuses_to_overwrite(tmp_path):
    p = tmp_path / "mine.toml"
    assert runner.invoke(app, ["new-case", str(p)]).exit_code == 0
    assert runner.invoke(app, ["check", str(p)]).exit_code == 0
    r = runner.invoke(app, ["new-case", str(p)])
    assert r.exit_code == 2 and "--force" in r.output
    assert runner.invoke(app, ["new-case", str(p), "--force"]).exit_code == 0


def test_schema_is_json_schema_with_sections():
    r = runner.invoke(app, ["schema"])
    doc = json.loads(r.output)
    assert {"workload", "recovery", "devices", "strategies"} <= set(doc["properties"])


def test_help_does_not_import_scipy_and_version_runs():
    code = ("import sys; from commitadvisor.cli import app\n"
            "try:\n    app(['--help'])\nexcept SystemExit:\n    pass\n"
            "assert 'scipy' not in sys.modules, 'scipy imported by --help'\n")
    subprocess.run([sys.executable, "-c", code], check=True, capture_output=True)
    out = subprocess.run([sys.executable, "-m", "commitadvisor", "--version"], check=True,
                         capture_output=True, text=True).stdout
    assert out.startswith("commitadvisor ")
