"""Rule files: loading and validating the organisation's policy (TOML), and the baseline.

A rule file is data only. It is validated like a case file: unknown keys are errors with a
"did you mean" hint, every problem names the file and the field, and the command line exits
with status 2. The validated file becomes the frozen :class:`commitadvisor.policy.Policy`
that the pure rule engine reads. The format is described in docs/rules.md.

The baseline policy is ``rules/baseline.toml`` at the top of the repository; an installed
package carries a copy as ``commitadvisor/rules/baseline.toml`` (see docs/rules.md).
"""

from __future__ import annotations

import difflib
import re
from importlib import resources
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from commitadvisor.case import parse_text, read_input_text
from commitadvisor.errors import InputError, InputProblem
from commitadvisor.policy import (
    CASE_FIELDS,
    COMPARISONS,
    METRICS,
    PLACEHOLDERS,
    Policy,
    PolicySet,
    Rule,
    Threshold,
    template_fields,
    units_compatible,
)
from commitadvisor.results import FAILURE_KINDS

__all__ = [
    "RULES_FORMAT_VERSION",
    "baseline_text",
    "parse_policy",
    "load_policy",
    "load_policy_set",
]

RULES_FORMAT_VERSION = 1
BASELINE_SOURCE = "rules/baseline.toml"
STRATEGY_KINDS = ("synchronous", "batched", "deferred", "dual_device")


def _hint(word: str, choices: Any) -> str:
    close = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.6)
    return f" (did you mean '{close[0]}'?)" if close else ""


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class AppliesTo(_Model):
    kinds: tuple[Literal["synchronous", "batched", "deferred", "dual_device"], ...] = ()
    names: tuple[Annotated[str, Field(min_length=1)], ...] = ()


class RuleModel(_Model):
    id: Annotated[str, Field(pattern=r"^[a-z0-9][a-z0-9_-]*$", max_length=64)]
    metric: str
    comparison: str
    threshold: float | str | None = None
    threshold_factor: Annotated[float, Field(gt=0, allow_inf_nan=False)] = 1.0
    failure: tuple[str, ...] | str | None = None
    strategies: AppliesTo | None = None
    regimes: tuple[Annotated[str, Field(min_length=1)], ...] = ()
    severity: Literal["not_allowed", "needs_signoff", "warning"]
    message: str = ""
    description: str = ""

    @field_validator("metric")
    @classmethod
    def _known_metric(cls, v: str) -> str:
        if v not in METRICS:
            raise ValueError(f"unknown metric '{v}'{_hint(v, METRICS)}; the registry is in "
                             "docs/rules.md")
        return v

    @field_validator("comparison")
    @classmethod
    def _known_comparison(cls, v: str) -> str:
        if v not in COMPARISONS:
            raise ValueError(f"unknown comparison '{v}'{_hint(v, COMPARISONS)}; one of "
                             + ", ".join(COMPARISONS))
        return v

    @field_validator("threshold")
    @classmethod
    def _threshold(cls, v: float | str | None) -> float | str | None:
        if isinstance(v, str) and v not in CASE_FIELDS:
            raise ValueError(f"'{v}' is not a case field a threshold can name"
                             f"{_hint(v, CASE_FIELDS)}; give a number or one of the fields "
                             "listed in docs/rules.md")
        if isinstance(v, float) and v != v:  # NaN
            raise ValueError("the threshold must be a number")
        return v

    @field_validator("failure")
    @classmethod
    def _failure(cls, v: Any) -> Any:
        values = (v,) if isinstance(v, str) else (v or ())
        for f in values:
            if f != "each" and f not in FAILURE_KINDS:
                raise ValueError(f"unknown failure kind '{f}'{_hint(f, FAILURE_KINDS)}; "
                                 "each, " + ", ".join(FAILURE_KINDS))
        return v

    @field_validator("message")
    @classmethod
    def _template(cls, v: str) -> str:
        try:
            fields = template_fields(v)
        except ValueError as exc:
            raise ValueError(f"the message template is malformed: {exc}") from None
        for f in fields:
            if f not in PLACEHOLDERS:
                raise ValueError(f"unknown placeholder '{{{f}}}'{_hint(f, PLACEHOLDERS)}; "
                                 "the placeholders are listed in docs/rules.md")
        for _, name, spec, conv in _parse(v):
            if name is not None and (spec or conv):
                raise ValueError(f"placeholder '{{{name}}}' takes no format or conversion: "
                                 "figures are filled in already rounded, with their units")
        return v

    @model_validator(mode="after")
    def _consistent(self) -> RuleModel:
        m = METRICS[self.metric]
        problems = []
        if m.is_bool:
            if self.comparison not in ("is_true", "is_false"):
                problems.append(f"comparison: metric '{m.name}' is yes/no; use is_true or "
                                "is_false")
            if self.threshold is not None:
                problems.append(f"threshold: metric '{m.name}' is yes/no and takes no threshold")
        else:
            if self.comparison in ("is_true", "is_false"):
                problems.append(f"comparison: metric '{m.name}' is a figure in {m.unit}; "
                                "use at_most, below, at_least, above or equals")
            if self.threshold is None:
                problems.append(f"threshold: this field is required for metric '{m.name}' "
                                f"(a number in {m.unit}, or a case field)")
            elif isinstance(self.threshold, str):
                unit = CASE_FIELDS[self.threshold]
                if not units_compatible(unit, m.unit):
                    problems.append(f"threshold: {self.threshold} is in {unit} and cannot be "
                                    f"compared with metric '{m.name}' in {m.unit}")
                if "{failure}" in self.threshold and not m.per_failure:
                    problems.append(f"threshold: '{{failure}}' needs a metric per failure "
                                    f"kind; '{m.name}' is not one")
        if self.failure is not None and not m.per_failure:
            problems.append(f"failure: metric '{m.name}' is not per failure kind; leave "
                            "failure out")
        if self.regimes and m.scope != "regime":
            problems.append(f"regimes: metric '{m.name}' is judged "
                            + ("on the whole year" if m.scope == "year" else "once per strategy")
                            + "; leave regimes out")
        if problems:
            raise ValueError("\n".join(problems))
        return self

    def failures(self) -> tuple[str, ...]:
        values = (self.failure,) if isinstance(self.failure, str) else (self.failure or ())
        if not values or "each" in values:
            return FAILURE_KINDS
        return tuple(f for f in FAILURE_KINDS if f in values)


