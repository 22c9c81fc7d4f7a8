"""Markdown of the risk sign-off (commitadvisor.signoff builds its content)."""

from __future__ import annotations

from commitadvisor.signoff import Bullets, Paragraph, Section, Signoff, Table

__all__ = ["signoff_markdown"]


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _table(t: Table) -> list[str]:
    out = ["| " + " | ".join(_cell(h) for h in t.head) + " |",
           "|" + "|".join("---" for _ in t.head) + "|"]
    out += ["| " + " | ".join(_cell(c) for c in row) + " |" for row in t.rows]
    return out


def _section(s: Section, number: int) -> list[str]:
    lines = [f"## {number}. {s.title}", ""]
    if not s.complete:
        lines += ["> **Incomplete section:** read it before signing.", ""]
    for block in s.blocks:
        if isinstance(block, Paragraph):
            lines += [block.text, ""]
        elif isinstance(block, Table):
            lines += _table(block) + [""]
        elif isinstance(block, Bullets):
            lines += [f"- {_cell(item)}" for item in block.items] + [""]
    return lines


def signoff_markdown(doc: Signoff) -> str:
    """The whole document as Markdown text (deterministic for the same content)."""
    lines = [f"# {doc.title}", ""]
    for i, s in enumerate(doc.sections, start=1):
        lines += _section(s, i)
    return "\n".join(lines).rstrip("\n") + "\n"
