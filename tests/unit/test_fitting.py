"""Unit tests of commitadvisor.fitting (profile entries, input checks, histogram figures)
and of the CSV readers in commitadvisor.measure_io."""

from __future__ import annotations

import dataclasses
import math
import tomllib
from decimal import Decimal

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from commitadvisor.fitting import (
    MIN_SAMPLES,
    FamilyFit,
    MixturePart,
    fit_cumulative_histogram,
    fit_samples,
    profile_entry_toml,
)
from commitadvisor.measure_io import read_histogram_csv, read_samples_csv

Z99 = float(stats.norm.ppf(0.99))


def _parse(entry: str, parse_float=float) -> dict:
    """Parse a one-line inline table the way a case file would hold it."""
    return tomllib.loads(f"latency = {entry}\n", parse_float=parse_float)["latency"]


def _fit(family: str, parameters, parts=(), outlier_share=None) -> FamilyFit:
    """A FamilyFit with given parameters; the figures irrelevant to the entry are zero."""
    return FamilyFit(
        family=family,
        parameters=tuple(parameters),
        n_parameters=5 if family == "mixture" else 2,
        log_likelihood=0.0,
        aic=0.0,
        ks_statistic=0.0,
        p50_ms=0.0,
        p99_ms=0.0,
        p999_ms=0.0,
        mean_ms=0.0,
        outlier_share=outlier_share,
        parts=tuple(parts),
    )


@pytest.fixture(scope="module")
def small_report():
    rng = np.random.default_rng(7)
    return fit_samples(rng.lognormal(math.log(0.6), 0.5, 400))


# --------------------------------------------------------------------------- TOML entries


def test_lognormal_entry_keys_and_values():
    entry = profile_entry_toml(_fit("lognormal", [("median_ms", 0.61234), ("sigma", 0.7)]))
    table = _parse(entry)
    assert set(table) == {"kind", "p50_ms", "p99_ms"}
    assert table["kind"] == "lognormal"
    assert table["p50_ms"] == 0.6123  # 4 significant figures
    # p99 = median * exp(sigma * z_0.99), z_0.99 from scipy.stats.norm.ppf(0.99)
    assert table["p99_ms"] == pytest.approx(0.61234 * math.exp(0.7 * Z99), rel=5e-4)
    assert "\n" not in entry


@pytest.mark.parametrize("family", ["gamma", "weibull"])
def test_shape_scale_entries(family):
    entry = profile_entry_toml(_fit(family, [("shape", 2.123456), ("scale_ms", 0.0004567891)]))
    table = _parse(entry)
    assert table == {"kind": family, "shape": 2.123, "scale_ms": 0.0004568}
    assert isinstance(table["shape"], float) and isinstance(table["scale_ms"], float)


def test_numbers_stay_floats_and_four_significant_figures():
    entry = profile_entry_toml(_fit("gamma", [("shape", 3.0), ("scale_ms", 123456.789)]))
    table = _parse(entry, parse_float=Decimal)
    assert table["shape"] == Decimal("3.0")
    assert table["scale_ms"] == Decimal("123500")
    assert "shape = 3.0" in entry  # a float literal, not the integer 3


def test_mixture_entry_structure_and_shares_sum_to_one_exactly():
    body = MixturePart(share=0.99512, median_ms=0.5, sigma=0.35)
    slow = MixturePart(share=0.00488, median_ms=900.0, sigma=0.2)
    entry = profile_entry_toml(
        _fit("mixture", [("outlier_share", 0.00488)], parts=(body, slow), outlier_share=0.00488)
    )
    table = _parse(entry, parse_float=Decimal)
    assert table["kind"] == "mixture"
    assert [set(p) for p in table["parts"]] == [{"share", "profile"}] * 2
    shares = [p["share"] for p in table["parts"]]
    assert sum(shares) == Decimal(1)
    assert shares[1] == Decimal("0.00488")
    for part, fitted in zip(table["parts"], (body, slow), strict=True):
        prof = part["profile"]
        assert set(prof) == {"kind", "p50_ms", "p99_ms"}
        assert prof["kind"] == "lognormal"
        assert float(prof["p50_ms"]) == pytest.approx(fitted.median_ms, rel=5e-4)
        assert float(prof["p99_ms"]) == pytest.approx(fitted.p99_ms, rel=5e-4)


