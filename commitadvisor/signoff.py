"""The risk sign-off: the content of the document a recovery-policy owner approves or refuses.

:func:`build_signoff` turns plain inputs (the case, the hashes of its file and of each policy
file, the evaluation, the advice with its verdicts and cautions, the simulator's check) into
a frozen :class:`Signoff`: a title and sections made of paragraphs, tables, lists and blank
fields for names, dates and signatures. commitadvisor.render.signoff_md writes it as
Markdown. Every figure comes from the evaluator, the advice layer or the simulator; nothing
is computed here but the choice of the best durable alternative and the wording.

Pure: no I/O (the caller reads the files and hashes them, see :func:`sha256_hex`).
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass
from typing import Any

from commitadvisor.case import Case, regime_time_shares
from commitadvisor.cautions import loss_regime
from commitadvisor.policy import FAILURE_WORDS, VERDICT_WORDS, format_value
from commitadvisor.ranking import Advice, OptionRow
from commitadvisor.results import FAILURE_KINDS, Evaluation, Exposure, RegimeResult, StrategyResult
from commitadvisor.summary import summarise

__all__ = [
    "Paragraph",
    "Table",
    "Bullets",
    "Section",
    "Signoff",
    "VerifyRow",
    "Verification",
    "PolicyFile",
    "ROLES",
    "MODEL_LIMITS",
    "DEFERRAL",
    "UnknownStrategy",
    "sha256_hex",
    "verification_from",
    "best_durable_alternative",
    "build_signoff",
]

ROLES = ("decision owner", "recovery-policy owner", "architect", "reviewer")

MODEL_LIMITS = (
    "A device that reports a flush as complete before the data is on stable media (a write "
    "cache that lies about durability) is not modelled: the figures take each device's "
    "declared cache kind at its word. Power-fault studies found such devices (Zheng et al., "
    "FAST 2013).",
    "Firmware faults, silent corruption, torn or misdirected writes and bugs in the database's "
    "own recovery are not modelled.",
    "Operator error (a deleted log, a wrong restore, a mistaken failover) is not modelled.",
    "Replication to other hosts, archiving of the log and backups are not modelled: a "
    "'device loss' figure counts only the copies this case writes at commit time.",
    "Each load regime is evaluated as a steady state and then blended by its share of time "
    "(quasi-static); the moments when a regime starts and ends are not modelled.",
    "The workload, device profiles and failure rates are the case file's figures; the results "
    "are only as good as those figures.",
)

DEFERRAL = (
    "This document records model estimates computed from the case file's figures; they are "
    "not measurements and not a decision. Whether the exposure described here is acceptable "
    "is decided by the organisation's recovery policy, its owners and the applicable "
    "regulation, not by this tool."
)


class UnknownStrategy(ValueError):
    """The strategy named for the sign-off is not in the case."""

    def __init__(self, name: str, names: tuple[str, ...]):
        self.name = name
        self.names = names
        super().__init__(f"no strategy is named '{name}'; the case's strategies are: "
                         + ", ".join(names))


# --------------------------------------------------------------------------- building blocks
@dataclass(frozen=True)
class Paragraph:
    text: str


@dataclass(frozen=True)
class Table:
    head: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]


@dataclass(frozen=True)
class Bullets:
    items: tuple[str, ...]


Block = Paragraph | Table | Bullets


@dataclass(frozen=True)
class Section:
    title: str
    blocks: tuple[Block, ...]
    complete: bool = True  # False: a section whose content is not yet available


@dataclass(frozen=True)
class Signoff:
    title: str
    strategy: str
    alternative: str | None
    case_sha256: str
    policy_sha256: tuple[tuple[str, str], ...]  # (source, hash)
    tool_version: str
    seed: int | None
    sections: tuple[Section, ...]
    cautions: tuple[str, ...]  # every caution of the chosen strategy, in order
    deferral: str = DEFERRAL

    def section(self, title: str) -> Section:
        return next(s for s in self.sections if s.title == title)


@dataclass(frozen=True)
class PolicyFile:
    name: str  # the policy's own name
    source: str  # the file as the user named it, or the baseline's source
    sha256: str


@dataclass(frozen=True)
class VerifyRow:
    """One figure checked against the simulator."""

    strategy: str
    regime: str
    figure: str
    model: float | None
    simulated: float | None
    allowed: str  # the tolerance, in words
    flagged: bool
    note: str = ""
    relative_difference: float | None = None  # (simulated - model) / |model|


@dataclass(frozen=True)
class Verification:
    """The simulator's check of the figures: ``status`` is "checked" or "skipped"."""

    status: str
    seed: int | None
    rows: tuple[VerifyRow, ...] = ()
    summary: str = ""


