"""Read latency measurements from CSV files: samples, or a cumulative histogram.

Samples file: one latency per line. Histogram file: lines ``upper_bound,cumulative_count``,
the upper bound in the stated unit (the last may be ``inf`` or ``+Inf``). In both, blank
lines and lines starting with ``#`` are ignored, and a single non-numeric header line is
allowed before the first value. Every error is a ValueError that names the file, the line
number and what is wrong.
"""

from __future__ import annotations

import math
import os
from collections.abc import Iterator

import numpy as np

__all__ = ["UNITS", "declared_unit", "read_histogram_csv", "read_samples_csv", "to_ms"]

UNITS = ("us", "ms", "s")
"""Units a file may state its values in."""


def _check_unit(unit: str) -> None:
    if unit not in UNITS:
        raise ValueError(f"unit must be one of {', '.join(UNITS)} (got {unit!r})")


def to_ms(values: np.ndarray, unit: str) -> np.ndarray:
    """values in ``unit`` converted to milliseconds (us: divided by 1000, s: times 1000)."""
    _check_unit(unit)
    v = np.asarray(values, dtype=float)
    if unit == "us":
        return v / 1000.0
    if unit == "s":
        return v * 1000.0
    return v


def _lines(path: str | os.PathLike[str]) -> Iterator[tuple[int, str]]:
    """(line number, stripped text) of the lines that carry data or a header."""
    name = os.fspath(path)
    try:
        with open(path, encoding="utf-8", newline="") as fh:
            text = fh.read()
    except UnicodeDecodeError:
        raise ValueError(f"{name}: not a text file (it is not valid UTF-8)") from None
    except OSError as exc:
        raise ValueError(f"{name}: cannot read it: {exc.strerror or exc}") from None
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip().lstrip("\ufeff")
        if not line or line.startswith("#"):
            continue
        yield number, line


def declared_unit(path: str | os.PathLike[str]) -> str | None:
    """The unit a file declares in a ``# unit: us`` comment line before its first value.

    None when there is no such line; ValueError (naming file and line) when the declared
    unit is not one of UNITS.
    """
    name = os.fspath(path)
    try:
        with open(path, encoding="utf-8") as fh:
            for number, raw in enumerate(fh, start=1):
                line = raw.strip().lstrip("\ufeff")
                if not line:
                    continue
                if not line.startswith("#"):
                    return None
                key, sep, value = line[1:].partition(":")
                if sep and key.strip().lower() == "unit":
                    unit = value.strip()
                    if unit not in UNITS:
                        raise ValueError(
                            f"{name} line {number}: declared unit {unit!r} is not one of "
                            f"{', '.join(UNITS)}"
                        )
                    return unit
    except UnicodeDecodeError:
        raise ValueError(f"{name}: not a text file (it is not valid UTF-8)") from None
    except OSError as exc:
        raise ValueError(f"{name}: cannot read it: {exc.strerror or exc}") from None
    return None


def _number(text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        return None


def read_samples_csv(path: str | os.PathLike[str], unit: str) -> np.ndarray:
    """Latency samples from a one-value-per-line CSV file, converted to milliseconds.

    ``unit`` is "us", "ms" or "s". Values must be finite and positive.
    """
    _check_unit(unit)
    name = os.fspath(path)
    values: list[float] = []
    header_allowed = True
    for number, line in _lines(path):
        if "," in line or ";" in line or "\t" in line:
            raise ValueError(
                f"{name} line {number}: {line!r} holds more than one field; a samples file "
                "has one latency per line (is it a histogram? then say so)"
            )
        value = _number(line)
        if value is None:
            if header_allowed:
                header_allowed = False
                continue
            raise ValueError(f"{name} line {number}: {line!r} is not a number")
        header_allowed = False
        if not math.isfinite(value):
            raise ValueError(f"{name} line {number}: {line!r} is not a finite latency")
        if value <= 0:
            raise ValueError(f"{name} line {number}: {line!r} is not positive (a latency is > 0)")
        values.append(value)
    if not values:
        raise ValueError(f"{name}: no latency values found")
    return to_ms(np.asarray(values, dtype=float), unit)


def read_histogram_csv(path: str | os.PathLike[str], unit: str) -> tuple[np.ndarray, np.ndarray]:
    """(upper bounds in ms, cumulative counts) from an ``upper_bound,cumulative_count`` CSV.

    ``unit`` ("us", "ms", "s") is the unit of the upper bounds. Bounds must ascend
    strictly and be positive; only the last may be infinite (``inf``, ``+Inf``). Counts
    must be whole, not negative, and must not decrease.
    """
    _check_unit(unit)
    name = os.fspath(path)
    bounds: list[float] = []
    counts: list[float] = []
    header_allowed = True
    inf_line: int | None = None
    for number, line in _lines(path):
        fields = [f.strip() for f in line.split(",")]
        if len(fields) != 2:
            if header_allowed and len(fields) > 0 and all(_number(f) is None for f in fields):
                header_allowed = False
                continue
            raise ValueError(
                f"{name} line {number}: expected 'upper_bound,cumulative_count', got {line!r}"
            )
        bound, count = _number(fields[0]), _number(fields[1])
        if bound is None and count is None and header_allowed:
            header_allowed = False
            continue
        header_allowed = False
        if bound is None:
            raise ValueError(f"{name} line {number}: upper bound {fields[0]!r} is not a number")
        if count is None:
            raise ValueError(f"{name} line {number}: count {fields[1]!r} is not a number")
        if math.isnan(bound) or bound == -math.inf:
            raise ValueError(f"{name} line {number}: upper bound {fields[0]!r} is not usable")
        if inf_line is not None:
            raise ValueError(
                f"{name} line {number}: a bucket follows the infinite upper bound on line "
                f"{inf_line}; the infinite bound must be the last"
            )
        if bound == math.inf:
            inf_line = number
        elif bound <= 0:
            raise ValueError(f"{name} line {number}: upper bound {fields[0]!r} is not positive")
        if not math.isfinite(count) or count < 0 or count != math.floor(count):
            raise ValueError(
                f"{name} line {number}: count {fields[1]!r} is not a whole number >= 0"
            )
        if bounds and bound <= bounds[-1]:
            raise ValueError(
                f"{name} line {number}: upper bound {fields[0]!r} does not exceed the "
                "previous one (bounds must ascend)"
            )
        if counts and count < counts[-1]:
            raise ValueError(
                f"{name} line {number}: cumulative count {fields[1]!r} is below the previous "
                f"one ({counts[-1]:g}); counts must be cumulative (non-decreasing)"
            )
        bounds.append(bound)
        counts.append(count)
    if not bounds:
        raise ValueError(f"{name}: no histogram buckets found")
    return to_ms(np.asarray(bounds, dtype=float), unit), np.asarray(counts, dtype=float)