@settings(derandomize=True, max_examples=200, deadline=None)
@given(st.floats(min_value=1e-7, max_value=0.9999, allow_nan=False))
def test_mixture_shares_always_sum_to_one(share):
    parts = (
        MixturePart(share=1 - share, median_ms=0.4, sigma=0.3),
        MixturePart(share=share, median_ms=700.0, sigma=0.25),
    )
    entry = profile_entry_toml(_fit("mixture", [], parts=parts, outlier_share=share))
    shares = [p["share"] for p in _parse(entry, parse_float=Decimal)["parts"]]
    assert sum(shares) == Decimal(1)
    assert float(shares[1]) == pytest.approx(share, rel=5e-4)
    assert all(s > 0 for s in shares)


def test_entry_of_a_real_fit_parses(small_report):
    for fit in small_report.fits:
        table = _parse(profile_entry_toml(fit))
        assert table["kind"] == fit.family


def test_lognormal_entry_round_trips_sigma(small_report):
    fit = small_report.fit("lognormal")
    table = _parse(profile_entry_toml(fit))
    sigma_back = math.log(table["p99_ms"] / table["p50_ms"]) / Z99
    # Two 4-figure roundings move ln(p99/p50) by at most about 1e-3 together.
    assert sigma_back == pytest.approx(fit.parameter("sigma"), abs=1e-3 / Z99 + 1e-12)


def test_unknown_family_has_no_entry():
    with pytest.raises(ValueError, match="no profile entry"):
        profile_entry_toml(_fit("pareto", [("alpha", 1.0)]))


# --------------------------------------------------------------------------- reports


def test_report_is_frozen_and_holds_tuples(small_report):
    assert isinstance(small_report.fits, tuple)
    assert all(isinstance(f.parameters, tuple) for f in small_report.fits)
    with pytest.raises(dataclasses.FrozenInstanceError):
        small_report.best_family = "gamma"  # type: ignore[misc]
    assert [f.family for f in small_report.fits] == ["lognormal", "gamma", "weibull", "mixture"]
    assert [f.n_parameters for f in small_report.fits] == [2, 2, 2, 5]
    assert small_report.best is small_report.fit(small_report.best_family)
    assert "AIC" in small_report.selection_note


def test_few_samples_note_about_p999(small_report):
    assert any("p99.9" in note for note in small_report.notes)


def test_mixture_parts_are_ordered_body_first(small_report):
    mix = small_report.fit("mixture")
    body, slow = mix.parts
    assert body.median_ms <= slow.median_ms
    assert mix.outlier_share == slow.share


# --------------------------------------------------------------------------- bad samples


@pytest.mark.parametrize(
    ("values", "message"),
    [
        (np.linspace(1, 2, MIN_SAMPLES - 1), "at least 20 samples"),
        (np.r_[np.linspace(1, 2, 30), np.nan], "finite"),
        (np.r_[np.linspace(1, 2, 30), np.inf], "finite"),
        (np.r_[np.linspace(1, 2, 30), 0.0], "positive"),
        (np.r_[np.linspace(1, 2, 30), -1.0], "positive"),
        (np.full(30, 1.5), "all 30 samples are equal"),
        (np.ones((5, 6)), "one-dimensional"),
    ],
)
def test_bad_samples_raise_clear_errors(values, message):
    with pytest.raises(ValueError, match=message):
        fit_samples(values)


# --------------------------------------------------------------------------- histograms


