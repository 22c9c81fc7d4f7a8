"""Measure the flush latency of the device behind a directory.

The measurement writes a scratch file in the directory and times each block write together
with the call that makes it durable (fdatasync, fsync, or a write on a file opened with
O_DSYNC), with ``time.perf_counter_ns``. By default the scratch file is first filled with
real bytes and flushed, and the timed writes then overwrite it in place, block by block
(wrapping round when there are more writes than blocks), which is how a preallocated
write-ahead log is written. With ``append=True`` each write extends the file instead: such a
flush must also record the new file size, and can cost about twice as much (common
practice, no source). The scratch file is removed afterwards, also when the run is
interrupted.

This module does file I/O by design; it prints nothing (the caller passes ``progress``).
"""

from __future__ import annotations

import os
import statistics
import tempfile
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

__all__ = [
    "DEFAULT_COUNT",
    "FLUSH_CALLS",
    "FlushSummary",
    "MEASURE_NOTICE",
    "MeasureResult",
    "PLAUSIBLE_MIN_FLUSH_US",
    "check_measure_directory",
    "measure_flush_latency",
    "plausibility_warning",
    "summarise_flushes",
    "write_samples_csv",
]

FLUSH_CALLS = ("fdatasync", "fsync", "o-dsync")
DEFAULT_COUNT = 1000
MAX_DEFAULT_PREFILL_BYTES = 64 * 1024 * 1024
DURATION_PREFILL_BYTES = 16 * 1024 * 1024
SCRATCH_PREFIX = ".commitadvisor-flush-"

PLAUSIBLE_MIN_FLUSH_US = 50.0
"""Below this median a flush is suspiciously fast for a device without power-loss
protection (common practice, no source: devices with power-loss protection flush in
roughly 10–60 µs, consumer flash without it in 0.5–5 ms)."""

MEASURE_NOTICE = (
    "This measurement writes to the device that holds the chosen directory: a scratch file "
    "is written, flushed block by block and removed afterwards. Run it on the device the "
    "write-ahead log will use, at a quiet time or knowingly during load. On a shared or "
    "virtual device the results vary over time with what the neighbours do; measure more "
    "than once, at different times, before trusting one run."
)


@dataclass(frozen=True)
class MeasureResult:
    """Timed flushes (µs, one per block write, in order) and the settings that produced them."""

    directory: str
    block_bytes: int
    flush_call: str
    append: bool
    prefill_bytes: int  # bytes written before timing (0 in append mode)
    samples_us: tuple[float, ...]
    elapsed_s: float  # wall time of the timed part
    median_us: float
    plausibility_warning: str | None
    notice: str = MEASURE_NOTICE


@dataclass(frozen=True)
class FlushSummary:
    """Percentiles (numpy's default linear interpolation), mean and maximum of samples, in µs."""

    count: int
    p50_us: float
    p90_us: float
    p99_us: float
    p999_us: float
    max_us: float
    mean_us: float


def summarise_flushes(samples_us: Sequence[float]) -> FlushSummary:
    """Summary figures (µs) of timed flushes; ValueError when there are none."""
    import numpy as np

    x = np.asarray(samples_us, dtype=float)
    if x.size == 0:
        raise ValueError("no flush samples to summarise")
    p50, p90, p99, p999 = (float(v) for v in np.quantile(x, (0.5, 0.9, 0.99, 0.999)))
    return FlushSummary(
        count=int(x.size),
        p50_us=p50,
        p90_us=p90,
        p99_us=p99,
        p999_us=p999,
        max_us=float(x.max()),
        mean_us=float(x.mean()),
    )


def plausibility_warning(median_us: float, flush_call: str) -> str | None:
    """A warning when the median flush (µs) is implausibly fast, else None.

    All three calls promise that the data is on stable media when they return, so the same
    threshold, PLAUSIBLE_MIN_FLUSH_US, applies to each (common practice, no source).
    """
    if flush_call not in FLUSH_CALLS:
        raise ValueError(f"flush_call must be one of {', '.join(FLUSH_CALLS)}, got {flush_call!r}")
    if median_us >= PLAUSIBLE_MIN_FLUSH_US:
        return None
    return (
        f"The median flush ({flush_call}) took {median_us:.1f} µs, below about "
        f"{PLAUSIBLE_MIN_FLUSH_US:.0f} µs. A device with power-loss protection can flush this "
        "fast (roughly 10-60 µs), but so can a device or layer that does not pass flushes "
        "on to stable media (a volatile cache that ignores flush requests, a virtual disk "
        "with caching on the host, a file system held in memory); then these writes were "
        "not durable when the call returned. This measurement cannot tell which: check that "
        "the device has power-loss protection (its documentation, or a power-cut test) "
        "before counting these flushes as durable."
    )


