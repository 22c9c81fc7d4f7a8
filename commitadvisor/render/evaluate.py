"""Rendering of ``evaluate``: a table per strategy with one row per regime, and JSON."""

from __future__ import annotations

import json

from rich.console import Console
from rich.table import Table

from commitadvisor.results import (
    JSON_FORMAT_VERSION,
    Evaluation,
    RegimeResult,
    json_float,
    to_plain,
)

__all__ = ["render_table", "render_json"]


def _ms(v: float | None) -> str:
    if v is None:
        return "-"
    v = json_float(v)
    return f"{v:.3g}" if v < 100 else f"{v:,.0f}"


def _count(v: float | None) -> str:
    return "-" if v is None else _ms(v)


def _exposure_cell(r: RegimeResult, failure: str) -> str:
    e = r.exposure(failure)
    if e.unbounded:
        return "unbounded"
    if e.window_p999_ms is None:
        return "-"
    if e.window_p999_ms == 0:
        return "0"
    return f"{_ms(e.window_p999_ms)} ms / {_count(e.at_risk_mean)}"


def render_table(console: Console, ev: Evaluation) -> None:
    console.print(f"[bold]{ev.title}[/bold]  ({ev.method} estimates)")
    shares = ", ".join(f"{n} {s:.1%} of the time" for n, s in ev.regimes)
    console.print(f"Regimes: {shares}")
    for s in ev.strategies:
        t = Table(title=f"{s.name}  ({s.kind}: {s.settings})", title_justify="left")
        for col in ("regime", "commits/s", "ack mean ms", "p50 ms", "p99 ms", "p99.9 ms",
                    "host crash: exposure p99.9 / at risk", "process crash", "flushes/s",
                    "batch", "CPU busy"):
            t.add_column(col, justify="left" if col in ("regime",) else "right")
        for r in (*s.regimes, s.blended):
            if r.saturated:
                t.add_row(r.regime, f"{r.throughput_per_s:,.0f}", "SATURATED", "-", "-", "-",
                          "-", "-", "-", "-", "-")
                continue
            fl = sum(f for _, f in r.flushes_per_s)
            t.add_row(r.regime, f"{r.throughput_per_s:,.0f}", _ms(r.ack_mean_ms),
                      _ms(r.ack_p50_ms), _ms(r.ack_p99_ms), _ms(r.ack_p999_ms),
                      _exposure_cell(r, "host_crash"), _exposure_cell(r, "process_crash"),
                      f"{fl:,.0f}", _count(r.mean_batch_commits),
                      "-" if r.cpu_utilisation is None else f"{r.cpu_utilisation:.0%}")
        console.print(t)
        for r in (*s.regimes, s.blended):
            if r.saturation:
                console.print(f"  {r.regime}: {r.saturation.message}")
        seen = set()
        for r in s.regimes:
            for n in r.notes:
                if n not in seen:
                    seen.add(n)
                    console.print(f"  note ({r.regime}): {n}")
    console.print("Exposure: time from acknowledgement until a commit survives that failure; "
                  "'at risk' = acknowledged commits a failure at a random instant would lose "
                  "on average. 'unbounded': no durable copy bounds the loss.")
    console.print("These are model estimates. Your organisation's recovery policy, its owners "
                  "and applicable regulation decide what is acceptable.")


def render_json(ev: Evaluation) -> str:
    doc = {"format": "commitadvisor-evaluation", "format_version": JSON_FORMAT_VERSION,
           **to_plain(ev)}
    return json.dumps(doc, indent=2, sort_keys=False) + "\n"
