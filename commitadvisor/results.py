"""Frozen result objects: the plain numbers the evaluator and the simulator produce.

Every figure has its unit in its name. A saturated regime carries a :class:`Saturation` and
no latency figures (``None``), never inf, NaN or a huge number.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

__all__ = [
    "FAILURE_KINDS",
    "json_float",
    "Saturation",
    "Exposure",
    "RegimeResult",
    "StrategyResult",
    "Evaluation",
    "to_plain",
]

FAILURE_KINDS = ("process_crash", "host_crash", "device_loss")
JSON_FORMAT_VERSION = 1


@dataclass(frozen=True)
class Saturation:
    """A resource that cannot keep up: which, at what rate it saturates, what follows."""

    resource: str  # "cpu", "bandwidth:<device>", "buffer:<device>", "tier:<name>", "sessions"
    saturating_rate_per_s: float  # the commit rate at which the resource is full
    offered_rate_per_s: float
    backlog_growth_per_s: float  # commits per second the backlog grows while the regime lasts
    drain_time_s: float | None  # after the regime ends; None when it cannot drain
    message: str


@dataclass(frozen=True)
class Exposure:
    """What one kind of failure can take of the acknowledged commits.

    ``window_*`` is the time from a commit's acknowledgement until it survives this failure;
    ``at_risk_*`` counts acknowledged commits that would be lost if the failure struck at a
    random instant. ``unbounded`` marks a single copy facing the loss of its device.
    """

    failure: str
    window_mean_ms: float | None
    window_p99_ms: float | None
    window_p999_ms: float | None
    at_risk_mean: float | None
    at_risk_p999: float | None
    at_risk_bound: float | None  # hard bound (the log buffer), None where there is none
    expected_lost_per_year: float | None
    value_lost_per_year: float | None
    unbounded: bool = False
    basis: str = ""  # the law or measurement behind the figures
    window: Any = field(default=None, repr=False, compare=False)  # its latency.Latency

    @property
    def can_lose(self) -> bool:
        # a window above zero, or commits at risk without a steady window (a full buffer)
        return (self.unbounded or (self.window_p999_ms or 0.0) > 0.0
                or (self.at_risk_mean or 0.0) > 0.0)


@dataclass(frozen=True)
class RegimeResult:
    """One strategy in one regime (or blended over all regimes)."""

    regime: str
    time_share: float
    commit_share: float  # share of all commits that this regime carries
    throughput_per_s: float
    ack_mean_ms: float | None
    ack_p50_ms: float | None
    ack_p90_ms: float | None
    ack_p99_ms: float | None
    ack_p999_ms: float | None
    durable_mean_ms: float | None
    durable_p99_ms: float | None
    exposures: tuple[Exposure, ...]
    flushes_per_s: tuple[tuple[str, float], ...]
    mean_batch_commits: float | None
    writer_utilisation: float | None
    cpu_utilisation: float | None
    copies_at_ack: int
    saturation: Saturation | None = None
    notes: tuple[str, ...] = ()
    ack_latency: Any = field(default=None, repr=False, compare=False)  # a latency.Latency
    durable_latency: Any = field(default=None, repr=False, compare=False)  # a latency.Latency

    def exposure(self, failure: str) -> Exposure:
        return next(e for e in self.exposures if e.failure == failure)

    @property
    def saturated(self) -> bool:
        return self.saturation is not None


@dataclass(frozen=True)
class StrategyResult:
    name: str
    kind: str
    settings: str
    regimes: tuple[RegimeResult, ...]
    blended: RegimeResult
    notes: tuple[str, ...] = ()

    def regime(self, name: str) -> RegimeResult:
        return next(r for r in self.regimes if r.regime == name)

    @property
    def worst(self) -> RegimeResult:
        """The regime with the highest commit p99 (a saturated one first)."""
        sat = [r for r in self.regimes if r.saturated]
        if sat:
            return sat[0]
        return max(self.regimes, key=lambda r: r.ack_p99_ms or 0.0)

    @property
    def saturated(self) -> bool:
        return any(r.saturated for r in self.regimes)


@dataclass(frozen=True)
class Evaluation:
    title: str
    method: str  # "analytic" or "simulated"
    regimes: tuple[tuple[str, float], ...]  # name, time share
    strategies: tuple[StrategyResult, ...]
    notes: tuple[str, ...] = ()
    seed: int | None = None

    def strategy(self, name: str) -> StrategyResult:
        return next(s for s in self.strategies if s.name == name)


# distribution objects, not JSON figures
_DISTRIBUTIONS = {"ack_latency", "durable_latency", "window"}


def to_plain(obj: Any) -> Any:
    """A JSON-ready copy (distribution objects dropped, tuples as lists, floats rounded to
    9 significant figures so that output is stable byte for byte)."""
    if isinstance(obj, Evaluation | StrategyResult | RegimeResult | Exposure | Saturation):
        return to_plain(asdict(obj))
    if isinstance(obj, dict):
        return {k: to_plain(v) for k, v in obj.items() if k not in _DISTRIBUTIONS}
    if isinstance(obj, list | tuple):
        return [to_plain(v) for v in obj]
    if isinstance(obj, float):
        return json_float(obj)
    return obj


def json_float(x: float) -> float:
    """``x`` rounded to the 9 significant figures every JSON document carries (text formats
    round through it too, so a figure on a rounding boundary reads alike in all)."""
    return float(f"{x:.9g}")