def _parse(template: str) -> list[tuple[str, str | None, str | None, str | None]]:
    import string

    return list(string.Formatter().parse(template))


class RuleFileModel(_Model):
    format_version: int
    policy: Annotated[str, Field(min_length=1, max_length=120)]
    description: str = ""
    replaces_baseline: bool = False
    switch_off: tuple[str, ...] = ()
    rule: tuple[RuleModel, ...] = ()

    @field_validator("format_version")
    @classmethod
    def _version(cls, v: int) -> int:
        if v != RULES_FORMAT_VERSION:
            raise ValueError(f"this commitadvisor reads rule files of format_version "
                             f"{RULES_FORMAT_VERSION}, the file says {v}")
        return v

    @model_validator(mode="after")
    def _unique_ids(self) -> RuleFileModel:
        seen: set[str] = set()
        problems = []
        for i, r in enumerate(self.rule):
            if r.id in seen:
                problems.append(f"rule[{i}].id: the id '{r.id}' is used twice in this file")
            seen.add(r.id)
        if not self.rule and not self.switch_off:
            problems.append("rule: the file has no rules and switches none off")
        if problems:
            raise ValueError("\n".join(problems))
        return self


def _vocabulary() -> set[str]:
    words: set[str] = set()
    for model in (RuleFileModel, RuleModel, AppliesTo):
        words.update(model.model_fields)
    return words


_FIELD = re.compile(r"^[a-z_][a-z0-9_]*(\[\d+\])?(\.[a-z_][a-z0-9_]*(\[\d+\])?)*$")


def _field_path(loc: tuple[Any, ...]) -> str:
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        elif part in ("float", "str", "tuple[str, ...]", "function-after[_threshold(), "
                      "union[float,str,none]]"):
            continue
        else:
            out += ("." if out else "") + str(part)
    return out


def _problems_from(exc: ValidationError) -> list[InputProblem]:
    vocab = _vocabulary()
    problems: list[InputProblem] = []
    seen: set[tuple[str, str]] = set()
    for err in exc.errors(include_url=False):
        loc = tuple(p for p in err.get("loc", ()) if not (isinstance(p, str) and "[" in p))
        path = _field_path(loc)
        kind = err.get("type", "")
        if kind == "extra_forbidden":
            key = str(loc[-1]) if loc else ""
            items = [(path, f"unknown key '{key}'{_hint(key, vocab)}")]
        elif kind == "missing":
            items = [(path, "this field is required")]
        elif kind == "value_error":
            text = str(err.get("ctx", {}).get("error", err["msg"]))
            items = []
            for line in text.split("\n"):
                field, sep, rest = line.partition(": ")
                if sep and _FIELD.match(field):
                    items.append(((path + "." if path else "") + field, rest))
                else:
                    items.append((path, line))
        else:
            got = f" (got {err['input']!r})" if "input" in err and not isinstance(
                err["input"], dict) else ""
            items = [(path, err["msg"] + got)]
        for field, msg in items:
            if (field, msg) not in seen:
                seen.add((field, msg))
                problems.append(InputProblem(field, msg))
    return problems


