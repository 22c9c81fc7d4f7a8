"""Rendering of ``simulate``: the per-regime table (shared with ``evaluate``), how the
segments ran, the timeline's windows, JSON, the series as CSV, and a progress bar."""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator
from contextlib import contextmanager

from rich.console import Console
from rich.progress import BarColumn, Progress, TaskProgressColumn, TextColumn, TimeRemainingColumn
from rich.table import Table

from commitadvisor.render.evaluate import render_table
from commitadvisor.results import JSON_FORMAT_VERSION, json_float, to_plain
from commitadvisor.simulate import Simulation, WindowRow

__all__ = ["render_simulation", "simulation_json", "series_csv", "simulate_progress"]

SERIES_COLUMNS = ("strategy", "start_s", "regime", "commits", "throughput_per_s",
                  "ack_mean_ms", "ack_p50_ms", "ack_p99_ms", "exposure_p99_ms", "flushes")


@contextmanager
def simulate_progress(console: Console) -> Iterator[Callable[[float], None]]:
    """A progress bar on a terminal (nothing otherwise); yields ``progress(fraction)``."""
    with Progress(TextColumn("{task.description}"), BarColumn(), TaskProgressColumn(),
                  TimeRemainingColumn(), console=console, transient=True,
                  disable=not console.is_terminal) as progress:
        task = progress.add_task("simulating", total=1.0)

        def update(fraction: float) -> None:
            progress.update(task, completed=fraction)

        yield update


def _ms(v: float | None) -> str:
    if v is None:
        return "-"
    v = json_float(v)
    return f"{v:.3g}" if v < 100 else f"{v:,.0f}"


def _windows_table(sim: Simulation, name: str, goal_ms: float) -> Table | None:
    rows = sim.series_for(name)
    if not rows:
        return None
    t = Table(title=f"{name}: windows of {sim.window_s:g} s over {sim.duration_s:g} s of "
              "simulated time", title_justify="left")
    for col in ("regime", "windows", "commits/s", "ack mean ms", "worst window p50 ms",
                "worst window p99 ms", f"windows with p99 > goal {goal_ms:g} ms",
                "worst host-crash exposure p99 ms"):
        t.add_column(col, justify="left" if col == "regime" else "right")
    for regime in dict.fromkeys(r.regime for r in rows):
        mine = [r for r in rows if r.regime == regime]
        n = sum(r.commits for r in mine)
        mean = (sum((r.ack_mean_ms or 0.0) * r.commits for r in mine) / n) if n else None
        p99s = [r.ack_p99_ms for r in mine if r.ack_p99_ms is not None]
        p50s = [r.ack_p50_ms for r in mine if r.ack_p50_ms is not None]
        exps = [r.exposure_p99_ms for r in mine]
        length = sum(sim.window_s for _ in mine)
        t.add_row(regime, str(len(mine)), f"{n / length:,.0f}", _ms(mean),
                  _ms(max(p50s) if p50s else None), _ms(max(p99s) if p99s else None),
                  str(sum(1 for v in p99s if v > goal_ms)),
                  "unbounded" if any(v is None for v in exps) else _ms(max(exps)))
    return t


def render_simulation(console: Console, sim: Simulation, goal_ms: float) -> None:
    """The per-regime table, how each steady segment ran, and the timeline's windows."""
    render_table(console, sim.evaluation)
    console.print(f"Seed {sim.seed}. Each regime was simulated as its own steady state:")
    t = Table(title="Steady segments", title_justify="left")
    for col in ("strategy", "regime", "lanes", "warm-up s", "measured s per lane",
                "commits measured", "commits simulated", "ack mean std. error ms"):
        t.add_column(col, justify="left" if col in ("strategy", "regime") else "right")
    for s in sim.segments:
        if s.regime == "timeline":
            continue
        t.add_row(s.strategy, s.regime, str(s.lanes), f"{s.warmup_s:.3g}",
                  f"{s.measured_s_per_lane:.3g}", f"{s.commits_measured:,}",
                  f"{s.commits_simulated:,}", _ms(s.ack_mean_se_ms))
    console.print(t)
    for st in sim.evaluation.strategies:
        table = _windows_table(sim, st.name, goal_ms)
        if table is not None:
            console.print(table)
    for note in sim.notes:
        console.print(f"Note: {note}")


def simulation_json(sim: Simulation) -> str:
    doc = {
        "format": "commitadvisor-simulation",
        "format_version": JSON_FORMAT_VERSION,
        "seed": sim.seed,
        "duration_s": sim.duration_s,
        "window_s": sim.window_s,
        "evaluation": to_plain(sim.evaluation),
        "segments": [to_plain(vars(s)) for s in sim.segments],
        "series": [to_plain(vars(r)) for r in sim.series],
        "notes": list(sim.notes),
    }
    return json.dumps(doc, indent=2) + "\n"


def _cell(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)


def series_csv(rows: tuple[WindowRow, ...]) -> str:
    """The per-window series as CSV (a header line, then one line per window; an empty
    cell where a figure does not exist, e.g. an unbounded exposure)."""
    lines = [",".join(SERIES_COLUMNS)]
    for r in rows:
        lines.append(",".join(_cell(getattr(r, c)) for c in SERIES_COLUMNS))
    return "\n".join(lines) + "\n"
