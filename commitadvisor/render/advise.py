"""Rendering of ``advise`` on a terminal: summary, ranked table, each option's rules and
cautions, the deciding regime and the closing statement. Colour only adds to words (a
verdict is always written out); plain text when not on a terminal."""

from __future__ import annotations

from rich import box
from rich.console import Console
from rich.markup import escape
from rich.measure import Measurement
from rich.table import Table

from commitadvisor.ranking import Advice
from commitadvisor.render.advise_text import header, policies_line, rows, sections

__all__ = ["render_advice"]

_VERDICT_STYLE = {"allowed": "green", "needs sign-off": "yellow", "not allowed": "bold red"}


def render_advice(console: Console, a: Advice) -> None:
    """Print the advice: summary line, ranked table (units in the headers), each option's
    place, rules, cautions and deciding regime, the policies in force and the deferral."""
    console.print(f"[bold]{escape(a.summary)}[/bold]")
    console.print(f"{escape(a.title)}: {a.method} estimates; options ranked by verdict, then "
                  f"{a.objective} in the worst regime, then exposure, then flushes per second.")
    t = Table(title="Ranked options", title_justify="left", box=box.SIMPLE_HEAD,
              pad_edge=False)
    for i, col in enumerate(header(a)):
        t.add_column(col, justify="left" if i in (1, 2) else "right", overflow="fold",
                     no_wrap=i in (1, 2))
    for row in rows(a):
        cells = [escape(c) for c in row]
        style = _VERDICT_STYLE.get(row[2])
        if style:
            cells[2] = f"[{style}]{cells[2]}[/{style}]"
        t.add_row(*cells)
    if console.is_terminal:
        console.print(t)
    else:
        # plain text goes to a file or a pipe: give the table its natural width, unfolded
        natural = Measurement.get(console, console.options.update_width(200), t).maximum
        narrow = console.width
        console.width = max(natural, narrow)
        console.print(t)
        console.width = narrow
    for heading, lines in sections(a):
        console.print()
        console.print(f"[bold]{escape(heading)}[/bold]")
        for line in lines:
            style = "red" if "BROKEN" in line.split(".")[0] else None
            text = escape(line)
            console.print(f"  [{style}]{text}[/{style}]" if style else f"  {text}")
    console.print()
    console.print(escape(policies_line(a)))
    for note in a.notes:
        console.print(f"Note: {escape(note)}")
    console.print()
    console.print(f"[bold]{escape(a.deferral)}[/bold]")
