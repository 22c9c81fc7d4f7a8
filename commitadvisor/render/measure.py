"""Show a flush measurement: the notice before it, a progress bar during it, a summary after."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager

from rich.console import Console
from rich.progress import BarColumn, Progress, TaskProgressColumn, TextColumn, TimeRemainingColumn
from rich.table import Table
from rich.text import Text

from commitadvisor.measure import MEASURE_NOTICE, MeasureResult, summarise_flushes

__all__ = ["measure_progress", "render_measure_notice", "render_measure_result"]


def render_measure_notice(console: Console, directory: str) -> None:
    """The fixed notice, naming the directory whose device will be written to."""
    console.print(Text(f"Directory: {directory}"))
    console.print(Text(MEASURE_NOTICE))


@contextmanager
def measure_progress(console: Console, label: str) -> Iterator[Callable[[int, int], None]]:
    """A progress bar on a terminal (nothing otherwise); yields the ``progress`` callback."""
    columns = (
        TextColumn("{task.description}"),
        BarColumn(),
        TaskProgressColumn(),
        TimeRemainingColumn(),
    )
    with Progress(
        *columns, console=console, transient=True, disable=not console.is_terminal
    ) as progress:
        task = progress.add_task(label, total=None)

        def update(done: int, total: int) -> None:
            progress.update(task, completed=done, total=total)

        yield update


def _mode(result: MeasureResult) -> str:
    if result.append:
        return "appending to a growing file"
    return f"overwriting in place a prefilled file of {result.prefill_bytes} bytes"


def render_measure_result(console: Console, result: MeasureResult, out: str | None) -> None:
    """Summary of the timed flushes (µs), the plausibility warning, and where samples went."""
    s = summarise_flushes(result.samples_us)
    console.print(
        Text(
            f"Timed {s.count} writes of {result.block_bytes} bytes, each followed by "
            f"{result.flush_call}, {_mode(result)}, in {result.elapsed_s:.2f} s."
        )
    )
    table = Table(title="Write + flush time, µs", title_justify="left")
    for header in ("p50", "p90", "p99", "p99.9", "max", "mean"):
        table.add_column(header, justify="right", no_wrap=True)
    table.add_row(
        *(f"{v:.1f}" for v in (s.p50_us, s.p90_us, s.p99_us, s.p999_us, s.max_us, s.mean_us))
    )
    console.print(table)
    if s.count < 1000:
        console.print(Text(f"Note: with {s.count} writes the p99.9 is not a reliable figure."))
    if result.plausibility_warning:
        console.print(Text("WARNING: " + result.plausibility_warning, style="bold"))
    if out is None:
        console.print(Text("Samples not saved (give --out FILE.csv to keep them for fit-profile)."))
    else:
        console.print(
            Text(f"Samples written to {out} (unit: us); next: commitadvisor fit-profile {out}")
        )