def verification_from(comparison: Any) -> Verification:
    """The sign-off's view of a :class:`commitadvisor.verify.Comparison` (its rows, seed and
    summary), every row kept."""
    rows = tuple(VerifyRow(r.strategy, r.regime, r.figure, r.analytic, r.simulated, r.tolerance,
                           r.flagged, r.note, r.relative_difference) for r in comparison.rows)
    return Verification("checked", comparison.seed, rows, comparison.summary())


def sha256_hex(data: bytes) -> str:
    """The SHA-256 digest of ``data`` in hexadecimal (FIPS 180-4, via hashlib)."""
    return hashlib.sha256(data).hexdigest()


# --------------------------------------------------------------------------- choices
def _host_exposure(row: OptionRow) -> float | None:
    return dict(row.exposure_p999_ms).get("host_crash")


def best_durable_alternative(advice: Advice, chosen: str) -> OptionRow | None:
    """The best-ranked option other than ``chosen`` whose host-crash exposure is zero."""
    for row in advice.options:  # in rank order
        if row.name != chosen and _host_exposure(row) == 0.0:
            return row
    return None


# --------------------------------------------------------------------------- wording
def _ms(v: float | None) -> str:
    if v is None:
        return "-"
    if math.isinf(v):
        return "unbounded"
    return format_value(v, "ms")


def _c(v: float | None) -> str:
    return "-" if v is None else format_value(v, "commits")


def _share(v: float) -> str:
    return f"{100 * v:.3g} %"


def _value(v: float | None, currency: str | None) -> str:
    return "-" if v is None else format_value(v, "value", currency)


def _decision(case: Case, sr: StrategyResult, row: OptionRow, n_options: int,
              alt: OptionRow | None) -> Section:
    v = row.judgement
    text = (f"The decision: whether to adopt the commit strategy '{sr.name}' ({sr.kind}: "
            f"{sr.settings}) for '{case.title}', accepting the response times and the exposure "
            "to loss of acknowledged commits set out below.")
    verdict = (f"Under the policies in force it is {VERDICT_WORDS[v.verdict]} and ranks "
               f"{row.rank} of {n_options} ({row.explanation}).")
    if v.verdict == "not_allowed":
        verdict += (" The policies do not allow it: signing records a decision against those "
                    "rules, which only the recovery-policy owner can make, if at all.")
    elif v.verdict == "needs_signoff":
        verdict += " The policies require the sign-off of a named person for it."
    if alt is None:
        alt_text = ("No other option of the case has zero exposure to a host crash; there is "
                    "no durable alternative to compare with.")
    else:
        alt_text = (f"The best durable alternative (the best-ranked option with zero exposure "
                    f"to a host crash) is '{alt.name}' ({alt.kind}: {alt.settings}), "
                    f"{VERDICT_WORDS[alt.verdict]}, ranked {alt.rank}.")
    fields = Table(("role", "name", "decision (approve / refuse)", "date", "signature"),
                   tuple((role, "", "", "", "") for role in ROLES))
    return Section("What is decided, and by whom",
                   (Paragraph(text), Paragraph(verdict), Paragraph(alt_text), fields))


