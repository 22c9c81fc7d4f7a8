"""The fit-profile and measure commands, driven in-process with typer's CliRunner."""

from __future__ import annotations

import math
import os
import tomllib

import numpy as np
import pytest
from typer.testing import CliRunner

from commitadvisor.cli import app
from commitadvisor.measure_io import read_samples_csv

runner = CliRunner()


@pytest.fixture
def samples_file(tmp_path):
    """Invented flush samples (µs) with a small share of slow outliers."""
    rng = np.random.default_rng(3)
    x_us = rng.lognormal(math.log(500.0), 0.4, 2000)
    slow = rng.random(2000) < 0.01
    x_us[slow] = rng.lognormal(math.log(800_000.0), 0.3, int(slow.sum()))
    path = tmp_path / "flushes.csv"
    path.write_text("# unit: us\n" + "".join(f"{float(v)!r}\n" for v in x_us))
    return path


def test_fit_profile_table(samples_file):
    result = runner.invoke(app, ["fit-profile", str(samples_file)])
    assert result.exit_code == 0, result.stderr
    out = result.stdout
    assert "Latency fits to 2000 samples" in out
    for family in ("lognormal", "gamma", "weibull", "mixture"):
        assert family in out
    chosen = [line for line in out.splitlines() if line.rstrip().endswith("chosen")]
    assert chosen and all(line.split()[0] == "mixture" for line in chosen)
    entry = out.rstrip("\n").splitlines()[-1]
    assert tomllib.loads(f"x = {entry}")["x"]["kind"] == "mixture"


def test_fit_profile_toml_only(samples_file):
    result = runner.invoke(app, ["fit-profile", str(samples_file), "--format", "toml"])
    assert result.exit_code == 0, result.stderr
    lines = result.stdout.strip().splitlines()
    assert len(lines) == 1
    parts = tomllib.loads(f"x = {lines[0]}")["x"]["parts"]
    # Declared unit us -> profile in ms: the body's median near 0.5 ms, the outliers' near
    # 800 ms, each within 5 standard errors of its ln-median, sigma / sqrt(n_part), with
    # about 1980 body samples (sigma 0.4) and 20 outliers (sigma 0.3).
    body_p50, slow_p50 = (part["profile"]["p50_ms"] for part in parts)
    assert abs(math.log(body_p50 / 0.5)) < 5 * 0.4 / math.sqrt(1980)
    assert abs(math.log(slow_p50 / 800.0)) < 5 * 0.3 / math.sqrt(20)


def test_fit_profile_unit_option_overrides_and_is_needed_without_declaration(tmp_path):
    rng = np.random.default_rng(4)
    path = tmp_path / "plain.csv"
    path.write_text("latency\n" + "".join(f"{float(v)!r}\n" for v in rng.lognormal(0.0, 0.3, 200)))
    missing = runner.invoke(app, ["fit-profile", str(path)])
    assert missing.exit_code == 2
    assert "plain.csv" in missing.stderr and "--unit" in missing.stderr
    entries = {}
    for unit in ("ms", "s"):
        r = runner.invoke(app, ["fit-profile", str(path), "--unit", unit, "--format", "toml"])
        assert r.exit_code == 0, r.stderr
        entries[unit] = tomllib.loads(f"x = {r.stdout.strip()}")["x"]
    # Maximum likelihood is scale-equivariant and AIC differences do not depend on the unit,
    # so the same family is chosen and every time-valued field is 1000 times larger.
    assert entries["s"]["kind"] == entries["ms"]["kind"]
    for key, value in entries["ms"].items():
        if key.endswith("_ms"):
            assert entries["s"][key] == pytest.approx(1000.0 * value, rel=1e-3)
        elif key != "kind":
            assert entries["s"][key] == pytest.approx(value, rel=1e-3)


def test_fit_profile_histogram(tmp_path):
    rng = np.random.default_rng(6)
    x_ms = rng.lognormal(math.log(2.0), 0.5, 3000)
    bounds = [0.25, 0.5, 1, 1.5, 2, 3, 4, 6, 8, 16, math.inf]
    cum = np.searchsorted(np.sort(x_ms), bounds, side="right")
    path = tmp_path / "buckets.csv"
    path.write_text(
        "le,count\n"
        + "".join(
            f"{'+Inf' if math.isinf(b) else b},{c}\n" for b, c in zip(bounds, cum, strict=True)
        )
    )
    result = runner.invoke(app, ["fit-profile", str(path), "--histogram", "--unit", "ms"])
    assert result.exit_code == 0, result.stderr
    assert "cumulative histogram of 3000 observations" in result.stdout
    assert "interpolated linearly within the bucket" in result.stdout


