"""Rendering of ``review-benchmark``: a terminal report (rich), JSON and Markdown.

All three show the same rows, built once here from the frozen
:class:`commitadvisor.review.BenchmarkReview`; no figure is computed in this module.
"""

from __future__ import annotations

import json
from dataclasses import asdict

from rich.console import Console
from rich.table import Table

from commitadvisor.policy import format_value
from commitadvisor.results import to_plain
from commitadvisor.review import BenchmarkReview

__all__ = ["render_review_text", "review_json", "review_markdown", "JSON_FORMAT"]

JSON_FORMAT = "commitadvisor-benchmark-review"
JSON_FORMAT_VERSION = 1


def _v(x: float | None, unit: str = "") -> str:
    return "-" if x is None else format_value(x, unit)


def _reported(r: BenchmarkReview) -> str:
    text = (f"{_v(r.reported_commits_per_s)} commits/s at {_v(r.reported_mean_ms, 'ms')} mean"
            + (f", p99 {_v(r.reported_p99_ms, 'ms')}" if r.reported_p99_ms else "")
            + f", {r.sessions} sessions")
    if r.duration_s:
        text += f", {_v(r.duration_s, 's')} run"
    return text


def _mode(r: BenchmarkReview) -> str:
    mode = r.commit_mode + " commit"
    if r.commit_mode == "deferred":
        mode += f", flushed every {_v(r.flush_every_ms, 'ms')}"
        if r.buffer_bytes:
            mode += f", log buffer {r.buffer_bytes:,} bytes"
    return mode + f", on {r.device}"


_DURABLE_HEAD = ("strategy", "regime", "commits/s", "mean ms", "p50 ms", "p99 ms", "p99.9 ms",
                 "N/X - Z ms", "batch", "CPU busy")


def _durable_rows(r: BenchmarkReview) -> list[tuple[str, ...]]:
    rows = []
    for f in r.durable:
        if f.saturated:
            rows.append((f.strategy, f.regime, f"<= {_v(f.throughput_per_s)}", "SATURATED",
                         "-", "-", "-", f">= {_v(f.law_mean_ms)}", "-", "-"))
            continue
        rows.append((f.strategy, f.regime, _v(f.throughput_per_s), _v(f.ack_mean_ms),
                     _v(f.ack_p50_ms), _v(f.ack_p99_ms), _v(f.ack_p999_ms), _v(f.law_mean_ms),
                     _v(f.mean_batch_commits),
                     "-" if f.cpu_utilisation is None else f"{f.cpu_utilisation:.0%}"))
    return rows


def _durable_notes(r: BenchmarkReview) -> list[str]:
    out, seen = [], set()
    for f in r.durable:
        if f.strategy == "batched" and f.regime == r.durable[0].regime:
            out.append(f"batched settings: {f.settings} ({f.settings_source})")
        if f.saturation_message:
            out.append(f"{f.strategy}, {f.regime}: {f.saturation_message}")
        for n in f.notes:
            if (f.strategy, n) not in seen:
                seen.add((f.strategy, n))
                out.append(f"{f.strategy}, {f.regime}: {n}")
    return out


_RISK_HEAD = ("figure", "value", "how")


def _risk_rows(r: BenchmarkReview) -> list[tuple[str, str, str]]:
    a = r.at_risk
    cur = a.currency or ""
    if not a.applies:
        return [("acknowledged commits at risk", "0" if a.host_bounded else "not bounded",
                 f"{a.commit_mode} commit: {a.at_most_basis}")]
    rows = [
        ("flush time, mean (p99.9)", f"{_v(a.flush_mean_ms, 'ms')} ({_v(a.flush_p999_ms, 'ms')})",
         "a flush carrying one cycle's commits"),
        ("flush cycle C", _v(a.cycle_ms, "ms"), "max(interval, mean flush)"),
        ("exposure window to a process crash, mean", _v(a.process_window_mean_ms, "ms"),
         "C/2: the wait until the next flush hands the buffer to the operating system"),
    ]
    if a.host_bounded:
        rows.append(("exposure window to a host crash or power loss, mean",
                     _v(a.host_window_mean_ms, "ms"),
                     "C/2 + E[S]: the wait for the next flush plus the flush"))
    rows += [
        ("at risk to a process crash, mean", _v(a.process_at_risk_mean, "commits"),
         "X x C/2 (Little's law)"),
    ]
    if a.host_bounded:
        rows += [
            ("at risk to a host crash or power loss, mean", _v(a.host_at_risk_mean, "commits"),
             "X x (C/2 + E[S]) (Little's law)"),
            ("steady peak, just before a flush completes", _v(a.steady_peak, "commits"),
             "the batch in flight plus what arrived during it: Poisson, mean X x (C + S), "
             "p99.9 over the flush cycles"),
        ]
    else:
        rows.append(("at risk to a host crash or power loss", "not bounded",
                     f"{r.device} does not count as durable"))
    rows.append(("at most", _v(a.at_most, "commits"), a.at_most_basis))
    if a.value_per_commit:
        if a.host_bounded:
            rows.append(("value at risk, mean", f"{_v(a.value_mean)} {cur}",
                         f"{_v(a.value_per_commit)} {cur} per commit"))
            rows.append(("value lost by a power loss at the steady peak",
                         f"{_v(a.value_steady_peak)} {cur}", ""))
        rows.append(("value lost at most", f"{_v(a.value_at_most)} {cur}", ""))
    if a.commits_in_run:
        rows.append(("commits acknowledged in the run", _v(a.commits_in_run, "commits"),
                     "X x duration"))
    return rows


