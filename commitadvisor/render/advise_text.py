"""The words and cells of ``advise``, shared by the terminal table and the markdown
renderer so that both carry the same figures, rounded the same way."""

from __future__ import annotations

import math

from commitadvisor.policy import format_value
from commitadvisor.ranking import Advice, OptionRow

__all__ = ["header", "rows", "sections", "policies_line", "render_markdown", "cell_ms",
           "STATUS_WORDS"]

STATUS_WORDS = {
    "met": "met",
    "broken": "BROKEN",
    "caution": "caution",
    "not_applicable": "not judged",
}
_FAILURE_SHORT = {"process_crash": "process", "host_crash": "host", "device_loss": "device"}


def cell_ms(v: float | None) -> str:
    """A time in ms for a table cell: three significant figures, thousands grouped."""
    if v is None:
        return "-"
    if math.isinf(v):
        return "unbounded"
    return format_value(v, "ms").removesuffix(" ms")


def _count(v: float | None) -> str:
    if v is None:
        return "-"
    return format_value(v, "commits").removesuffix(" commits")


def _regimes(a: Advice) -> tuple[str, ...]:
    return tuple(name for name, _ in a.regimes)


def _has_value(a: Advice) -> bool:
    return any(o.expected_value_lost_per_year is not None for o in a.options)


def header(a: Advice) -> tuple[str, ...]:
    """Column headers, each with its unit (a line break between name and detail)."""
    cols = ["#", "strategy", "verdict"]
    cols += [f"commit p99 ms\n{r}" for r in _regimes(a)]
    if a.has_stack:
        cols.append("top-tier p99 ms\nworst regime")
    cols.append("exposure p99.9 ms\nprocess / host / device")
    cols.append("lost per host crash\nmean / p99.9 / bound")
    cols.append("loss per year\ncommits")
    if _has_value(a):
        cols.append(f"loss per year\n{a.currency}")
    cols.append("flushes\nper s")
    return tuple(cols)


def _top_worst(o: OptionRow) -> str:
    vals = dict(o.top_tier_p99_ms)
    if not vals:
        return "-"
    if any(v is None for v in vals.values()):
        return "saturated"
    return cell_ms(max(v for v in vals.values() if v is not None))


def _exposures(o: OptionRow) -> str:
    return " / ".join(cell_ms(v) for _, v in o.exposure_p999_ms)


def _lost(o: OptionRow) -> str:
    host = dict(o.exposure_p999_ms).get("host_crash")
    if host is not None and math.isinf(host):
        return "unbounded"
    if o.lost_per_crash_mean is None and o.lost_per_crash_p999 is None:
        return "-"
    return " / ".join((_count(o.lost_per_crash_mean), _count(o.lost_per_crash_p999),
                       _count(o.lost_per_crash_hard_bound)))


def _money(v: float | None) -> str:
    if v is None:
        return "-"
    return format_value(v, "value").strip()


def rows(a: Advice) -> tuple[tuple[str, ...], ...]:
    """One row of cells per ranked option, in rank order."""
    out = []
    for o in a.options:
        p99 = dict(o.commit_p99_ms)
        cells = [str(o.rank), o.name, o.verdict_words]
        for r in _regimes(a):
            cells.append("saturated" if r in o.saturated_in and p99.get(r) is None
                         else cell_ms(p99.get(r)))
        if a.has_stack:
            cells.append(_top_worst(o))
        cells.append(_exposures(o))
        cells.append(_lost(o))
        host = dict(o.exposure_p999_ms).get("host_crash")
        cells.append("unbounded" if host is not None and math.isinf(host)
                     else _count(o.expected_lost_per_year))
        if _has_value(a):
            cells.append(_money(o.expected_value_lost_per_year))
        cells.append("-" if o.flushes_per_s is None
                     else format_value(o.flushes_per_s, "per_s").removesuffix("/s"))
        out.append(tuple(cells))
    return tuple(out)


def policies_line(a: Advice) -> str:
    parts = [f"{name} ({src})" for name, src in a.policies]
    text = "Policies in force: " + "; ".join(parts)
    if a.switched_off:
        text += ". Switched off: " + ", ".join(f"{rid} (by {who})" for rid, who in a.switched_off)
    return text + "."


def _deciding(a: Advice, o: OptionRow) -> str:
    j = o.judgement
    if j.verdict != "allowed":
        named = [r for r in j.deciding_regimes if r not in ("every regime", "the whole year")]
        if named:
            regimes = "the regime that decided: " + ", ".join(named)
        else:
            regimes = "it holds alike in every regime"
        files = dict(a.policies)
        who = ", ".join(f"{p} ({files.get(p, '?')})" for p in j.decided_by)
        return f"Decided by {who}; {regimes}."
    warn = [x.deciding_regime for x in j.broken("warning") if x.deciding_regime]
    if warn:
        return ("No rule that sets a verdict is broken; the regime behind its warnings: "
                + ", ".join(dict.fromkeys(warn)) + ".")
    return "No rule is broken in any regime."


def sections(a: Advice) -> tuple[tuple[str, tuple[str, ...]], ...]:
    """Per option: a heading and its lines (place, rules met or broken, cautions, regime)."""
    out = []
    for o in a.options:
        lines = [f"Settings: {o.settings}.", f"Place: {o.explanation}."]
        for r in o.judgement.outcomes:
            tag = STATUS_WORDS[r.status]
            sev = f", {r.severity.replace('_', ' ')}" if r.status == "broken" else ""
            lines.append(f"Rule {r.rule} ({r.policy}{sev}): {tag}: {r.message}")
        for c in o.cautions:
            lines.append(f"Caution: {c.text}")
        amp = [(reg, v) for reg, v in o.stack_amplification if v is not None]
        if amp:
            lines.append("Amplification through the tiers (change of top-tier p99 per change "
                         "of commit p99, against normal): "
                         + ", ".join(f"{reg} x{v:.2f}" for reg, v in amp) + ".")
        slow = [(reg, v) for reg, v in o.slow_request_chance if v is not None]
        if slow:
            lines.append("Chance that a top-tier request meets a commit slower than the goal: "
                         + ", ".join(f"{reg} {format_value(v, 'share')}" for reg, v in slow)
                         + ".")
        lines.append(_deciding(a, o))
        out.append((f"{o.rank}. {o.name}: {o.verdict_words}", tuple(lines)))
    return tuple(out)


def _md_escape(text: str) -> str:
    return text.replace("|", "\\|")


def render_markdown(a: Advice) -> str:
    """The advice as a markdown document (plain text, no terminal codes)."""
    lines = [f"# Advice: {a.title}", "", f"**{a.summary}**", "",
             f"Estimates: {a.method}; objective: {a.objective} in the worst regime; regimes: "
             + ", ".join(f"{n} {s:.1%} of the time" for n, s in a.regimes) + ".", ""]
    h = header(a)
    lines.append("| " + " | ".join(_md_escape(c.replace("\n", ", ")) for c in h) + " |")
    lines.append("|" + "|".join("---:" if i == 0 or i > 2 else "---" for i in range(len(h)))
                 + "|")
    for row in rows(a):
        lines.append("| " + " | ".join(_md_escape(c) for c in row) + " |")
    lines.append("")
    for heading, body in sections(a):
        lines += [f"## {heading}", ""]
        lines += [f"- {_md_escape(x)}" for x in body]
        lines.append("")
    lines += [policies_line(a), ""]
    if a.notes:
        lines += ["Notes:", ""] + [f"- {n}" for n in a.notes] + [""]
    lines += [f"**{a.deferral}**", ""]
    return "\n".join(lines)
