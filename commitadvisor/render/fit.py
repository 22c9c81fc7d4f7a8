"""Show a FitReport: a comparison table of the fitted families and the profile entry to paste.

``render_fit_report`` prints with rich to a given console; ``fit_report_plain`` returns the
same content as plain text (for color off, pipes and logs). The chosen family is marked with
the word "chosen" in its own column, never by style alone.
"""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.table import Table
from rich.text import Text

from commitadvisor.fitting import FamilyFit, FitReport, profile_entry_toml

__all__ = ["fit_report_plain", "fit_report_tables", "render_fit_report"]

# Two tables so that each fits an 80-column terminal without cutting a number:
# the fits and how well they fit, then the percentiles of the data and of each fit.
_FIT_HEADERS = ("family", "parameters", "KS", "AIC", "ΔAIC", "choice")
_FIT_NUMERIC = frozenset({2, 3, 4})
_PCT_HEADERS = ("", "p50 ms", "p99 ms", "p99.9 ms", "mean ms", "outlier share", "choice")
_PCT_NUMERIC = frozenset({1, 2, 3, 4, 5})


def _num(value: float | None) -> str:
    return "n/a" if value is None else f"{value:.4g}"


def _parameters(fit: FamilyFit) -> str:
    """One parameter per line: ``name value``, with k, the number of fitted parameters."""
    lines = [f"{name} {value:.4g}" for name, value in fit.parameters]
    lines.append(f"k = {fit.n_parameters}")
    return "\n".join(lines)


def _title(report: FitReport) -> str:
    if report.source == "samples":
        return f"Latency fits to {report.n_observations} samples"
    return f"Latency fits to a {report.source} of {report.n_observations} observations"


def _fit_rows(report: FitReport) -> list[tuple[str, ...]]:
    best_aic = report.best.aic
    return [
        (
            fit.family,
            _parameters(fit),
            f"{fit.ks_statistic:.4f}",
            f"{fit.aic:.1f}",
            f"{fit.aic - best_aic:.1f}",
            _choice(report, fit),
        )
        for fit in report.fits
    ]


def _pct_rows(report: FitReport) -> list[tuple[str, ...]]:
    rows = [
        (
            "data",
            _num(report.data_p50_ms),
            _num(report.data_p99_ms),
            _num(report.data_p999_ms),
            _num(report.data_mean_ms),
            "",
            "",
        )
    ]
    for fit in report.fits:
        rows.append(
            (
                fit.family,
                _num(fit.p50_ms),
                _num(fit.p99_ms),
                _num(fit.p999_ms),
                _num(fit.mean_ms),
                "" if fit.outlier_share is None else f"{fit.outlier_share:.4g}",
                _choice(report, fit),
            )
        )
    return rows


def _choice(report: FitReport, fit: FamilyFit) -> str:
    return "chosen" if fit.family == report.best_family else ""


def _footer_lines(report: FitReport) -> list[str]:
    lines = [f"Chosen: {report.best_family}. Rule: {report.selection_note}."]
    lines.append(f"Data: {report.data_quantile_method}.")
    lines.append(f"KS: {report.ks_method}.")
    for family, why in report.omitted:
        lines.append(f"Not fitted: {family}: {why}.")
    lines.extend(f"Note: {note}." for note in report.notes)
    return lines


def _entry_heading(report: FitReport) -> str:
    return f"Profile entry for the chosen family ({report.best_family}), ready to paste:"


def _rich_table(
    title: str, headers: tuple[str, ...], numeric: frozenset[int], rows: list[tuple[str, ...]]
) -> Table:
    table = Table(title=title, title_justify="left", box=box.SIMPLE_HEAD, padding=(0, 1))
    for i, header in enumerate(headers):
        # Only the parameters may wrap: a cut number would mislead.
        table.add_column(
            header, justify="right" if i in numeric else "left", no_wrap=header != "parameters"
        )
    for row in rows:
        style = "bold" if row[-1] == "chosen" else ("dim" if row[0] == "data" else None)
        table.add_row(*(Text(cell) for cell in row), style=style)
    return table


def fit_report_tables(report: FitReport) -> tuple[Table, Table]:
    """The two tables as rich Tables: the fits, then the percentiles of data and fits.

    The chosen family's rows are bold and say "chosen".
    """
    return (
        _rich_table(_title(report), _FIT_HEADERS, _FIT_NUMERIC, _fit_rows(report)),
        _rich_table(
            "Percentiles and mean, data and fits", _PCT_HEADERS, _PCT_NUMERIC, _pct_rows(report)
        ),
    )


def render_fit_report(report: FitReport, console: Console) -> None:
    """Print the tables, the notes and the ready-to-paste profile entry to ``console``."""
    for table in fit_report_tables(report):
        console.print(table)
    for line in _footer_lines(report):
        console.print(Text(line))
    console.print()
    console.print(Text(_entry_heading(report)))
    console.print(Text(profile_entry_toml(report.best)), soft_wrap=True)


def _plain_table(
    headers: tuple[str, ...], numeric: frozenset[int], rows: list[tuple[str, ...]]
) -> list[str]:
    cells = [[cell.split("\n") for cell in row] for row in [headers, *rows]]
    widths = [max(len(line) for row in cells for line in row[i]) for i in range(len(headers))]
    out = []
    for r, row in enumerate(cells):
        for k in range(max(len(cell) for cell in row)):
            parts = []
            for i, cell in enumerate(row):
                text = cell[k] if k < len(cell) else ""
                parts.append(text.rjust(widths[i]) if i in numeric else text.ljust(widths[i]))
            out.append("  ".join(parts).rstrip())
        if r == 0:
            out.append("  ".join("-" * w for w in widths))
    return out


def fit_report_plain(report: FitReport) -> str:
    """The same content as plain text: two aligned tables, the notes, the profile entry."""
    out = [_title(report), ""]
    out.extend(_plain_table(_FIT_HEADERS, _FIT_NUMERIC, _fit_rows(report)))
    out.extend(["", "Percentiles and mean, data and fits", ""])
    out.extend(_plain_table(_PCT_HEADERS, _PCT_NUMERIC, _pct_rows(report)))
    out.append("")
    out.extend(_footer_lines(report))
    out.append("")
    out.append(_entry_heading(report))
    out.append(profile_entry_toml(report.best))
    return "\n".join(out) + "\n"
