"""Errors that the command line turns into one clear message and exit status 2."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["InputProblem", "InputError"]


@dataclass(frozen=True)
class InputProblem:
    """One thing wrong with an input file: where (a dotted field path) and what."""

    field: str
    message: str
    line: int | None = None

    def describe(self, file: str) -> str:
        where = f"{file}:{self.line}" if self.line else file
        if self.field:
            return f"{where}: {self.field}: {self.message}"
        return f"{where}: {self.message}"


class InputError(Exception):
    """A case file, rule file or samples file that cannot be used as it is.

    ``problems`` lists every problem found (not only the first), each naming its field.
    """

    def __init__(self, file: str, problems: list[InputProblem] | tuple[InputProblem, ...]):
        self.file = file
        self.problems = tuple(problems)
        super().__init__(self.render())

    def render(self) -> str:
        lines = [p.describe(self.file) for p in self.problems]
        return "\n".join(lines)
