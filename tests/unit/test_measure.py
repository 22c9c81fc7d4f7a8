"""Unit tests of commitadvisor.measure: real flushes on a small scratch file in tmp_path."""

from __future__ import annotations

import dataclasses
import os

import numpy as np
import pytest

from commitadvisor import measure
from commitadvisor.measure import (
    MEASURE_NOTICE,
    PLAUSIBLE_MIN_FLUSH_US,
    measure_flush_latency,
    plausibility_warning,
    write_samples_csv,
)
from commitadvisor.measure_io import read_samples_csv

BLOCK = 4096
COUNT = 20


@pytest.mark.parametrize("flush_call", ["fdatasync", "fsync", "o-dsync"])
def test_measure_produces_samples_and_cleans_up(tmp_path, flush_call):
    calls: list[tuple[int, int]] = []
    result = measure_flush_latency(
        tmp_path,
        block_bytes=BLOCK,
        count=COUNT,
        flush_call=flush_call,
        progress=lambda done, total: calls.append((done, total)),
    )
    assert len(result.samples_us) == COUNT
    assert isinstance(result.samples_us, tuple)
    assert all(s > 0 for s in result.samples_us)
    assert result.median_us == pytest.approx(float(np.median(result.samples_us)))
    assert result.flush_call == flush_call
    assert result.block_bytes == BLOCK
    assert result.prefill_bytes == COUNT * BLOCK
    assert calls == [(i, COUNT) for i in range(1, COUNT + 1)]
    assert result.notice == MEASURE_NOTICE
    assert os.listdir(tmp_path) == []
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.block_bytes = 1  # type: ignore[misc]


def test_append_mode_needs_no_prefill(tmp_path):
    result = measure_flush_latency(tmp_path, block_bytes=BLOCK, count=5, append=True)
    assert result.append is True
    assert result.prefill_bytes == 0
    assert len(result.samples_us) == 5
    assert os.listdir(tmp_path) == []


def test_prefill_is_rounded_up_to_whole_blocks(tmp_path):
    result = measure_flush_latency(tmp_path, block_bytes=BLOCK, count=3, prefill_bytes=5000)
    assert result.prefill_bytes == 2 * BLOCK


def test_duration_mode_reports_milliseconds(tmp_path):
    calls: list[tuple[int, int]] = []
    result = measure_flush_latency(
        tmp_path,
        block_bytes=BLOCK,
        duration_s=0.05,
        prefill_bytes=8 * BLOCK,
        progress=lambda done, total: calls.append((done, total)),
    )
    assert len(result.samples_us) >= 1
    assert result.elapsed_s >= 0.05
    assert calls[-1] == (50, 50)
    assert all(total == 50 for _, total in calls)
    assert os.listdir(tmp_path) == []


def test_samples_csv_round_trip(tmp_path):
    result = measure_flush_latency(tmp_path / ".", block_bytes=BLOCK, count=COUNT)
    out = tmp_path / "flushes.csv"
    write_samples_csv(out, result.samples_us)
    text = out.read_text()
    assert text.startswith("# unit: us\n")
    assert len(text.splitlines()) == COUNT + 1
    back = read_samples_csv(out, "us")
    # us -> ms is a division by 1000 in the reader; the same division of the written values
    # must give the same floats, bit for bit.
    assert np.array_equal(back, np.asarray(result.samples_us) / 1000.0)
    assert os.listdir(tmp_path) == ["flushes.csv"]  # no temporary file left


def test_write_samples_csv_replaces_existing_file(tmp_path):
    out = tmp_path / "flushes.csv"
    out.write_text("old content\n")
    write_samples_csv(out, [1.5, 2.25])
    assert out.read_text() == "# unit: us\n1.5\n2.25\n"
    assert sorted(os.listdir(tmp_path)) == ["flushes.csv"]


