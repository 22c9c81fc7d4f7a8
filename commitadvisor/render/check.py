"""Rendering of ``check``: what the case says, as tables."""

from __future__ import annotations

from rich.console import Console
from rich.table import Table

from commitadvisor.summary import CaseSummary

__all__ = ["render_summary"]


def render_summary(console: Console, file: str, s: CaseSummary) -> None:
    console.print(f"[bold]{s.title}[/bold]  ({file}: valid)")
    console.print(f"Workload  {s.workload}")
    t = Table(title="Regimes", title_justify="left")
    for col in ("regime", "share of time", "when"):
        t.add_column(col)
    for name, share, when in s.regimes:
        t.add_row(name, f"{share:.2%}", when)
    console.print(t)
    t = Table(title="Log devices per regime", title_justify="left")
    for col, just in (("device", "left"), ("regime", "left"), ("flush p50 ms", "right"),
                      ("flush p99 ms", "right"), ("mean ms", "right"), ("stalls /s", "right"),
                      ("stall p50 ms", "right"), ("MB/s", "right"),
                      ("durable when flushed", "left")):
        t.add_column(col, justify=just)  # type: ignore[arg-type]
    for r in s.devices:
        t.add_row(r.device, r.regime, f"{r.p50_ms:.3g}", f"{r.p99_ms:.3g}", f"{r.mean_ms:.3g}",
                  f"{r.stalls_per_s:g}" if r.stalls_per_s else "-",
                  f"{r.stall_p50_ms:.3g}" if r.stall_p50_ms else "-",
                  f"{r.bandwidth_mb_per_s:g}",
                  ("yes" if r.counts_as_durable else "NO") + f" ({r.cache})")
    console.print(t)
    t = Table(title="Strategies", title_justify="left")
    t.add_column("strategy")
    t.add_column("what it does")
    for name, words in s.strategies:
        t.add_row(name, words)
    console.print(t)
    for line in s.stack:
        console.print(f"Tier  {line}")
    for note in s.notes:
        console.print(f"Note: {note}")
