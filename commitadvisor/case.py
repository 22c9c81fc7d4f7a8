"""The case file: pydantic models for every section, loading from TOML or JSON, clear errors.

Units are in the field names. Unknown keys are errors (a typo must never fall back to a
default silently); cross-field rules are checked after the fields themselves. The models are
frozen, so the rest of the program treats them as plain value objects.
"""

from __future__ import annotations

import difflib
import json
import math
import tomllib
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, PrivateAttr, ValidationError, model_validator

from commitadvisor.errors import InputError, InputProblem

__all__ = [
    "Case",
    "load_case",
    "parse_case",
    "Profile",
    "Device",
    "Regime",
    "Strategy",
    "NORMAL",
    "regime_time_shares",
    "HostLoad",
    "host_load",
]

NORMAL = "normal"
SCHEMA_VERSION = 1
MAX_CYCLE_S = 7 * 24 * 3600


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=False)


PositiveFloat = Annotated[float, Field(gt=0, allow_inf_nan=False)]
NonNegFloat = Annotated[float, Field(ge=0, allow_inf_nan=False)]
Share = Annotated[float, Field(ge=0, le=1, allow_inf_nan=False)]


# --------------------------------------------------------------------------- latency profiles
class LognormalProfile(_Model):
    """Lognormal flush time given by its median and either its 99th percentile or its sigma."""

    kind: Literal["lognormal"]
    p50_ms: PositiveFloat
    p99_ms: PositiveFloat | None = None
    sigma: PositiveFloat | None = None

    @model_validator(mode="after")
    def _one_shape(self) -> LognormalProfile:
        if (self.p99_ms is None) == (self.sigma is None):
            raise ValueError("give exactly one of p99_ms or sigma beside p50_ms")
        if self.p99_ms is not None and self.p99_ms <= self.p50_ms:
            raise ValueError(
                f"p99_ms ({self.p99_ms}) must be greater than p50_ms ({self.p50_ms})"
            )
        return self


class FixedProfile(_Model):
    """Every flush takes exactly ``ms``."""

    kind: Literal["fixed"]
    ms: PositiveFloat


class ExponentialProfile(_Model):
    kind: Literal["exponential"]
    mean_ms: PositiveFloat


class GammaProfile(_Model):
    kind: Literal["gamma"]
    shape: PositiveFloat
    scale_ms: PositiveFloat


class WeibullProfile(_Model):
    kind: Literal["weibull"]
    shape: PositiveFloat
    scale_ms: PositiveFloat


class TableProfile(_Model):
    """An empirical quantile table: ``quantiles`` (0..1, increasing) and their ``ms`` values."""

    kind: Literal["table"]
    quantiles: tuple[Share, ...] = Field(min_length=2)
    ms: tuple[NonNegFloat, ...] = Field(min_length=2)

    @model_validator(mode="after")
    def _ordered(self) -> TableProfile:
        if len(self.quantiles) != len(self.ms):
            raise ValueError(
                f"quantiles has {len(self.quantiles)} entries but ms has {len(self.ms)}"
            )
        if any(b <= a for a, b in zip(self.quantiles, self.quantiles[1:], strict=False)):
            raise ValueError("quantiles must be strictly increasing")
        if any(b < a for a, b in zip(self.ms, self.ms[1:], strict=False)):
            raise ValueError("ms must not decrease as the quantile grows "
                             "(percentiles out of order)")
        if self.ms[-1] <= 0:
            raise ValueError("the largest ms value must be above zero")
        return self


class SamplesProfile(_Model):
    """Measured latencies in a CSV file beside the case file, one per line, in ``unit``."""

    kind: Literal["samples"]
    file: str = Field(min_length=1)
    unit: Literal["us", "ms", "s"]
    _values_ms: tuple[float, ...] = PrivateAttr(default=())

    @property
    def values_ms(self) -> tuple[float, ...]:
        return self._values_ms