def test_histogram_percentiles_interpolate_within_buckets():
    # 10 in (0, 1], 20 in (1, 2], 10 in (2, 4]; worked by hand:
    # p50 -> rank 20, bucket (1, 2] holds ranks 10..30: 1 + (20 - 10) / 20 * 1 = 1.5 ms.
    # p99 -> rank 39.6, bucket (2, 4] holds 30..40: 2 + 9.6 / 10 * 2 = 3.92 ms.
    # p99.9 -> rank 39.96: 2 + 9.96 / 10 * 2 = 3.992 ms.
    # mean from midpoints: (10 * 0.5 + 20 * 1.5 + 10 * 3) / 40 = 1.625 ms.
    report = fit_cumulative_histogram([1.0, 2.0, 4.0, np.inf], [10, 30, 40, 40])
    assert report.data_p50_ms == pytest.approx(1.5)
    assert report.data_p99_ms == pytest.approx(3.92)
    assert report.data_p999_ms == pytest.approx(3.992)
    assert report.data_mean_ms == pytest.approx(1.625)
    assert "interpolated linearly within the bucket" in report.data_quantile_method
    assert report.n_observations == 40
    # Only 3 non-empty buckets: too few for the 5-parameter mixture.
    assert [f.family for f in report.fits] == ["lognormal", "gamma", "weibull"]
    assert report.omitted and report.omitted[0][0] == "mixture"


def test_histogram_open_last_bucket_gives_unknown_figures():
    report = fit_cumulative_histogram([1.0, 2.0, 4.0, np.inf], [10, 30, 39, 40])
    assert report.data_p999_ms is None  # rank 39.96 lies above 4 ms
    assert report.data_mean_ms is None
    assert any("open last bucket" in note for note in report.notes)
    assert any("2.50% of the observations" in n and "extrapolated" in n for n in report.notes)


def test_histogram_zero_bound_with_no_counts_is_dropped():
    report = fit_cumulative_histogram([0.0, 1.0, 2.0, 4.0], [0, 10, 30, 40])
    assert report.n_observations == 40
    assert any("upper bound 0" in note for note in report.notes)


@pytest.mark.parametrize(
    ("bounds", "counts", "message"),
    [
        ([1.0, 2.0, 4.0], [10, 30, 25], "must not decrease"),
        ([1.0, 1.0, 4.0], [10, 30, 40], "strictly ascending"),
        ([1.0, np.inf, 4.0], [10, 30, 40], "only the last"),
        ([1.0, 2.0, 4.0], [1, 5, 10], "at least 20 observations"),
        ([1.0, 2.0, 4.0], [0, 0, 40], "fewer than 3 buckets"),
        ([1.0, 2.0, 4.0], [10, 30.5, 40], "whole numbers"),
        ([1.0, 2.0, 4.0], [-1, 30, 40], "not negative"),
        ([-1.0, 2.0, 4.0], [5, 30, 40], "positive"),
        ([1.0, 2.0], [10, 30, 40], "equal length"),
        ([1.0, np.nan, 4.0], [10, 30, 40], "NaN"),
    ],
)
def test_bad_histograms_raise_clear_errors(bounds, counts, message):
    with pytest.raises(ValueError, match=message):
        fit_cumulative_histogram(bounds, counts)


# --------------------------------------------------------------------------- CSV readers


def test_samples_csv_comments_header_and_units(tmp_path):
    path = tmp_path / "flushes.csv"
    path.write_text("# measured on the test rig\nlatency_us\n\n250\n 500.5 \n# end\n1e3\n")
    assert read_samples_csv(path, "us") == pytest.approx([0.25, 0.5005, 1.0], rel=1e-15)
    assert read_samples_csv(path, "ms") == pytest.approx([250.0, 500.5, 1000.0])
    assert read_samples_csv(path, "s") == pytest.approx([250e3, 500.5e3, 1e6])