def test_fit_profile_errors_name_file_and_line(tmp_path):
    path = tmp_path / "broken.csv"
    path.write_text("# unit: ms\n1.0\n2.0\nabc\n")
    result = runner.invoke(app, ["fit-profile", str(path)])
    assert result.exit_code == 2
    assert "broken.csv line 4: 'abc' is not a number" in result.stderr
    assert result.stdout == ""


def test_fit_profile_too_few_samples_names_file(tmp_path):
    path = tmp_path / "short.csv"
    path.write_text("# unit: ms\n" + "".join(f"{i + 1}\n" for i in range(5)))
    result = runner.invoke(app, ["fit-profile", str(path)])
    assert result.exit_code == 2
    assert result.stderr.startswith(str(path) + ": ")
    assert "at least 20 samples" in result.stderr


def test_fit_profile_missing_file(tmp_path):
    result = runner.invoke(app, ["fit-profile", str(tmp_path / "none.csv"), "--unit", "ms"])
    assert result.exit_code == 2
    assert "none.csv: cannot read it" in result.stderr


def test_measure_writes_csv_that_fit_profile_reads(tmp_path):
    device_dir = tmp_path / "dev"
    device_dir.mkdir()
    out = tmp_path / "flushes.csv"
    result = runner.invoke(
        app,
        ["measure", str(device_dir), "--count", "25", "--block-bytes", "4096", "--out", str(out)],
    )
    assert result.exit_code == 0, result.stderr
    assert "writes to the device" in result.stdout
    assert "Timed 25 writes of 4096 bytes, each followed by fdatasync" in result.stdout
    assert os.listdir(device_dir) == []
    samples = read_samples_csv(out, "us")
    assert samples.size == 25
    fit = runner.invoke(app, ["fit-profile", str(out), "--format", "toml"])
    assert fit.exit_code == 0, fit.stderr


@pytest.mark.parametrize("flush_call", ["fsync", "o-dsync"])
def test_measure_other_flush_calls_and_append(tmp_path, flush_call):
    result = runner.invoke(
        app, ["measure", str(tmp_path), "--count", "5", "--flush-call", flush_call, "--append"]
    )
    assert result.exit_code == 0, result.stderr
    assert f"each followed by {flush_call}, appending" in result.stdout
    assert "Samples not saved" in result.stdout
    assert os.listdir(tmp_path) == []


def test_measure_refuses_a_file_a_missing_dir_and_both_limits(tmp_path):
    a_file = tmp_path / "f.txt"
    a_file.write_text("x")
    r = runner.invoke(app, ["measure", str(a_file)])
    assert r.exit_code == 2 and "f.txt: not a directory" in r.stderr
    r = runner.invoke(app, ["measure", str(tmp_path / "gone")])
    assert r.exit_code == 2 and "gone: no such directory" in r.stderr
    r = runner.invoke(app, ["measure", str(tmp_path), "--count", "3", "--duration", "1"])
    assert r.exit_code == 2 and "either --count or --duration" in r.stderr
    r = runner.invoke(app, ["measure", str(tmp_path), "--count", "3", "--out", "nodir/x.csv"])
    assert r.exit_code == 2 and "directory does not exist" in r.stderr
    assert os.listdir(tmp_path) == ["f.txt"]


def test_help_explains_options_and_units():
    fit_help = runner.invoke(app, ["fit-profile", "--help"])
    assert fit_help.exit_code == 0
    for word in ("--unit", "--histogram", "--format", "us, ms or s", "AIC"):
        assert word in fit_help.stdout
    measure_help = runner.invoke(app, ["measure", "--help"])
    assert measure_help.exit_code == 0
    for word in ("--block-bytes", "--count", "--duration", "--flush-call", "--append", "--out"):
        assert word in measure_help.stdout
    assert "seconds" in measure_help.stdout and "µs" in measure_help.stdout


def test_measure_interrupted_exits_130_and_cleans_up(tmp_path, monkeypatch):
    from commitadvisor import measure as measure_module

    real = measure_module.measure_flush_latency

    def interrupted(directory, **kwargs):
        def stop(done, total):
            if done == 3:
                raise KeyboardInterrupt

        return real(directory, **{**kwargs, "progress": stop})

    monkeypatch.setattr(measure_module, "measure_flush_latency", interrupted)
    result = runner.invoke(app, ["measure", str(tmp_path), "--count", "10"])
    assert result.exit_code == 130
    assert "interrupted; the scratch file was removed" in result.stderr
    assert os.listdir(tmp_path) == []