class MixturePart(_Model):
    share: Annotated[float, Field(gt=0, le=1, allow_inf_nan=False)]
    profile: Profile


class MixtureProfile(_Model):
    """Parts with shares summing to 1: each flush takes its time from one part."""

    kind: Literal["mixture"]
    parts: tuple[MixturePart, ...] = Field(min_length=2)

    @model_validator(mode="after")
    def _shares(self) -> MixtureProfile:
        total = sum(p.share for p in self.parts)
        if abs(total - 1.0) > 1e-6:
            raise ValueError(f"mixture shares must sum to 1, they sum to {total:.6g}")
        return self


Profile = Annotated[
    Union[  # noqa: UP007 - a discriminated union reads better in the schema this way
        LognormalProfile,
        FixedProfile,
        ExponentialProfile,
        GammaProfile,
        WeibullProfile,
        TableProfile,
        SamplesProfile,
        MixtureProfile,
    ],
    Field(discriminator="kind"),
]
MixturePart.model_rebuild()
MixtureProfile.model_rebuild()


# --------------------------------------------------------------------------- sections
class Workload(_Model):
    kind: Literal["open", "closed"]
    commit_rate_per_s: PositiveFloat | None = None
    sessions: Annotated[int, Field(ge=1)] | None = None
    think_time_ms: NonNegFloat | None = None
    think_time_distribution: Literal["exponential", "fixed"] = "exponential"
    log_bytes_per_commit: Annotated[int, Field(ge=1)]
    cpus: Annotated[int, Field(ge=1)] | None = None
    cpu_ms_per_commit: NonNegFloat = 0.0
    cpu_us_per_flush: NonNegFloat = 0.0
    other_cpu_utilisation: Annotated[float, Field(ge=0, lt=1, allow_inf_nan=False)] = 0.0
    handover_us: NonNegFloat = 0.0
    wake_us_per_session: NonNegFloat = 0.0

    @model_validator(mode="after")
    def _kind_fields(self) -> Workload:
        if self.kind == "closed":
            if self.sessions is None:
                raise ValueError("a closed workload needs sessions (the number of sessions)")
            if self.think_time_ms is None:
                raise ValueError("a closed workload needs think_time_ms")
            if self.commit_rate_per_s is not None:
                raise ValueError(
                    "commit_rate_per_s belongs to an open workload; a closed one's rate "
                    "follows from sessions and think_time_ms"
                )
        else:
            if self.sessions is not None or self.think_time_ms is not None:
                raise ValueError(
                    "sessions and think_time_ms belong to a closed workload (kind = \"closed\")"
                )
        return self


class FailureKind(_Model):
    """How often a kind of failure is expected and the loss window the organisation tolerates."""

    per_year: NonNegFloat
    loss_window_s: NonNegFloat = 0.0


class Recovery(_Model):
    process_crash: FailureKind
    host_crash: FailureKind
    device_loss: FailureKind
    value_per_commit: NonNegFloat | None = None
    currency: str | None = None
    # 0: acknowledging before any durable copy is acceptable within the loss windows
    copies_at_ack: Annotated[int, Field(ge=0, le=2)] = 1

    @model_validator(mode="after")
    def _currency(self) -> Recovery:
        if self.value_per_commit is not None and not self.currency:
            raise ValueError("value_per_commit needs a currency (for example currency = \"EUR\")")
        return self


class Goals(_Model):
    commit_p99_ms: PositiveFloat
    top_tier_p99_ms: PositiveFloat | None = None


class Stalls(_Model):
    """Time-based device stalls: how often one starts and how long it lasts."""

    per_s: PositiveFloat
    duration: Profile


