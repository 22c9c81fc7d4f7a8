"""Unit tests of commitadvisor.render.fit (rich and plain views of a FitReport)."""

from __future__ import annotations

import io
import math

import numpy as np
import pytest
from rich.console import Console

from commitadvisor.fitting import fit_cumulative_histogram, fit_samples, profile_entry_toml
from commitadvisor.render.fit import fit_report_plain, render_fit_report


@pytest.fixture(scope="module")
def report():
    rng = np.random.default_rng(5)
    x = rng.lognormal(math.log(0.5), 0.4, 3000)
    slow = rng.random(3000) < 0.01
    x[slow] = rng.lognormal(math.log(800.0), 0.3, int(slow.sum()))
    return fit_samples(x)


def _rows_mentioning(text: str, word: str) -> list[str]:
    """Table rows that start with ``word`` (a family) or end with it (the choice column)."""
    return [
        line
        for line in text.splitlines()
        if line.split() and word in (line.split()[0], line.split()[-1])
    ]


def test_plain_marks_the_chosen_family_by_word(report):
    text = fit_report_plain(report)
    chosen_rows = _rows_mentioning(text, "chosen")
    assert len(chosen_rows) == 2  # once in each table
    assert all(row.split()[0] == report.best_family for row in chosen_rows)
    assert "\x1b[" not in text  # no colour codes


def test_plain_shows_every_family_and_the_data(report):
    text = fit_report_plain(report)
    for fit in report.fits:
        assert len(_rows_mentioning(text, fit.family)) >= 2
        assert f"{fit.p99_ms:.4g}" in text
        assert f"{fit.aic:.1f}" in text
    assert f"{report.data_p99_ms:.4g}" in text
    assert f"{report.fit('mixture').outlier_share:.4g}" in text


def test_plain_ends_with_the_ready_to_paste_entry(report):
    lines = fit_report_plain(report).rstrip("\n").splitlines()
    assert lines[-1] == profile_entry_toml(report.best)
    assert "ready to paste" in lines[-2]


def test_rich_view_keeps_numbers_whole_at_80_columns(report):
    console = Console(file=io.StringIO(), width=80, record=True, color_system=None)
    render_fit_report(report, console)
    text = console.export_text()
    assert "…" not in text  # no cut numbers or names
    assert len(_rows_mentioning(text, "chosen")) == 2
    assert profile_entry_toml(report.best) in text  # printed on one line, not wrapped
    for fit in report.fits:
        assert f"{fit.p50_ms:.4g}" in text


def test_rich_view_in_colour_still_says_chosen(report):
    buffer = io.StringIO()
    console = Console(file=buffer, width=100, force_terminal=True, color_system="standard")
    render_fit_report(report, console)
    out = buffer.getvalue()
    assert "\x1b[" in out
    assert "chosen" in out


def test_histogram_report_shows_unknown_figures_as_na():
    hist = fit_cumulative_histogram([1.0, 2.0, 4.0, math.inf], [10, 30, 39, 40])
    text = fit_report_plain(hist)
    data_row = _rows_mentioning(text, "data")[0]
    assert data_row.split()[-1] == "n/a"  # the mean falls in the open last bucket
    assert "Not fitted: mixture" in text
    assert "cumulative histogram of 40 observations" in text
