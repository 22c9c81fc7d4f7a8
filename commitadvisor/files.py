"""File output: atomic writes (temporary file, then rename) and the shipped starter case."""

from __future__ import annotations

import os
import tempfile
from importlib import resources
from pathlib import Path

__all__ = ["write_atomically", "starter_case_text"]


def write_atomically(path: Path | str, text: str, force: bool = False) -> None:
    """Write ``text`` to ``path`` through a temporary file in the same folder and a rename,
    so a reader never sees a half-written file. Refuses to replace a file unless ``force``."""
    p = Path(path)
    if p.exists() and not force:
        raise FileExistsError(str(p))
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent or ".")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.replace(tmp, p)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def starter_case_text() -> str:
    """The commented starter case written by ``new-case``."""
    return resources.files("commitadvisor.data").joinpath("starter_case.toml").read_text("utf-8")