class Device(_Model):
    cache: Literal["none", "power_loss_protected", "volatile"]
    flushes_honoured: bool | None = None
    flushes_honoured_evidence: str | None = None
    bandwidth_mb_per_s: PositiveFloat
    bandwidth_mb_per_s_during: dict[str, PositiveFloat] = Field(default_factory=dict)
    profile_block_bytes: Annotated[int, Field(ge=512)]
    profile_measures: Literal["device_flush", "commit_latency"] = "device_flush"
    latency: dict[str, Profile]
    stalls: dict[str, Stalls] = Field(default_factory=dict)
    description: str = ""

    @model_validator(mode="after")
    def _normal_and_evidence(self) -> Device:
        if NORMAL not in self.latency:
            raise ValueError(f"latency needs a '{NORMAL}' profile (latency.{NORMAL} = {{ ... }})")
        if self.cache != "volatile" and self.flushes_honoured is not None:
            raise ValueError("flushes_honoured applies only to cache = \"volatile\"")
        if self.flushes_honoured and not self.flushes_honoured_evidence:
            raise ValueError(
                "flushes_honoured = true needs flushes_honoured_evidence: say how it was "
                "established (a power-fault test, the vendor-neutral test report, ...)"
            )
        return self

    @property
    def counts_as_durable(self) -> bool:
        """A completed flush counts as durable: no volatile cache, or one declared honoured."""
        return self.cache != "volatile" or bool(self.flushes_honoured)

    def bandwidth_bytes_per_s(self, regime: str) -> float:
        mb = self.bandwidth_mb_per_s_during.get(regime, self.bandwidth_mb_per_s)
        return mb * 1e6


class Regime(_Model):
    """An interference period repeating every ``period_s``, lasting ``duration_s``."""

    name: str = Field(min_length=1)
    period_s: PositiveFloat
    duration_s: PositiveFloat
    offset_s: NonNegFloat = 0.0
    commit_rate_factor: PositiveFloat = 1.0
    other_cpu_utilisation: Annotated[float, Field(ge=0, lt=1, allow_inf_nan=False)] | None = None
    description: str = ""

    @model_validator(mode="after")
    def _fits(self) -> Regime:
        if self.name == NORMAL:
            raise ValueError(f"'{NORMAL}' is implied; give the regime another name")
        if self.duration_s >= self.period_s:
            raise ValueError(
                f"duration_s ({self.duration_s:g}) must be shorter than period_s "
                f"({self.period_s:g})"
            )
        if self.offset_s >= self.period_s:
            raise ValueError(
                f"offset_s ({self.offset_s:g}) must be less than period_s ({self.period_s:g})"
            )
        return self


class _StrategyBase(_Model):
    name: str | None = None
    description: str = ""


class Synchronous(_StrategyBase):
    """Each commit waits for the log flush that holds it."""

    kind: Literal["synchronous"]
    device: str
    grouping: Literal["natural", "none"] = "natural"


class Batched(_StrategyBase):
    """The writer holds each flush to gather commits: a window or a target, whichever first."""

    kind: Literal["batched"]
    device: str
    gather_window_ms: PositiveFloat
    gather_target_commits: Annotated[int, Field(ge=2)]


class Deferred(_StrategyBase):
    """Commits are acknowledged once in the log buffer; a writer flushes every interval."""

    kind: Literal["deferred"]
    device: str
    flush_every_ms: PositiveFloat
    buffer_bytes: Annotated[int, Field(ge=4096)]


class DualDevice(_StrategyBase):
    """The log is written to two devices; the commit is acknowledged after the first or both."""

    kind: Literal["dual_device"]
    devices: tuple[str, str]
    ack_after: Literal["first", "both"] = "first"
    shared_cause_share: Share = 0.1

    @model_validator(mode="after")
    def _two(self) -> DualDevice:
        if self.devices[0] == self.devices[1]:
            raise ValueError(f"devices names '{self.devices[0]}' twice; give two different devices")
        return self


Strategy = Annotated[
    Union[Synchronous, Batched, Deferred, DualDevice],  # noqa: UP007
    Field(discriminator="kind"),
]