@pytest.mark.parametrize(
    ("text", "line", "what"),
    [
        ("value\n1.0\nabc\n", 3, "'abc' is not a number"),
        ("1.0\n2.0\nabc\n", 3, "'abc' is not a number"),
        ("# c\n\n1.0\n-2\n", 4, "not positive"),
        ("1.0\n0\n", 2, "not positive"),
        ("1.0\nnan\n", 2, "not a finite"),
        ("1.0\ninf\n", 2, "not a finite"),
        ("1.0\n1.0,2.0\n", 2, "more than one field"),
    ],
)
def test_samples_csv_errors_name_file_and_line(tmp_path, text, line, what):
    path = tmp_path / "flushes.csv"
    path.write_text(text)
    with pytest.raises(ValueError) as err:
        read_samples_csv(path, "ms")
    message = str(err.value)
    assert f"flushes.csv line {line}: " in message
    assert what in message


def test_samples_csv_seventeenth_line_example(tmp_path):
    path = tmp_path / "flushes.csv"
    path.write_text("".join(f"{i + 1}\n" for i in range(16)) + "abc\n")
    with pytest.raises(ValueError, match=r"flushes\.csv line 17: 'abc' is not a number"):
        read_samples_csv(path, "us")


def test_samples_csv_empty_missing_and_bad_unit(tmp_path):
    empty = tmp_path / "empty.csv"
    empty.write_text("# nothing\n\n")
    with pytest.raises(ValueError, match=r"empty\.csv: no latency values"):
        read_samples_csv(empty, "ms")
    with pytest.raises(ValueError, match=r"missing\.csv: cannot read"):
        read_samples_csv(tmp_path / "missing.csv", "ms")
    with pytest.raises(ValueError, match="unit must be one of us, ms, s"):
        read_samples_csv(empty, "ns")
    binary = tmp_path / "blob.csv"
    binary.write_bytes(b"\xff\xfe\x00\x81")
    with pytest.raises(ValueError, match=r"blob\.csv: not a text file"):
        read_samples_csv(binary, "ms")


def test_histogram_csv_reads_infinite_bound_and_units(tmp_path):
    path = tmp_path / "hist.csv"
    path.write_text("# exported\nle,count\n100,5\n250, 20\n1000,30\n+Inf,31\n")
    bounds, counts = read_histogram_csv(path, "us")
    assert bounds == pytest.approx([0.1, 0.25, 1.0, math.inf])
    assert math.isinf(bounds[-1])
    assert counts.tolist() == [5.0, 20.0, 30.0, 31.0]
    path.write_text("0.5,1\n1,2\ninf,3\n")
    bounds, _ = read_histogram_csv(path, "s")
    assert bounds == pytest.approx([500.0, 1000.0, math.inf])


@pytest.mark.parametrize(
    ("text", "line", "what"),
    [
        ("1,5\n2,x\n", 2, "count 'x' is not a number"),
        ("1,5\nabc,7\n", 2, "upper bound 'abc' is not a number"),
        ("1,5\n2,3\n", 2, "below the previous"),
        ("2,5\n1,7\n", 2, "does not exceed the previous"),
        ("1,5\ninf,7\n3,9\n", 3, "infinite upper bound on line 2"),
        ("1,5\n2,7.5\n", 2, "whole number"),
        ("1,5\n2\n", 2, "expected 'upper_bound,cumulative_count'"),
        ("1,5\n2,7,9\n", 2, "expected 'upper_bound,cumulative_count'"),
        ("0,0\n1,5\n", 1, "not positive"),
        ("1,5\nnan,7\n", 2, "not usable"),
    ],
)
def test_histogram_csv_errors_name_file_and_line(tmp_path, text, line, what):
    path = tmp_path / "buckets.csv"
    path.write_text(text)
    with pytest.raises(ValueError) as err:
        read_histogram_csv(path, "ms")
    message = str(err.value)
    assert f"buckets.csv line {line}: " in message
    assert what in message


