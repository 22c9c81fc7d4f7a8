"""Plain data-loss cautions: what each strategy can lose, in words and numbers.

Every strategy that can lose acknowledged commits says so: for each kind of failure, the
regime that decides (the one with the largest count at risk), the most that can be lost
there (the log buffer's hard bound where there is one, else the p99.9 of the count at risk),
the average, and the expected loss per year with its value when the case gives one. Devices
with a volatile write cache are named, and a single copy facing the loss of its device gets
a caution of its own. The case's own words (regime and device descriptions) are used where
it has them.

Pure: no I/O. Counts are commits; times ms unless a name says otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from commitadvisor.case import Case, DualDevice, strategy_name
from commitadvisor.policy import format_value
from commitadvisor.results import Exposure, RegimeResult, StrategyResult

__all__ = ["Caution", "cautions_for", "loss_regime"]

_IF = {
    "process_crash": "If the database process crashes",
    "host_crash": "If the host loses power or crashes",
}


@dataclass(frozen=True)
class Caution:
    """One caution: its kind, the failure and regime it is about, its words and figures."""

    topic: str  # loss, device_loss, volatile_cache, stall, saturation
    failure: str | None
    regime: str | None
    text: str
    figures: tuple[tuple[str, float | None], ...] = ()


def _strategy(case: Case, name: str) -> Any:
    return next(s for s in case.strategies if strategy_name(s) == name)


def _devices(case: Case, name: str) -> tuple[str, ...]:
    s = _strategy(case, name)
    return tuple(s.devices) if isinstance(s, DualDevice) else (s.device,)


def _regime_words(case: Case, regime: str) -> str:
    r = case.regime(regime)
    if r is not None and r.description:
        return f"{regime} ({r.description})"
    return regime


def _count(x: float | None) -> str:
    return format_value(x, "commits")


def _acked(x: float | None) -> str:
    """A count of acknowledged commits in words: '1,349 acknowledged commits'."""
    return format_value(x, "commits").replace(" commits", " acknowledged commits")


def _times(n: float) -> str:
    return f"{n:g} such failure{'' if n == 1 else 's'} a year"


def _risk_key(e: Exposure) -> tuple[float, ...]:
    if e.unbounded:
        return (math.inf,)
    # the buffer's bound is the same in every regime; the p99.9 and the mean tell them apart
    return tuple(float(v) if v is not None else 0.0
                 for v in (e.at_risk_p999, e.at_risk_mean, e.window_p999_ms))


def loss_regime(sr: StrategyResult, failure: str) -> tuple[RegimeResult, Exposure] | None:
    """The regime where ``failure`` can take the most acknowledged commits, by the p99.9 of
    the count at risk, then its mean (None when no regime can lose any)."""
    best: tuple[tuple[float, ...], RegimeResult, Exposure] | None = None
    for rr in sr.regimes:
        e = next((x for x in rr.exposures if x.failure == failure), None)
        if e is None or not e.can_lose:
            continue
        k = _risk_key(e)
        if best is None or k > best[0]:
            best = (k, rr, e)
    return None if best is None else (best[1], best[2])


def _yearly(sr: StrategyResult, failure: str) -> Exposure | None:
    return next((x for x in sr.blended.exposures if x.failure == failure), None)


def _crash_caution(case: Case, sr: StrategyResult, failure: str) -> Caution | None:
    found = loss_regime(sr, failure)
    if found is None:
        return None
    rr, e = found
    where = _regime_words(case, rr.regime)
    if e.unbounded:
        text = (f"{_IF[failure]} during {where}, acknowledged commits can be lost and the "
                f"model cannot bound how many ({e.basis or 'no bound'}).")
        return Caution("loss", failure, rr.regime, text, ())
    if e.at_risk_bound is not None and (e.at_risk_p999 is None
                                        or e.at_risk_bound <= e.at_risk_p999 + 1e-9):
        most = f"up to {_acked(e.at_risk_bound)} can be lost (the log buffer's bound)"
    elif e.at_risk_p999 is not None:
        most = f"up to {_acked(e.at_risk_p999)} can be lost in 999 of 1,000 such failures"
        if e.at_risk_bound is not None:
            most += f", and never more than {_count(e.at_risk_bound)} (the log buffer's bound)"
    else:
        most = "acknowledged commits can be lost (the count is not known for this regime)"
    text = f"{_IF[failure]} during {where}, {most}"
    if e.at_risk_mean is not None:
        text += f"; on average {_count(e.at_risk_mean)}"
    if e.window_p999_ms is not None:
        text += (f"; a commit stays exposed for up to {format_value(e.window_p999_ms, 'ms')} "
                 "after its acknowledgement (p99.9)")
    y = _yearly(sr, failure)
    per_year = getattr(case.recovery, failure).per_year
    figures: list[tuple[str, float | None]] = [
        ("lost_commits_bound", e.at_risk_bound), ("lost_commits_p999", e.at_risk_p999),
        ("lost_commits_mean", e.at_risk_mean), ("exposure_window_p999_ms", e.window_p999_ms),
    ]
    if y is not None and y.expected_lost_per_year is not None:
        text += (f". Expected loss per year: {_count(y.expected_lost_per_year)} "
                 f"(at {_times(per_year)}, over all regimes")
        if y.value_lost_per_year is not None:
            text += f"; {format_value(y.value_lost_per_year, 'value', case.recovery.currency)}"
        text += ")"
        figures += [("expected_lost_commits_per_year", y.expected_lost_per_year),
                    ("expected_loss_value_per_year", y.value_lost_per_year)]
    return Caution("loss", failure, rr.regime, text + ".", tuple(figures))


def _device_loss_caution(case: Case, sr: StrategyResult) -> Caution | None:
    devices = _devices(case, sr.name)
    per_year = case.recovery.device_loss.per_year
    required = case.recovery.copies_at_ack
    judged = ("the case asks for 2 durable copies at acknowledgement, so the rules judge it"
              if required >= 2 else
              f"the case asks for {required} durable copy at acknowledgement, so this is a "
              "caution, not a verdict")
    unbounded = [rr for rr in sr.regimes
                 if any(x.failure == "device_loss" and x.unbounded for x in rr.exposures)]
    if unbounded:
        durable = [d for d in devices if case.devices[d].counts_as_durable] or list(devices)
        text = (f"Only one copy of the log exists when a commit is acknowledged: if the log "
                f"device {' or '.join(durable)} is lost, every acknowledged commit not yet "
                "copied elsewhere (a backup, a replica) is lost, and the log alone cannot "
                f"bound how many. The case expects {per_year:g} device losses a year; {judged}.")
        return Caution("device_loss", "device_loss", unbounded[0].regime, text,
                       (("device_losses_per_year", per_year),))
    found = loss_regime(sr, "device_loss")
    if found is None:
        return None
    rr, e = found
    text = (f"If the device that acknowledged a commit is lost during "
            f"{_regime_words(case, rr.regime)}, the commits the other device had not yet "
            f"written are lost: up to {_count(e.at_risk_p999)} in 999 of 1,000 such losses"
            f", {_count(e.at_risk_mean)} on average; the second copy lags by up to "
            f"{format_value(e.window_p999_ms, 'ms')} (p99.9)")
    y = _yearly(sr, "device_loss")
    if y is not None and y.expected_lost_per_year is not None:
        text += f". Expected loss per year: {_count(y.expected_lost_per_year)}"
        if y.value_lost_per_year is not None:
            text += f" ({format_value(y.value_lost_per_year, 'value', case.recovery.currency)})"
    text += f"; {judged}."
    return Caution("device_loss", "device_loss", rr.regime, text,
                   (("lost_commits_p999", e.at_risk_p999), ("lost_commits_mean", e.at_risk_mean),
                    ("exposure_window_p999_ms", e.window_p999_ms)))


def _volatile_cautions(case: Case, sr: StrategyResult) -> list[Caution]:
    out = []
    for d in _devices(case, sr.name):
        dev = case.devices[d]
        if dev.cache != "volatile":
            continue
        if dev.flushes_honoured:
            text = (f"Log device {d} has a volatile write cache; it counts as durable only "
                    f"because the case declares that it honours flushes (evidence given: "
                    f"{dev.flushes_honoured_evidence}). Power-fault tests have found devices "
                    "that lose data they reported as flushed (Zheng et al., FAST 2013); if "
                    "that declaration is wrong, a power loss loses acknowledged commits.")
        else:
            text = (f"Log device {d} has a volatile write cache that the case does not "
                    "declare as honouring flushes: its completed flushes do not count as "
                    "durable, and a power loss can lose commits it reported as flushed.")
        out.append(Caution("volatile_cache", "host_crash", None, text))
    return out


def _stack_cautions(stack: Any) -> list[Caution]:
    out = []
    if stack is None:
        return out
    for reg in stack.regimes:
        for note in getattr(reg, "cautions", ()):
            out.append(Caution("stall", None, reg.regime, note))
    return out


def cautions_for(case: Case, sr: StrategyResult, stack: Any = None) -> tuple[Caution, ...]:
    """Every caution for one strategy: losses per failure kind with the deciding regime,
    the device-loss caution, volatile caches, saturated regimes and the stack's notes."""
    out: list[Caution] = []
    for failure in ("process_crash", "host_crash"):
        c = _crash_caution(case, sr, failure)
        if c is not None:
            out.append(c)
    c = _device_loss_caution(case, sr)
    if c is not None:
        out.append(c)
    out.extend(_volatile_cautions(case, sr))
    for rr in sr.regimes:
        if rr.saturation is not None:
            out.append(Caution("saturation", None, rr.regime,
                               f"In {_regime_words(case, rr.regime)} it cannot keep up: "
                               f"{rr.saturation.message}"))
    out.extend(_stack_cautions(stack))
    return tuple(out)