class Tier(_Model):
    """One tier above the database (top tier first in the case file)."""

    name: str = Field(min_length=1)
    requests_per_s: PositiveFloat | None = None
    threads: Annotated[int, Field(ge=1)]
    service: Profile
    calls_per_request: Annotated[float, Field(ge=0, allow_inf_nan=False)]
    commit_share: Share | None = None
    other_call: Profile | None = None


class Benchmark(_Model):
    """A benchmark's reported figures, for review."""

    title: str = ""
    reported_commits_per_s: PositiveFloat
    reported_mean_latency_ms: PositiveFloat
    reported_p99_ms: PositiveFloat | None = None
    sessions: Annotated[int, Field(ge=1)]
    commit_mode: Literal["deferred", "synchronous", "batched"]
    flush_every_ms: PositiveFloat | None = None
    buffer_bytes: Annotated[int, Field(ge=4096)] | None = None
    device: str
    duration_s: PositiveFloat | None = None

    @model_validator(mode="after")
    def _deferred_settings(self) -> Benchmark:
        if self.commit_mode == "deferred" and self.flush_every_ms is None:
            raise ValueError("a deferred-commit benchmark needs flush_every_ms")
        return self


class Expected(_Model):
    """Demo cases only: what a reader should get from ``advise``."""

    verdicts: dict[str, Literal["allowed", "needs_signoff", "not_allowed"]] = Field(
        default_factory=dict
    )
    order: tuple[str, ...] = ()


