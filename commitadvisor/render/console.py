"""The one place that builds a rich console: colour only on a terminal unless told otherwise."""

from __future__ import annotations

import sys

from rich.console import Console

__all__ = ["make_console"]


def make_console(no_color: bool = False, stderr: bool = False, width: int | None = None) -> Console:
    """A console that writes plain text when not on a terminal or when ``no_color`` is set."""
    stream = sys.stderr if stderr else sys.stdout
    plain = no_color or not stream.isatty()
    return Console(
        file=stream,
        no_color=plain,
        color_system=None if plain else "auto",
        highlight=False,
        # names such as "buffer:a:" must print as written, not as emoji codes
        emoji=False,
        soft_wrap=False,
        width=width or (120 if plain else None),
    )