def test_keyboard_interrupt_midway_removes_scratch_file(tmp_path):
    seen: list[list[str]] = []

    def interrupt(done: int, total: int) -> None:
        seen.append(os.listdir(tmp_path))
        if done == 7:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        measure_flush_latency(tmp_path, block_bytes=BLOCK, count=COUNT, progress=interrupt)
    # The scratch file existed while measuring, and is gone afterwards.
    assert len(seen) == 7
    assert all(len(names) == 1 and names[0].startswith(measure.SCRATCH_PREFIX) for names in seen)
    assert os.listdir(tmp_path) == []


def test_other_error_in_progress_also_cleans_up(tmp_path):
    def fail(done: int, total: int) -> None:
        raise RuntimeError("display broke")

    with pytest.raises(RuntimeError, match="display broke"):
        measure_flush_latency(tmp_path, block_bytes=BLOCK, count=COUNT, progress=fail)
    assert os.listdir(tmp_path) == []


def test_fill_writes_real_bytes_not_a_sparse_file(tmp_path):
    path = tmp_path / "fill.bin"
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o600)
    try:
        measure._fill(fd, 256 * 1024, 64 * 1024)
    finally:
        os.close(fd)
    info = os.stat(path)
    assert info.st_size == 256 * 1024
    # Allocated blocks (512-byte units) cover the whole size: nothing is a hole.
    assert info.st_blocks * 512 >= info.st_size
    assert path.read_bytes().count(0) < 256 * 1024 // 100  # random bytes, not zeros


def test_refuses_a_file_and_a_missing_directory(tmp_path):
    a_file = tmp_path / "not_a_dir.txt"
    a_file.write_text("x")
    with pytest.raises(ValueError, match="not a directory"):
        measure_flush_latency(a_file, count=1)
    with pytest.raises(ValueError, match="no such directory"):
        measure_flush_latency(tmp_path / "missing", count=1)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"count": 3, "duration_s": 1.0}, "either count or duration_s"),
        ({"count": 0}, "count must be"),
        ({"duration_s": -1.0}, "duration_s must be"),
        ({"block_bytes": 0, "count": 1}, "block_bytes must be"),
        ({"flush_call": "sync", "count": 1}, "flush_call must be one of"),
        ({"prefill_bytes": 0, "count": 1}, "prefill_bytes must be"),
    ],
)
def test_bad_settings_are_refused_before_writing(tmp_path, kwargs, message):
    with pytest.raises(ValueError, match=message):
        measure_flush_latency(tmp_path, **kwargs)
    assert os.listdir(tmp_path) == []


def test_plausibility_warning_threshold():
    # Threshold: common practice, no source (devices with power-loss protection flush in
    # roughly 10-60 us; consumer flash without it in 0.5-5 ms).
    assert PLAUSIBLE_MIN_FLUSH_US == 50.0
    warning = plausibility_warning(12.0, "fdatasync")
    assert warning is not None
    assert "cannot tell" in warning
    assert "power-loss protection" in warning
    assert "not durable" in warning
    assert plausibility_warning(49.9, "fsync") is not None
    assert plausibility_warning(50.0, "fsync") is None
    assert plausibility_warning(800.0, "o-dsync") is None
    with pytest.raises(ValueError):
        plausibility_warning(10.0, "sync")


def test_result_warning_follows_its_median(tmp_path):
    result = measure_flush_latency(tmp_path, block_bytes=BLOCK, count=COUNT)
    assert result.plausibility_warning == plausibility_warning(result.median_us, "fdatasync")


def test_notice_says_it_writes_and_results_vary():
    assert "writes to the device" in MEASURE_NOTICE
    assert "vary over time" in MEASURE_NOTICE


def test_summarise_flushes_against_numpy():
    from commitadvisor.measure import summarise_flushes

    samples = [float(v) for v in range(1, 1001)]  # 1..1000 us
    s = summarise_flushes(samples)
    # numpy's default (linear, Hyndman and Fan definition 7): position (n - 1) q.
    assert s.p50_us == pytest.approx(500.5)
    assert s.p90_us == pytest.approx(900.1)
    assert s.p99_us == pytest.approx(990.01)
    assert s.p999_us == pytest.approx(999.001)
    assert s.max_us == 1000.0
    assert s.mean_us == pytest.approx(500.5)
    assert s.count == 1000
    with pytest.raises(ValueError):
        summarise_flushes([])