class Case(_Model):
    schema_version: Literal[1]
    title: str = Field(min_length=1)
    description: str = ""
    workload: Workload
    recovery: Recovery
    goals: Goals
    devices: dict[str, Device] = Field(min_length=1)
    regimes: tuple[Regime, ...] = ()
    regime_overlap: Literal["reject", "first_listed_wins"] = "reject"
    strategies: tuple[Strategy, ...] = Field(min_length=1)
    stack: tuple[Tier, ...] = ()
    benchmark: Benchmark | None = None
    expected: Expected | None = None

    # ------------------------------------------------------------------ derived values
    def strategy_names(self) -> tuple[str, ...]:
        return tuple(strategy_name(s) for s in self.strategies)

    def regime_names(self) -> tuple[str, ...]:
        return (NORMAL, *(r.name for r in self.regimes))

    def regime(self, name: str) -> Regime | None:
        return next((r for r in self.regimes if r.name == name), None)

    def commit_rate_per_s(self) -> float | None:
        """The open workload's commit rate, given or derived from the stack."""
        if self.workload.kind == "closed":
            return None
        if self.workload.commit_rate_per_s is not None:
            return self.workload.commit_rate_per_s
        return stack_commit_rate_per_s(self.stack)

    @model_validator(mode="after")
    def _cross_checks(self) -> Case:
        problems: list[str] = []
        names = [r.name for r in self.regimes]
        for n in {n for n in names if names.count(n) > 1}:
            problems.append(f"regimes: the name '{n}' is used twice")
        known_regimes = set(self.regime_names())
        for dev_name, dev in self.devices.items():
            for section in ("latency", "stalls", "bandwidth_mb_per_s_during"):
                for reg in getattr(dev, section):
                    if reg not in known_regimes:
                        problems.append(
                            f"devices.{dev_name}.{section}.{reg}: no regime is named '{reg}'"
                            + _hint(reg, known_regimes)
                        )
        seen: set[str] = set()
        for i, s in enumerate(self.strategies):
            for d in (s.devices if isinstance(s, DualDevice) else (s.device,)):
                if d not in self.devices:
                    problems.append(
                        f"strategies[{i}]: device '{d}' is not defined under [devices]"
                        + _hint(d, self.devices)
                    )
            n = strategy_name(s)
            if n in seen:
                problems.append(f"strategies[{i}].name: '{n}' is used by two strategies")
            seen.add(n)
        problems.extend(self._stack_problems())
        problems.extend(self._benchmark_problems())
        problems.extend(self._expected_problems(seen))
        if not problems:
            try:
                regime_time_shares(self)
            except ValueError as exc:
                problems.append(f"regimes: {exc}")
        if problems:
            raise ValueError("\n".join(problems))
        return self

    def _stack_problems(self) -> list[str]:
        if not self.stack:
            if self.workload.kind == "open" and self.workload.commit_rate_per_s is None:
                return ["workload.commit_rate_per_s: an open workload needs a commit rate "
                        "(or a [[stack]] whose request rate sets it)"]
            if self.goals.top_tier_p99_ms is not None:
                return ["goals.top_tier_p99_ms: there is no [[stack]] for this goal to apply to"]
            return []
        out = []
        if self.workload.kind != "open":
            out.append("stack: a stack sets the commit rate from its request rate, so the "
                       "workload must be kind = \"open\"")
        if self.stack[0].requests_per_s is None:
            out.append("stack[0].requests_per_s: the top tier needs its request rate")
        for i, t in enumerate(self.stack[1:], start=1):
            if t.requests_per_s is not None:
                out.append(f"stack[{i}].requests_per_s: only the top tier takes a request "
                           "rate; lower tiers get theirs from calls_per_request above them")
        bottom = self.stack[-1]
        if bottom.commit_share is None:
            out.append(f"stack[{len(self.stack) - 1}].commit_share: the bottom tier calls the "
                       "database and needs the share of its calls that commit")
        elif bottom.commit_share < 1 and bottom.other_call is None:
            out.append(f"stack[{len(self.stack) - 1}].other_call: give the latency profile of "
                       "the database calls that do not commit")
        for i, t in enumerate(self.stack[:-1]):
            if t.commit_share is not None:
                out.append(f"stack[{i}].commit_share: only the bottom tier calls the database")
        if out:
            return out
        rate = stack_commit_rate_per_s(self.stack)
        given = self.workload.commit_rate_per_s
        if given is not None and abs(given - rate) > 0.01 * rate:
            out.append(f"workload.commit_rate_per_s: {given:g}/s contradicts the stack, whose "
                       f"request rate and calls imply {rate:g} commits/s; give one or make "
                       "them agree")
        if rate <= 0:
            out.append("stack: the stack implies no commits at all (a calls_per_request or "
                       "commit_share of 0)")
        return out

    def _benchmark_problems(self) -> list[str]:
        if self.benchmark is None:
            return []
        if self.benchmark.device not in self.devices:
            return [f"benchmark.device: '{self.benchmark.device}' is not defined under "
                    f"[devices]{_hint(self.benchmark.device, self.devices)}"]
        return []

    def _expected_problems(self, names: set[str]) -> list[str]:
        if self.expected is None:
            return []
        out = []
        for n in (*self.expected.verdicts, *self.expected.order):
            if n not in names:
                out.append(f"expected: no strategy is named '{n}'{_hint(n, names)}")
        return out


def strategy_name(s: Any) -> str:
    """The strategy's own name, or ``kind@device`` when the case gives none."""
    if s.name:
        return s.name
    if isinstance(s, DualDevice):
        return f"dual_device@{s.devices[0]}+{s.devices[1]}"
    return f"{s.kind}@{s.device}"


def stack_commit_rate_per_s(stack: tuple[Tier, ...]) -> float:
    """Commits per second implied by the top tier's request rate and the calls below it."""
    rate = stack[0].requests_per_s or 0.0
    for t in stack:
        rate *= t.calls_per_request
    return rate * (stack[-1].commit_share or 0.0)


def tier_request_rates_per_s(stack: tuple[Tier, ...]) -> tuple[float, ...]:
    """Request rate arriving at each tier, top first."""
    rates = []
    rate = stack[0].requests_per_s or 0.0
    for t in stack:
        rates.append(rate)
        rate *= t.calls_per_request
    return tuple(rates)