def _to_policy(m: RuleFileModel, source: str, is_baseline: bool) -> Policy:
    rules = []
    for r in m.rule:
        threshold = None
        if r.threshold is not None:
            threshold = Threshold(
                literal=float(r.threshold) if not isinstance(r.threshold, str) else None,
                case_field=r.threshold if isinstance(r.threshold, str) else None,
                factor=r.threshold_factor,
            )
        rules.append(Rule(
            id=r.id, metric=r.metric, comparison=r.comparison, severity=r.severity,
            threshold=threshold, failures=r.failures(),
            kinds=tuple(r.strategies.kinds) if r.strategies else (),
            names=tuple(r.strategies.names) if r.strategies else (),
            regimes=r.regimes, message=r.message, description=r.description,
        ))
    return Policy(name=m.policy, source=source, rules=tuple(rules),
                  replaces_baseline=m.replaces_baseline, switch_off=m.switch_off,
                  is_baseline=is_baseline, description=m.description)


def parse_policy(data: Any, file: str, is_baseline: bool = False) -> Policy:
    """Validate a parsed rule file; raises :class:`InputError` naming every bad field."""
    if not isinstance(data, dict):
        raise InputError(file, [InputProblem("", "a rule file must be a table")])
    try:
        model = RuleFileModel.model_validate(data)
    except ValidationError as exc:
        raise InputError(file, _problems_from(exc)) from None
    if is_baseline and (model.replaces_baseline or model.switch_off):
        raise InputError(file, [InputProblem("replaces_baseline",
                                             "the baseline cannot replace or switch off rules")])
    return _to_policy(model, BASELINE_SOURCE if is_baseline else file, is_baseline)


def load_policy(path: str | Path) -> Policy:
    """Read and validate one organisation rule file (TOML)."""
    name = str(path)
    return parse_policy(parse_text(read_input_text(Path(path), "a rule file"), name, ".toml"), name)


def baseline_text(repo_root: Path | None = None) -> str:
    """The baseline policy's text: ``rules/baseline.toml`` of the repository when the
    package runs from one, else the copy shipped inside the installed package
    (``commitadvisor/rules/baseline.toml``)."""
    root = repo_root if repo_root is not None else Path(__file__).resolve().parent.parent
    repo_copy = root / "rules" / "baseline.toml"
    if repo_copy.is_file() and (root / "pyproject.toml").is_file():
        return repo_copy.read_text(encoding="utf-8")
    shipped = resources.files("commitadvisor").joinpath("rules/baseline.toml")
    if shipped.is_file():
        return shipped.read_text(encoding="utf-8")
    raise InputError(BASELINE_SOURCE, [InputProblem(
        "", "the baseline policy is not installed with this package; reinstall it, or "
            "give a policy file with replaces_baseline = true")])


def load_baseline() -> Policy:
    """The cautious baseline policy, validated like any rule file."""
    text = baseline_text()
    return parse_policy(parse_text(text, "rules/baseline.toml", ".toml"), "rules/baseline.toml",
                        is_baseline=True)


def compose(policies: list[Policy], baseline: Policy | None) -> PolicySet:
    """The policy set: the baseline (unless a file replaces it), then each file in order.

    A file may switch off a rule of the policies before it by its id. Rule ids are unique
    across the set: to change a rule, switch it off and give your own rule another id.
    """
    replaced = any(p.replaces_baseline for p in policies)
    chain: list[Policy] = [] if replaced or baseline is None else [baseline]
    known: dict[str, str] = {r.id: p.name for p in chain for r in p.rules}
    off: list[tuple[str, str]] = []
    for p in policies:
        problems = []
        for i, rid in enumerate(p.switch_off):
            if rid not in known:
                where = ("the baseline is replaced, so there is nothing to switch off; "
                         if replaced and baseline is not None
                         and any(r.id == rid for r in baseline.rules) else "")
                problems.append(InputProblem(
                    f"switch_off[{i}]", f"{where}no rule '{rid}' in the policies before this "
                    f"one{_hint(rid, known)}"))
            else:
                off.append((rid, p.name))
        for i, r in enumerate(p.rules):
            if r.id in known:
                problems.append(InputProblem(
                    f"rule[{i}].id", f"'{r.id}' is already a rule of '{known[r.id]}'; to "
                    f"replace it, switch it off (switch_off = [\"{r.id}\"]) and give your "
                    "rule another id"))
        if problems:
            raise InputError(p.source, problems)
        known.update({r.id: p.name for r in p.rules})
        chain.append(p)
    if not chain:
        raise InputError(policies[0].source if policies else BASELINE_SOURCE,
                         [InputProblem("", "no policy is left in force")])
    return PolicySet(tuple(chain), tuple(off))


def load_policy_set(paths: list[str] | list[Path] | tuple[Any, ...] = ()) -> PolicySet:
    """The baseline extended (or replaced) by the organisation's rule files, in order."""
    policies = [load_policy(p) for p in paths]
    return compose(policies, load_baseline())