def _inputs(case: Case, case_file: str, case_sha256: str, policies: tuple[PolicyFile, ...],
            tool_version: str, seed: int | None, verification: Verification) -> Section:
    summary = summarise(case)
    rows = [("case file", case_file), ("case file SHA-256", case_sha256),
            ("case title", case.title)]
    for p in policies:
        rows.append((f"policy '{p.name}'", p.source))
        rows.append((f"policy '{p.name}' SHA-256", p.sha256))
    rows += [("commitadvisor version", tool_version),
             ("seed", "-" if seed is None else str(seed)
              + ("" if verification.status == "checked" else " (the simulator was not run)"))]
    rec = case.recovery
    rows.append(("workload", summary.workload))
    for f in FAILURE_KINDS:
        fk = getattr(rec, f)
        rows.append((f"tolerance: {FAILURE_WORDS[f]}",
                     f"expected {fk.per_year:g} a year; loss window {fk.loss_window_s:g} s"))
    rows.append(("durable copies required at acknowledgement", str(rec.copies_at_ack)))
    if rec.value_per_commit is not None:
        rows.append(("value of one commit", _value(rec.value_per_commit, rec.currency)))
    for i, tier in enumerate(summary.stack):
        rows.append((f"tier {i + 1} above the database", tier))
    rows.append(("goal: commit p99", _ms(case.goals.commit_p99_ms)))
    if case.goals.top_tier_p99_ms is not None:
        rows.append(("goal: top-tier p99", _ms(case.goals.top_tier_p99_ms)))
    shares = regime_time_shares(case)
    rows.append(("regimes", "; ".join(f"{name} {_share(share)} of the time"
                                      for name, share in shares.items())))
    for name, dev in case.devices.items():
        durable = "counts as durable" if dev.counts_as_durable else "does NOT count as durable"
        rows.append((f"log device {name}", f"write cache {dev.cache}; {durable}"
                     + (f"; {dev.description}" if dev.description else "")))
    return Section("The case and the inputs", (Table(("item", "value"), tuple(rows)),))


_FIG_HEAD = ("regime", "share of time", "commits/s", "commit mean", "p50", "p99", "p99.9",
             "host crash: exposure p99.9", "at risk: mean", "at risk: most")


def _most(e: Exposure) -> str:
    if e.unbounded:
        return "unbounded"
    if not e.can_lose:
        return "0"
    if e.at_risk_bound is not None and (e.at_risk_p999 is None
                                        or e.at_risk_bound <= e.at_risk_p999 + 1e-9):
        return f"{_c(e.at_risk_bound)} (buffer bound)"
    if e.at_risk_p999 is not None:
        return f"{_c(e.at_risk_p999)} (p99.9)"
    return "-"


def _figure_row(rr: RegimeResult) -> tuple[str, ...]:
    share = _share(rr.time_share) if rr.regime != "blended" else "100 %"
    if rr.saturated:
        sat = rr.saturation
        return (rr.regime, share, f"saturates at {format_value(sat.saturating_rate_per_s, '')}",
                "SATURATED", "-", "-", "-", "-", "-", "-")
    e = rr.exposure("host_crash")
    window = "unbounded" if e.unbounded else _ms(e.window_p999_ms)
    at_risk = "unbounded" if e.unbounded else _c(e.at_risk_mean)
    return (rr.regime, share, format_value(rr.throughput_per_s, ""), _ms(rr.ack_mean_ms),
            _ms(rr.ack_p50_ms), _ms(rr.ack_p99_ms), _ms(rr.ack_p999_ms), window, at_risk,
            _most(e))


def _figures(sr: StrategyResult, row: OptionRow, label: str) -> list[Block]:
    blocks: list[Block] = [Paragraph(f"{label}: '{sr.name}' ({sr.kind}: {sr.settings}), "
                                     f"{VERDICT_WORDS[row.verdict]}.")]
    blocks.append(Table(_FIG_HEAD, tuple(_figure_row(rr) for rr in (*sr.regimes, sr.blended))))
    if row.top_tier_p99_ms:
        blocks.append(Table(("regime", "top-tier p99"),
                            tuple((reg, _ms(v)) for reg, v in row.top_tier_p99_ms)))
    return blocks


def _per_year(n: float) -> str:
    return f"{n:g} such failure{'' if n == 1 else 's'} a year"


def _exposure_words(case: Case, sr: StrategyResult) -> list[str]:
    """One sentence per failure kind, with its numbers, for the chosen strategy."""
    out = []
    cur = case.recovery.currency
    blended = {e.failure: e for e in sr.blended.exposures}
    for f in FAILURE_KINDS:
        words = FAILURE_WORDS[f]
        found = loss_regime(sr, f)
        if found is None:
            basis = next((e.basis for rr in sr.regimes for e in rr.exposures
                          if e.failure == f and e.basis), "")
            saturated = [rr.regime for rr in sr.regimes if rr.saturated]
            text = f"{words[0].upper() + words[1:]}: no acknowledged commit is lost"
            text += f" ({basis})" if basis else ""
            if saturated:
                text += (f"; in {', '.join(saturated)} the strategy is saturated and no "
                         "figure is given")
            out.append(text + ".")
            continue
        rr, e = found
        if e.unbounded:
            out.append(f"{words[0].upper() + words[1:]} during {rr.regime}: the loss is not "
                       f"bounded by the log: {e.basis}. The case expects "
                       f"{_per_year(getattr(case.recovery, f).per_year)}.")
            continue
        text = (f"{words[0].upper() + words[1:]} during {rr.regime} loses the commits "
                f"acknowledged in the last {_ms(e.window_p999_ms)} (p99.9 of the exposure "
                f"window; mean {_ms(e.window_mean_ms)}): {_c(e.at_risk_mean)} on average")
        if e.at_risk_p999 is not None:
            text += f", up to {_c(e.at_risk_p999)} in 999 of 1,000 such failures"
        if e.at_risk_bound is not None:
            text += f", never more than {_c(e.at_risk_bound)} (the log buffer's bound)"
        y = blended.get(f)
        per_year = getattr(case.recovery, f).per_year
        if y is not None and y.expected_lost_per_year is not None:
            text += (f". At {_per_year(per_year)}: about "
                     f"{_c(y.expected_lost_per_year)} a year")
            if y.value_lost_per_year is not None:
                text += f", worth {_value(y.value_lost_per_year, cur)}"
        out.append(text + ".")
    return out