# --------------------------------------------------------------------------- host load
@dataclass(frozen=True)
class HostLoad:
    """The host's figures in one regime, as the evaluator and the simulator both use them.

    The other work on the host leaves 1 - u of each CPU, so CPU work takes 1 / (1 - u) as
    long (``cpu_dilation``). The CPU per commit and the writer's CPU per flush apply when
    ``workload.cpus`` is set; the hand-over cost applies always."""

    cpu_dilation: float
    commit_rate_factor: float
    cpu_ms_per_commit: float  # dilated; 0 without a CPU model
    flush_overhead_ms: float  # the writer's CPU per flush (dilated) + the hand-over


def host_load(case: Case, regime: str) -> HostLoad:
    """The host's figures in ``regime`` (see :class:`HostLoad`)."""
    w = case.workload
    reg = case.regime(regime)
    other = w.other_cpu_utilisation
    if reg is not None and reg.other_cpu_utilisation is not None:
        other = reg.other_cpu_utilisation
    dilation = 1.0 / (1.0 - other)
    per_flush_us = w.cpu_us_per_flush * dilation if w.cpus else 0.0
    return HostLoad(
        cpu_dilation=dilation,
        commit_rate_factor=reg.commit_rate_factor if reg is not None else 1.0,
        cpu_ms_per_commit=w.cpu_ms_per_commit * dilation if w.cpus else 0.0,
        flush_overhead_ms=(per_flush_us + w.handover_us) / 1000.0,
    )


# --------------------------------------------------------------------------- regimes in time
def regime_time_shares(case: Case) -> dict[str, float]:
    """Share of time each regime is in force, ``normal`` included (they sum to 1).

    Regimes repeat with their periods; they are laid out over the common cycle (the least
    common multiple of the periods, at most 7 days) and overlaps are rejected, or given to the
    regime listed first when ``regime_overlap = "first_listed_wins"``.
    """
    regimes = case.regimes
    if not regimes:
        return {NORMAL: 1.0}
    periods = []
    for r in regimes:
        frac = Fraction(r.period_s).limit_denominator(1000)
        if abs(float(frac) - r.period_s) > 1e-9 * r.period_s:
            raise ValueError(f"'{r.name}': period_s must be a multiple of 1 ms")
        periods.append(frac)
    cycle = periods[0]
    for p in periods[1:]:
        cycle = _lcm_fraction(cycle, p)
        if cycle > MAX_CYCLE_S:
            raise ValueError("the regimes' periods have no common cycle within 7 days; "
                             "choose periods that divide a day or a week")
    cycle_s = float(cycle)
    taken: list[tuple[float, float]] = []
    shares: dict[str, float] = {}
    for r in regimes:
        mine = [
            (start, start + r.duration_s)
            for k in range(int(round(cycle_s / r.period_s)))
            for start in (r.offset_s + k * r.period_s,)
        ]
        mine = _wrap(mine, cycle_s)
        overlap = _overlap_length(mine, taken)
        if overlap > 1e-9 and case.regime_overlap == "reject":
            other = next(o.name for o in regimes if o is not r and _overlap_length(
                mine, _wrap([(o.offset_s + k * o.period_s, o.offset_s + k * o.period_s
                              + o.duration_s) for k in range(int(round(cycle_s / o.period_s)))],
                            cycle_s)) > 1e-9)
            raise ValueError(
                f"'{r.name}' overlaps '{other}'; shift an offset_s, or set "
                "regime_overlap = \"first_listed_wins\" to give the overlap to the regime "
                "listed first"
            )
        length = sum(b - a for a, b in mine) - overlap
        shares[r.name] = length / cycle_s
        taken = _merge(taken + mine)
    shares = {NORMAL: 1.0 - sum(shares.values()), **shares}
    return shares


def _lcm_fraction(a: Fraction, b: Fraction) -> Fraction:
    num = math.lcm(a.numerator * b.denominator, b.numerator * a.denominator)
    return Fraction(num, a.denominator * b.denominator)


