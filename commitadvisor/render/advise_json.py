"""The advice as a JSON document (format described in docs/advise-json.md).

Figures are plain numbers in the unit their key names, rounded to 9 significant figures so
that the same case gives the same bytes; an unbounded figure is the string "unbounded" and
a missing one null.
"""

from __future__ import annotations

import json
import math
from typing import Any

from commitadvisor.ranking import Advice, OptionRow
from commitadvisor.results import json_float

__all__ = ["ADVICE_FORMAT_VERSION", "advice_document", "render_json"]

ADVICE_FORMAT_VERSION = 1


def _num(v: float | None) -> float | str | None:
    if v is None:
        return None
    if math.isinf(v):
        return "unbounded"
    return json_float(v)


def _pairs(pairs: tuple[tuple[str, float | None], ...]) -> dict[str, Any]:
    return {k: _num(v) for k, v in pairs}


def _option(o: OptionRow, currency: str | None) -> dict[str, Any]:
    j = o.judgement
    return {
        "rank": o.rank,
        "strategy": o.name,
        "kind": o.kind,
        "settings": o.settings,
        "verdict": o.verdict,
        "verdict_words": o.verdict_words,
        "place": o.explanation,
        "figures": {
            "commit_p99_ms": _pairs(o.commit_p99_ms),
            "top_tier_p99_ms": _pairs(o.top_tier_p99_ms) if o.top_tier_p99_ms else None,
            "exposure_window_p999_ms": _pairs(o.exposure_p999_ms),
            "lost_per_host_crash": {
                "mean_commits": _num(o.lost_per_crash_mean),
                "p999_commits": _num(o.lost_per_crash_p999),
                "bound_commits": _num(o.lost_per_crash_hard_bound),
            },
            "expected_lost_commits_per_year": _num(o.expected_lost_per_year),
            "expected_loss_value_per_year": _num(o.expected_value_lost_per_year),
            "currency": currency,
            "flushes_per_s": _num(o.flushes_per_s),
            "saturated_in": list(o.saturated_in),
            "amplification": _pairs(o.stack_amplification) if o.stack_amplification else None,
            "slow_request_chance": _pairs(o.slow_request_chance) if o.slow_request_chance
            else None,
        },
        "decided_by": list(j.decided_by),
        "deciding_regimes": list(j.deciding_regimes),
        "rules": [
            {"rule": r.rule, "policy": r.policy, "source": r.source, "severity": r.severity,
             "metric": r.metric, "status": r.status, "deciding_regime": r.deciding_regime,
             "message": r.message}
            for r in j.outcomes
        ],
        "cautions": [
            {"topic": c.topic, "failure": c.failure, "regime": c.regime, "text": c.text,
             "figures": {k: _num(v) for k, v in c.figures}}
            for c in o.cautions
        ],
    }


def advice_document(a: Advice) -> dict[str, Any]:
    """The advice as plain JSON-ready data."""
    return {
        "format": "commitadvisor-advice",
        "format_version": ADVICE_FORMAT_VERSION,
        "title": a.title,
        "method": a.method,
        "summary": a.summary,
        "objective": a.objective,
        "regimes": [{"name": n, "time_share": _num(s)} for n, s in a.regimes],
        "policies": [{"name": n, "source": s} for n, s in a.policies],
        "switched_off": [{"rule": r, "by": p} for r, p in a.switched_off],
        "options": [_option(o, a.currency) for o in a.options],
        "notes": list(a.notes),
        "deferral": a.deferral,
    }


def render_json(a: Advice) -> str:
    """The advice document as indented JSON text ending in a newline."""
    return json.dumps(advice_document(a), indent=2, ensure_ascii=False) + "\n"