def _exposure_table(sr: StrategyResult, currency: str | None) -> Table:
    rows = []
    for rr in sr.regimes:
        for e in rr.exposures:
            if rr.saturated:
                rows.append((rr.regime, FAILURE_WORDS[e.failure], "saturated", "-", "-", "-"))
                continue
            if e.unbounded:
                rows.append((rr.regime, FAILURE_WORDS[e.failure], "unbounded", "unbounded",
                             "unbounded", "-"))
                continue
            rows.append((rr.regime, FAILURE_WORDS[e.failure],
                         f"{_ms(e.window_mean_ms)} / {_ms(e.window_p999_ms)}",
                         _c(e.at_risk_mean), _most(e), "-"))
    for e in sr.blended.exposures:
        if e.expected_lost_per_year is not None:
            value = _value(e.value_lost_per_year, currency) if e.value_lost_per_year else ""
            rows.append(("the whole year", FAILURE_WORDS[e.failure], "-", "-", "-",
                         _c(e.expected_lost_per_year) + (f" ({value})" if value else "")))
    return Table(("regime", "failure", "exposure window mean / p99.9", "lost: mean",
                  "lost: most", "expected lost per year"), tuple(rows))


def _rules(advice: Advice, row: OptionRow) -> Section:
    v = row.judgement
    status = {"met": "met", "broken": "BROKEN", "caution": "caution",
              "not_applicable": "not judged"}
    rows = tuple((o.policy, o.rule, o.severity.replace("_", " "), status.get(o.status, o.status),
                  o.message) for o in v.outcomes)
    blocks: list[Block] = [
        Paragraph(f"Verdict: {VERDICT_WORDS[v.verdict]}"
                  + (f", decided by {', '.join(v.decided_by)}" if v.decided_by else "")
                  + (f" (deciding regimes: {', '.join(v.deciding_regimes)})"
                     if v.deciding_regimes else "") + ". Policies in force: "
                  + "; ".join(f"'{name}' ({src})" for name, src in advice.policies) + "."),
        Table(("policy", "rule", "severity", "outcome", "message"), rows),
    ]
    if advice.switched_off:
        blocks.append(Bullets(tuple(f"rule '{rid}' switched off by '{by}'"
                                    for rid, by in advice.switched_off)))
    return Section("Rules met and broken", tuple(blocks))


def _verification(v: Verification) -> Section:
    if v.status == "skipped":
        return Section("Check by simulation", (Paragraph(
            "Skipped (--no-verify): the figures above were NOT checked against the "
            "discrete-event simulator. Run the sign-off without --no-verify before relying "
            "on them."),), complete=False)

    def row(r: VerifyRow) -> tuple[str, ...]:
        diff = "-" if r.relative_difference is None else f"{100 * r.relative_difference:+.3g} %"
        return (r.strategy, r.regime, r.figure, _num(r.model), _num(r.simulated), diff,
                r.allowed, "FLAGGED" if r.flagged else "ok", r.note)

    head = ("strategy", "regime", "figure", "model", "simulated", "difference",
            "allowed difference", "result", "note")
    flagged = [r for r in v.rows if r.flagged]
    counts = (f"{len(flagged)} of {len(v.rows)} figures FLAGGED (outside the allowed "
              "difference)" if flagged else
              f"all {len(v.rows)} figures within the allowed difference")
    lead = f"Checked against the discrete-event simulator with seed {v.seed}: {counts}."
    if v.summary:
        lead += f" The check's own summary: {v.summary}."
    blocks: list[Block] = [Paragraph(lead)]
    if flagged:
        blocks += [Paragraph("The flagged figures (read them before signing: the model and "
                             "the simulator disagree there):"),
                   Table(head, tuple(row(r) for r in flagged)),
                   Paragraph("Every figure checked:")]
    blocks.append(Table(head, tuple(row(r) for r in v.rows)))
    return Section("Check by simulation", tuple(blocks))