def _wrap(intervals: list[tuple[float, float]], cycle: float) -> list[tuple[float, float]]:
    out = []
    for a, b in intervals:
        a, b = a % cycle, a % cycle + (b - a)
        if b > cycle:
            out += [(a, cycle), (0.0, b - cycle)]
        else:
            out.append((a, b))
    return _merge(out)


def _merge(intervals: list[tuple[float, float]]) -> list[tuple[float, float]]:
    out: list[tuple[float, float]] = []
    for a, b in sorted(intervals):
        if out and a <= out[-1][1]:
            out[-1] = (out[-1][0], max(out[-1][1], b))
        else:
            out.append((a, b))
    return out


def _overlap_length(xs: list[tuple[float, float]], ys: list[tuple[float, float]]) -> float:
    total, i, j = 0.0, 0, 0
    while i < len(xs) and j < len(ys):
        lo, hi = max(xs[i][0], ys[j][0]), min(xs[i][1], ys[j][1])
        total += max(0.0, hi - lo)
        if xs[i][1] < ys[j][1]:
            i += 1
        else:
            j += 1
    return total


# --------------------------------------------------------------------------- loading
def _vocabulary() -> set[str]:
    words: set[str] = set()
    stack: list[type[BaseModel]] = [Case]
    seen: set[type] = set()
    while stack:
        model = stack.pop()
        if model in seen:
            continue
        seen.add(model)
        words.update(model.model_fields)
        for sub in _Model.__subclasses__():
            stack.append(sub)
        for sub in _StrategyBase.__subclasses__():
            stack.append(sub)
    return words


def _hint(word: str, choices: Any) -> str:
    close = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


def _field_path(loc: tuple[Any, ...]) -> str:
    out = ""
    tags = {"lognormal", "fixed", "exponential", "gamma", "weibull", "table", "samples",
            "mixture", "synchronous", "batched", "deferred", "dual_device"}
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part in tags:
            continue  # the discriminator tag pydantic adds to the path; the user never wrote it
        else:
            out += ("." if out else "") + str(part)
    return out


def _problems_from(exc: ValidationError) -> list[InputProblem]:
    vocab = _vocabulary()
    problems = []
    for err in exc.errors(include_url=False):
        loc = tuple(err.get("loc", ()))
        path = _field_path(loc)
        kind = err.get("type", "")
        if kind == "extra_forbidden":
            key = str(loc[-1]) if loc else ""
            msg = f"unknown key '{key}'{_hint(key, vocab)}"
        elif kind == "missing":
            msg = "this field is required"
        elif kind == "union_tag_invalid":
            msg = err["msg"].replace("Input tag", "kind").replace("found using 'kind' ", "")
        elif kind == "union_tag_not_found":
            choices = _TAG_CHOICES.get(path.rsplit(".", 1)[-1], "see the README")
            msg = f"needs a 'kind' ({choices})"
        elif kind == "value_error":
            ctx = err.get("ctx", {})
            text = str(ctx.get("error", err["msg"]))
            for line in text.split("\n"):
                if ": " in line and not path:
                    field, _, rest = line.partition(": ")
                    problems.append(InputProblem(field, rest))
                else:
                    problems.append(InputProblem(path, line))
            continue
        else:
            msg = f"{err['msg']} (got {err.get('input')!r})" if "input" in err else err["msg"]
        problems.append(InputProblem(path, msg))
    return problems


_TAG_CHOICES = {
    "strategies": "synchronous, batched, deferred or dual_device",
}


def parse_case(data: Any, file: str = "<case>", base_dir: Path | None = None) -> Case:
    """Validate a case given as a mapping (already parsed from TOML or JSON).

    Raises :class:`InputError` listing every problem with its field path.
    """
    if not isinstance(data, dict):
        raise InputError(file, [InputProblem("", "the case must be a table of sections")])
    version = data.get("schema_version")
    if version is not None and version != SCHEMA_VERSION:
        raise InputError(file, [InputProblem(
            "schema_version", f"this commitadvisor reads schema_version {SCHEMA_VERSION}, "
                              f"the file says {version!r}")])
    try:
        case = Case.model_validate(data)
    except ValidationError as exc:
        raise InputError(file, _problems_from(exc)) from None
    _load_samples(case, file, base_dir or Path("."))
    return case