def check_measure_directory(directory: str | os.PathLike[str]) -> str:
    """The directory as a string; ValueError unless it is an existing writable directory."""
    path = os.fspath(directory)
    if not os.path.exists(path):
        raise ValueError(f"{path}: no such directory")
    if not os.path.isdir(path):
        raise ValueError(f"{path}: not a directory (give the directory on the device to test)")
    if not os.access(path, os.W_OK | os.X_OK):
        raise ValueError(f"{path}: the directory is not writable")
    return path


def _settings(
    block_bytes: int,
    count: int | None,
    duration_s: float | None,
    flush_call: str,
    append: bool,
    prefill_bytes: int | None,
) -> tuple[int | None, float | None, int]:
    if flush_call not in FLUSH_CALLS:
        raise ValueError(f"flush_call must be one of {', '.join(FLUSH_CALLS)}, got {flush_call!r}")
    if flush_call == "fdatasync" and not hasattr(os, "fdatasync"):
        raise ValueError("fdatasync is not available on this platform; use fsync")
    if flush_call == "o-dsync" and not hasattr(os, "O_DSYNC"):
        raise ValueError("O_DSYNC is not available on this platform; use fsync")
    if isinstance(block_bytes, bool) or not isinstance(block_bytes, int) or block_bytes <= 0:
        raise ValueError(f"block_bytes must be a positive whole number, got {block_bytes!r}")
    if count is not None and duration_s is not None:
        raise ValueError("give either count or duration_s, not both")
    if count is None and duration_s is None:
        count = DEFAULT_COUNT
    if count is not None and (isinstance(count, bool) or not isinstance(count, int) or count < 1):
        raise ValueError(f"count must be a whole number >= 1, got {count!r}")
    if duration_s is not None and not (duration_s > 0 and duration_s < float("inf")):
        raise ValueError(f"duration_s must be a positive number of seconds, got {duration_s!r}")
    if append:
        return count, duration_s, 0
    if prefill_bytes is None:
        if count is not None:
            prefill_bytes = min(count * block_bytes, MAX_DEFAULT_PREFILL_BYTES)
        else:
            prefill_bytes = DURATION_PREFILL_BYTES
    if isinstance(prefill_bytes, bool) or not isinstance(prefill_bytes, int) or prefill_bytes <= 0:
        raise ValueError(f"prefill_bytes must be a positive whole number, got {prefill_bytes!r}")
    blocks = -(-prefill_bytes // block_bytes)  # round up to whole blocks
    return count, duration_s, blocks * block_bytes


def _fill(fd: int, total_bytes: int, chunk_bytes: int) -> None:
    """Write ``total_bytes`` of random bytes (real data, not a sparse or reserved file)."""
    chunk = os.urandom(chunk_bytes)
    done = 0
    while done < total_bytes:
        want = min(chunk_bytes, total_bytes - done)
        done += _write_all(fd, chunk[:want], done)
    os.fsync(fd)


def _write_all(fd: int, data: bytes, offset: int | None) -> int:
    """Write all of ``data`` at ``offset`` (or at the file position when None)."""
    view = memoryview(data)
    written = 0
    while written < len(view):
        if offset is None:
            n = os.write(fd, view[written:])
        else:
            n = os.pwrite(fd, view[written:], offset + written)
        if n <= 0:
            raise OSError(f"write returned {n} after {written} of {len(view)} bytes")
        written += n
    return written


def measure_flush_latency(
    directory: str | os.PathLike[str],
    *,
    block_bytes: int = 8192,
    count: int | None = None,
    duration_s: float | None = None,
    flush_call: str = "fdatasync",
    append: bool = False,
    prefill_bytes: int | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> MeasureResult:
    """Time ``count`` block writes, each made durable, on the device behind ``directory``.

    Each sample is the time in µs of one write of ``block_bytes`` plus its flush
    (``fdatasync``/``fsync``), or of one write on a file opened with O_DSYNC (``o-dsync``).
    Without ``count`` and ``duration_s``, DEFAULT_COUNT writes are timed; with
    ``duration_s`` writes go on until that many seconds have passed. ``prefill_bytes``
    (default: count × block_bytes, at most 64 MiB; 16 MiB in duration mode; rounded up to
    whole blocks) is written and flushed before timing; ignored with ``append=True``.
    ``progress(done, total)`` is called after each timed write: writes done and count, or,
    in duration mode, milliseconds elapsed and the duration in milliseconds. The scratch
    file is removed on every exit, including KeyboardInterrupt (which is re-raised).

    Raises ValueError when ``directory`` is not an existing writable directory or a
    setting is invalid; OSError from the device is passed on.
    """
    path = check_measure_directory(directory)
    count, duration_s, prefill = _settings(
        block_bytes, count, duration_s, flush_call, append, prefill_bytes
    )
    flags = os.O_RDWR
    if flush_call == "o-dsync":
        flags |= os.O_DSYNC
    flush = {"fdatasync": getattr(os, "fdatasync", None), "fsync": os.fsync, "o-dsync": None}[
        flush_call
    ]

    fd_make, scratch = tempfile.mkstemp(prefix=SCRATCH_PREFIX, suffix=".tmp", dir=path)
    fd = -1
    samples_ns: list[int] = []
    try:
        os.close(fd_make)
        if prefill:
            fill_fd = os.open(scratch, os.O_RDWR)
            try:
                _fill(fill_fd, prefill, max(block_bytes, 1024 * 1024))
            finally:
                os.close(fill_fd)
        fd = os.open(scratch, flags)
        block = bytearray(os.urandom(block_bytes))
        n_blocks = prefill // block_bytes if prefill else 0
        deadline_ns = None if duration_s is None else int(duration_s * 1e9)
        perf = time.perf_counter_ns
        start_ns = perf()
        i = 0
        while True:
            # Vary the first bytes so that no two writes carry the same data.
            block[:8] = i.to_bytes(8, "little")
            offset = None if append else (i % n_blocks) * block_bytes
            t0 = perf()
            _write_all(fd, block, offset)
            if flush is not None:
                flush(fd)
            t1 = perf()
            samples_ns.append(t1 - t0)
            i += 1
            if deadline_ns is None:
                if progress is not None:
                    progress(i, count)
                if i >= count:
                    break
            else:
                elapsed_ns = t1 - start_ns
                if progress is not None:
                    progress(min(elapsed_ns, deadline_ns) // 1_000_000, deadline_ns // 1_000_000)
                if elapsed_ns >= deadline_ns:
                    break
        elapsed_s = (perf() - start_ns) / 1e9
    finally:
        if fd >= 0:
            os.close(fd)
        try:
            os.unlink(scratch)
        except FileNotFoundError:
            pass

    samples_us = tuple(ns / 1000.0 for ns in samples_ns)
    median_us = float(statistics.median(samples_us))
    return MeasureResult(
        directory=path,
        block_bytes=block_bytes,
        flush_call=flush_call,
        append=append,
        prefill_bytes=prefill,
        samples_us=samples_us,
        elapsed_s=elapsed_s,
        median_us=median_us,
        plausibility_warning=plausibility_warning(median_us, flush_call),
    )


def write_samples_csv(path: str | os.PathLike[str], samples_us: Sequence[float]) -> None:
    """Write samples (µs) as CSV: a ``# unit: us`` line, then one value per line.

    Atomic: the text goes to a temporary file in the same directory, is flushed, and then
    replaces ``path`` (os.replace), so a reader never sees half a file. Values are written
    in Python's shortest round-trip form, so reading them back gives the same floats.
    """
    target = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(target))
    fd, tmp = tempfile.mkstemp(prefix=".samples-", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write("# unit: us\n")
            for value in samples_us:
                fh.write(f"{float(value)!r}\n")
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, target)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
