"""Rendering of ``evaluate --verify``: analytic and simulated figures side by side."""

from __future__ import annotations

from dataclasses import asdict

from rich.console import Console
from rich.table import Table

from commitadvisor.results import to_plain
from commitadvisor.verify import Comparison

__all__ = ["render_comparison", "comparison_plain"]


def _num(v: float | None) -> str:
    if v is None:
        return "-"
    return f"{v:.4g}" if abs(v) < 1000 else f"{v:,.0f}"


def render_comparison(console: Console, c: Comparison) -> None:
    """One line per strategy, then every flagged figure (the JSON form holds all rows)."""
    console.print(f"Check against the simulator (seed {c.seed}): {c.summary()}")
    names = list(dict.fromkeys(r.strategy for r in c.rows))
    for name in names:
        rows = [r for r in c.rows if r.strategy == name]
        bad = [r for r in rows if r.flagged]
        console.print(f"  {name}: {len(rows) - len(bad)} of {len(rows)} figures agree"
                      + (f", {len(bad)} FLAGGED" if bad else ""))
    if not c.flagged:
        return
    t = Table(title="Flagged figures", title_justify="left")
    for col in ("strategy", "regime", "figure", "analytic", "simulated", "difference",
                "tolerance", "note"):
        t.add_column(col, justify="right" if col in ("analytic", "simulated", "difference")
                     else "left")
    for r in c.flagged:
        diff = "-" if r.relative_difference is None else f"{r.relative_difference:+.1%}"
        t.add_row(r.strategy, r.regime, r.figure, _num(r.analytic), _num(r.simulated), diff,
                  r.tolerance, r.note)
    console.print(t)
    console.print("Where a figure is flagged, the analytic model and the simulation disagree "
                  "beyond the stated tolerance: rely on the simulated figure, and see the "
                  "README's model limits.")


def comparison_plain(c: Comparison) -> dict:
    return to_plain({"seed": c.seed, "tolerances": asdict(c.tolerances),
                     "agrees": c.agrees, "rows": [asdict(r) for r in c.rows]})