_BOUND_HEAD = ("regime", "bound", "commits/s", "formula", "binds")


def _bound_rows(r: BenchmarkReview) -> list[tuple[str, ...]]:
    rows = []
    for f in r.feasibility:
        for b in f.bounds:
            rows.append((f.regime, b.name, _v(b.limit_per_s), b.formula,
                         "yes" if b.name == f.binding else ""))
    return rows


def _all_notes(r: BenchmarkReview) -> list[str]:
    return [*r.at_risk.notes, *r.notes]


# --------------------------------------------------------------------------- terminal
def _table(title: str, head: tuple[str, ...], rows: list[tuple[str, ...]],
           left: tuple[int, ...] = (0,)) -> Table:
    t = Table(title=title, title_justify="left")
    for i, h in enumerate(head):
        t.add_column(h, justify="left" if i in left else "right")
    for row in rows:
        t.add_row(*row)
    return t


def render_review_text(console: Console, r: BenchmarkReview) -> None:
    """The review for a terminal: reported figures, durable figures, at-risk, bounds, verdict."""
    title = r.benchmark_title or "benchmark"
    console.print(f"[bold]Benchmark review: {title}[/bold]")
    console.print(f"Case: {r.case_title}")
    console.print(f"Reported: {_reported(r)}")
    console.print(f"Commit mode: {_mode(r)}")
    console.print(f"Think time: {r.think.message}")
    console.print()
    console.print(_table("With durable commits: the same sessions, closed-workload model",
                         _DURABLE_HEAD, _durable_rows(r), left=(0, 1)))
    for n in _durable_notes(r):
        console.print(f"  note: {n}")
    console.print()
    head = ("Acknowledged commits at risk during the run" if r.at_risk.applies
            else "Acknowledged commits at risk during the run (none: durable commits)")
    console.print(_table(head, _RISK_HEAD, _risk_rows(r), left=(0, 2)))
    console.print()
    console.print(_table("Is the reported rate possible with durable commits? (asymptotic "
                         "bounds, Lazowska et al. 1984, ch. 5)", _BOUND_HEAD, _bound_rows(r),
                         left=(0, 1, 3)))
    for f in r.feasibility:
        console.print(f"  {f.regime}: {f.message}; a durable commit takes at least "
                      f"{_v(f.least_mean_ms, 'ms')} on average")
    console.print(f"Model of the benchmark's own mode: {r.reproduction.message}")
    console.print()
    console.print("[bold]Verdict (to paste into the review)[/bold]")
    console.print(r.verdict)
    notes = _all_notes(r)
    if notes:
        console.print()
        for n in notes:
            console.print(f"note: {n}")
    console.print()
    console.print(r.deferral)


# --------------------------------------------------------------------------- JSON
def review_json(r: BenchmarkReview) -> str:
    """The versioned JSON document (floats to 9 significant figures, stable byte for byte)."""
    doc = {"format": JSON_FORMAT, "format_version": JSON_FORMAT_VERSION, **to_plain(asdict(r))}
    return json.dumps(doc, indent=2) + "\n"


# --------------------------------------------------------------------------- Markdown
def _md_cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _md_table(head: tuple[str, ...], rows: list[tuple[str, ...]]) -> list[str]:
    out = ["| " + " | ".join(head) + " |", "|" + "|".join("---" for _ in head) + "|"]
    out += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in rows]
    return out


def review_markdown(r: BenchmarkReview) -> str:
    """The review as a Markdown section, ready to paste into a review document."""
    title = r.benchmark_title or "benchmark"
    lines = [f"## Benchmark review: {title}", "", f"Case: {r.case_title}", "",
             f"Reported: {_reported(r)}.", "", f"Commit mode: {_mode(r)}.", "",
             f"Think time: {r.think.message}.", "",
             "### With durable commits (the same sessions, closed-workload model)", ""]
    lines += _md_table(_DURABLE_HEAD, _durable_rows(r))
    lines += [""] + [f"- {n}" for n in _durable_notes(r)] + [""]
    lines += ["### Acknowledged commits at risk during the run", ""]
    lines += _md_table(_RISK_HEAD, _risk_rows(r)) + [""]
    lines += ["### Is the reported rate possible with durable commits?", "",
              "Asymptotic bounds of operational analysis (Lazowska et al., Quantitative System "
              "Performance, 1984, ch. 5).", ""]
    lines += _md_table(_BOUND_HEAD, _bound_rows(r)) + [""]
    lines += [f"- {f.regime}: {f.message}; a durable commit takes at least "
              f"{_v(f.least_mean_ms, 'ms')} on average" for f in r.feasibility]
    lines += [f"- model of the benchmark's own mode: {r.reproduction.message}", "",
              "### Verdict", "", r.verdict, ""]
    notes = _all_notes(r)
    if notes:
        lines += ["### Notes", ""] + [f"- {n}" for n in notes] + [""]
    lines += [r.deferral, ""]
    return "\n".join(lines)
