"""The command line: each command parses, loads, calls one function and renders.

Known input errors end with one clear message per problem and exit status 2. Heavy modules
(scipy, the models, rich tables) are imported inside the commands, so ``--help`` is fast.
"""

from __future__ import annotations

import sys
from enum import Enum
from pathlib import Path
from typing import Annotated, NoReturn

import typer

from commitadvisor import __version__
from commitadvisor.errors import InputError

app = typer.Typer(
    name="commitadvisor",
    help=(
        "Advise how database commits should become durable. Reads one case file (workload, "
        "loss tolerance, log devices, strategies) and computes, per strategy and load regime, "
        "the commit response time, the exposure window and the loss on a crash. Start with "
        "'commitadvisor new-case my.toml', edit it, then 'commitadvisor check my.toml'."
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

EXIT_INPUT = 2

CaseArg = Annotated[Path, typer.Argument(help="The case file (.toml or .json).", show_default=False)]
NoColor = Annotated[bool, typer.Option("--no-color", help="Plain text, no colour.")]


class Fmt(str, Enum):
    table = "table"
    json = "json"


def _fail(exc: InputError) -> NoReturn:
    sys.stderr.write(exc.render() + "\n")
    raise typer.Exit(EXIT_INPUT)


def _load(path: Path):
    from commitadvisor.case import load_case

    try:
        return load_case(path)
    except InputError as exc:
        _fail(exc)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"commitadvisor {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: Annotated[bool, typer.Option("--version", callback=_version, is_eager=True,
                                          help="Print the version and exit.")] = False,
) -> None:
    """Advise how database commits should become durable."""


@app.command()
def check(case: CaseArg, no_color: NoColor = False) -> None:
    """Validate a case file and summarise what it says.

    Prints the workload, each regime with its share of time, each log device's flush p50 and
    p99 per regime (ms), its stalls and bandwidth, and the strategies. Exit status 2 and one
    line per problem (file, field, what is wrong) when the case is not valid.
    """
    from commitadvisor.render.check import render_summary
    from commitadvisor.render.console import make_console
    from commitadvisor.summary import summarise

    c = _load(case)
    render_summary(make_console(no_color), str(case), summarise(c))


@app.command()
def schema(
    out: Annotated[Path | None, typer.Option("--out", help="Write to this file instead of "
                                             "standard output.")] = None,
) -> None:
    """Print the case file's JSON Schema (for editors that complete and check fields)."""
    import json

    from commitadvisor.case import case_json_schema
    from commitadvisor.files import write_atomically

    text = json.dumps(case_json_schema(), indent=2, sort_keys=True) + "\n"
    if out is None:
        sys.stdout.write(text)
    else:
        write_atomically(out, text, force=True)


@app.command("new-case")
def new_case(
    path: Annotated[Path, typer.Argument(help="Where to write the starter case (.toml).")],
    force: Annotated[bool, typer.Option("--force", help="Overwrite an existing file.")] = False,
) -> None:
    """Write a commented starter case that passes 'check'; edit its figures to your own."""
    from commitadvisor.files import starter_case_text, write_atomically

    try:
        write_atomically(path, starter_case_text(), force=force)
    except FileExistsError:
        sys.stderr.write(f"{path}: exists already; use --force to overwrite it\n")
        raise typer.Exit(EXIT_INPUT) from None
    except OSError as exc:
        sys.stderr.write(f"{path}: cannot be written: {exc.strerror or exc}\n")
        raise typer.Exit(EXIT_INPUT) from None
    typer.echo(f"wrote {path}; next: commitadvisor check {path}")


def main() -> None:
    """Console-script entry point."""
    app()