def _num(v: float | None) -> str:
    if v is None:
        return "-"
    if math.isinf(v):
        return "unbounded"
    return format_value(v, "")


def _limits(ev: Evaluation, advice: Advice, strategies: tuple[StrategyResult, ...]) -> Section:
    seen: set[tuple[str, str]] = set()
    notes: list[str] = []
    for sr in strategies:
        for rr in (*sr.regimes, sr.blended):
            for n in (*rr.notes, *sr.notes):
                if (sr.name, n) not in seen:
                    seen.add((sr.name, n))
                    notes.append(f"{sr.name} ({rr.regime}): {n}")
    notes.extend(n for n in (*ev.notes, *advice.notes) if n not in notes)
    blocks: list[Block] = [Paragraph("What the model does not cover:"), Bullets(MODEL_LIMITS)]
    if notes:
        blocks += [Paragraph("Approximations and notes the evaluator gives for these options:"),
                   Bullets(tuple(notes))]
    return Section("Assumptions and the model's limits", tuple(blocks))


# --------------------------------------------------------------------------- the document
def build_signoff(case: Case, *, case_file: str, case_sha256: str,
                  policies: tuple[PolicyFile, ...], tool_version: str, seed: int | None,
                  strategy: str, evaluation: Evaluation, advice: Advice,
                  verification: Verification) -> Signoff:
    """The sign-off document's content for ``strategy`` (see the module docstring).

    Raises :class:`UnknownStrategy` (listing the case's strategy names) for an unknown name.
    """
    names = tuple(s.name for s in evaluation.strategies)
    if strategy not in names:
        raise UnknownStrategy(strategy, names)
    sr = evaluation.strategy(strategy)
    row = next(o for o in advice.options if o.name == strategy)
    alt = best_durable_alternative(advice, strategy)
    cur = case.recovery.currency
    figures: list[Block] = _figures(sr, row, "Chosen")
    shown = [sr]
    if alt is not None:
        alt_sr = evaluation.strategy(alt.name)
        figures += _figures(alt_sr, alt, "Best durable alternative")
        shown.append(alt_sr)
    else:
        figures.append(Paragraph("There is no durable alternative (no other option has zero "
                                 "exposure to a host crash)."))
    figures.append(Paragraph(
        "Times in ms. Exposure: the time from a commit's acknowledgement until it survives "
        "that failure; 'at risk': the acknowledged commits a failure at a random instant "
        "would take (mean; most: the log buffer's bound where it binds, else the p99.9)."))
    exposure: list[Block] = [Paragraph(t) for t in _exposure_words(case, sr)]
    exposure.append(_exposure_table(sr, cur))
    if alt is not None:
        alt_sr = evaluation.strategy(alt.name)
        alt_words = _exposure_words(case, alt_sr)
        exposure.append(Paragraph(f"For comparison, '{alt.name}': " + " ".join(alt_words)))
    cautions = tuple(c.text for c in row.cautions)
    sections = (
        _decision(case, sr, row, len(advice.options), alt),
        _inputs(case, case_file, case_sha256, policies, tool_version, seed, verification),
        Section("Figures per regime", tuple(figures)),
        Section("Exposure and loss, in plain words", tuple(exposure)),
        _rules(advice, row),
        Section("Cautions", (Bullets(cautions),) if cautions else (Paragraph(
            "The advice layer gives no caution for this strategy."),)),
        _verification(verification),
        _limits(evaluation, advice, tuple(shown)),
        Section("Deferral", (Paragraph(DEFERRAL),)),
    )
    return Signoff(
        title=f"Risk sign-off: commit strategy '{strategy}' for {case.title}",
        strategy=strategy, alternative=alt.name if alt else None, case_sha256=case_sha256,
        policy_sha256=tuple((p.source, p.sha256) for p in policies),
        tool_version=tool_version, seed=seed, sections=sections, cautions=cautions)