def load_case(path: str | Path) -> Case:
    """Read and validate a case file (``.toml`` or ``.json``)."""
    p = Path(path)
    data = parse_text(read_input_text(p, "a case file"), str(path), p.suffix.lower())
    return parse_case(data, str(path), p.parent)


def read_input_text(path: Path, what: str) -> str:
    """The text of an input file, or an InputError that says why it cannot be read."""
    name = str(path)
    try:
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(name, [InputProblem("", "no such file")]) from None
    except IsADirectoryError:
        raise InputError(name, [InputProblem("", f"is a directory, not {what}")]) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(name, [InputProblem("", f"cannot be read: {exc}")]) from None


def parse_text(text: str, name: str, suffix: str) -> Any:
    """Parse TOML or JSON text; syntax errors carry the parser's line number."""
    if suffix == ".json":
        try:
            return json.loads(text)
        except json.JSONDecodeError as exc:
            problem = InputProblem("", f"JSON syntax: {exc.msg}", exc.lineno)
            raise InputError(name, [problem]) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        line = None
        if "(at line " in msg:
            try:
                line = int(msg.split("(at line ")[1].split(",")[0])
            except ValueError:
                line = None
            msg = msg.split(" (at line ")[0]
        raise InputError(name, [InputProblem("", f"TOML syntax: {msg}", line)]) from None


def _iter_samples(profile: Any, path: str):
    if isinstance(profile, SamplesProfile):
        yield path, profile
    elif isinstance(profile, MixtureProfile):
        for i, part in enumerate(profile.parts):
            yield from _iter_samples(part.profile, f"{path}.parts[{i}].profile")


def _all_profiles(case: Case):
    for dn, d in case.devices.items():
        for reg, prof in d.latency.items():
            yield f"devices.{dn}.latency.{reg}", prof
        for reg, st in d.stalls.items():
            yield f"devices.{dn}.stalls.{reg}.duration", st.duration
    for i, t in enumerate(case.stack):
        yield f"stack[{i}].service", t.service
        if t.other_call is not None:
            yield f"stack[{i}].other_call", t.other_call


def _load_samples(case: Case, file: str, base_dir: Path) -> None:
    problems = []
    for path, prof in _all_profiles(case):
        for field, sp in _iter_samples(prof, path):
            target = base_dir / sp.file
            try:
                values = read_samples_file(target, sp.unit)
            except InputError as exc:
                problems.extend(InputProblem(f"{field}.file", p.describe(exc.file))
                                for p in exc.problems)
                continue
            sp.__pydantic_private__["_values_ms"] = values
    if problems:
        raise InputError(file, problems)


def read_samples_file(path: Path, unit: str) -> tuple[float, ...]:
    """Latencies from a samples CSV (the format ``measure`` writes and ``fit-profile``
    reads: one value per line, ``#`` comments, one header line allowed), in ms."""
    from commitadvisor.measure_io import read_samples_csv

    try:
        values = read_samples_csv(path, unit)
    except ValueError as exc:
        text = str(exc)
        if text.startswith(str(path)):
            text = text[len(str(path)):].lstrip(": ")
        raise InputError(str(path), [InputProblem("", text)]) from None
    if len(values) < 10:
        raise InputError(str(path), [InputProblem("", f"has {len(values)} latencies; at least "
                                                  "10 are needed for a profile")])
    return tuple(float(v) for v in values)


def case_json_schema() -> dict[str, Any]:
    """The JSON Schema of the case file, for editors."""
    schema = Case.model_json_schema()
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = "commitadvisor case file"
    return schema