def test_histogram_csv_round_trip_into_fit(tmp_path):
    rng = np.random.default_rng(11)
    x_ms = rng.lognormal(math.log(2.0), 0.4, 2000)
    bounds_ms = np.array([0.5, 1, 1.5, 2, 3, 4, 6, 8, 12, math.inf])
    cum = np.searchsorted(np.sort(x_ms), bounds_ms, side="right")
    path = tmp_path / "hist.csv"
    path.write_text(
        "upper_bound_us,count\n"
        + "".join(
            f"{'+Inf' if math.isinf(b) else format(b * 1000, 'g')},{c}\n"
            for b, c in zip(bounds_ms, cum, strict=True)
        )
    )
    bounds, counts = read_histogram_csv(path, "us")
    report = fit_cumulative_histogram(bounds, counts)
    assert report.n_observations == 2000
    # The grouped fit finds the true median 2 ms within 5 full-sample standard errors,
    # SE(ln median) = sigma / sqrt(n) = 0.4 / sqrt(2000) = 0.0089; buckets at most 0.4 of
    # ln-width near the median (about one sigma) add only a little to that variance.
    assert abs(math.log(report.fit("lognormal").parameter("median_ms") / 2.0)) < 5 * 0.0089


def test_entries_validate_as_case_file_profiles(small_report):
    # The entry must be accepted by the case file's own profile models.
    from pydantic import TypeAdapter

    from commitadvisor import case

    adapter = TypeAdapter(case.Profile)
    expected = {
        "lognormal": case.LognormalProfile,
        "gamma": case.GammaProfile,
        "weibull": case.WeibullProfile,
        "mixture": case.MixtureProfile,
    }
    for fit in small_report.fits:
        profile = adapter.validate_python(_parse(profile_entry_toml(fit)))
        assert isinstance(profile, expected[fit.family])


def test_declared_unit_comment(tmp_path):
    from commitadvisor.measure_io import declared_unit

    path = tmp_path / "flushes.csv"
    path.write_text("# from the rig\n# unit: us\n12.5\n")
    assert declared_unit(path) == "us"
    path.write_text("12.5\n# unit: s\n")
    assert declared_unit(path) is None  # only before the first value
    path.write_text("# unit: minutes\n1\n")
    with pytest.raises(ValueError, match=r"flushes\.csv line 1: declared unit 'minutes'"):
        declared_unit(path)


@pytest.mark.parametrize("seed", [3, 40, 44])
def test_mixture_sigmas_respect_the_ratio_bound(seed):
    # Seeds where, without the bound, a narrow spurious part won on AIC.
    from commitadvisor.fitting import SIGMA_RATIO_MIN

    x = np.random.default_rng(seed).lognormal(0.0, 0.5, 500)
    report = fit_samples(x)
    body, slow = report.fit("mixture").parts
    ratio = min(body.sigma, slow.sigma) / max(body.sigma, slow.sigma)
    assert ratio >= SIGMA_RATIO_MIN * (1 - 1e-12)
    bounds = np.r_[0.05 * 2 ** (np.arange(20) / 2), np.inf]
    hist = fit_cumulative_histogram(bounds, np.searchsorted(np.sort(x), bounds, side="right"))
    body, slow = hist.fit("mixture").parts
    assert min(body.sigma, slow.sigma) / max(body.sigma, slow.sigma) >= SIGMA_RATIO_MIN * (1 - 1e-9)


def test_close_aic_gives_a_note():
    from commitadvisor.fitting import _selection_notes

    a = dataclasses.replace(_fit("lognormal", []), aic=100.0)
    b = dataclasses.replace(_fit("gamma", []), aic=101.5)
    c = dataclasses.replace(_fit("weibull", []), aic=130.0)
    notes = _selection_notes([c, b, a])
    assert len(notes) == 1 and notes[0].startswith("gamma is within 1.5 of lognormal")
    assert _selection_notes([a, c]) == []
