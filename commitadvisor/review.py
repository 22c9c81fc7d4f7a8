"""Benchmark review: what a benchmark's reported figures show, and what they do not.

A case's ``[benchmark]`` section gives a benchmark's reported throughput X and mean latency
R for N sessions, the commit mode it ran with and the log device. The review answers four
questions, each from a published law or the project's own evaluator:

1. **Think time.** Z = N/X - R (the interactive response time law, Little's law on the
   closed loop; Lazowska, Zahorjan, Graham and Sevcik, Quantitative System Performance,
   1984, ch. 3). It is never negative: N/X - R < 0 would need more than N commits in flight,
   so the reported figures are inconsistent, said so, and Z = 0 is used.
2. **Durable commits.** The same N sessions with think time Z (taken as exponential) on the
   same device, evaluated per regime by the strategies' own per-regime models with a closed
   workload: synchronous commit (natural group commit, the embedded Markov chain of
   commitadvisor.writer.closed_group_commit) and batched commit (the case's batched strategy
   on that device, else the default of :func:`default_batched`).
3. **Commits at risk during the run** (deferred commit only). The exposure window of a
   commit acknowledged from the log buffer is the wait for the next flush to start,
   uniform on a cycle C = max(interval, E[S]), plus that flush S: E[W] = C/2 + E[S] to a
   host crash or power loss, E[W] = C/2 to a crash of the database process. On average
   X E[W] acknowledged commits are at risk (Little, Operations Research 9(3), 1961); just
   before a flush completes the count peaks at the flush's batch plus what arrived during
   it, a Poisson count of mean X (C + S) (its p99.9 over the cycles is reported); it can
   never exceed the log buffer, buffer_bytes / log_bytes_per_commit.
4. **Possible at all?** With durable commits X <= min(N / (Z + D), bandwidth / bytes per
   commit, cpus (1 - other) / (CPU per commit + CPU per flush / batch)), the asymptotic
   bounds of operational analysis (Lazowska et al. 1984, ch. 5), with D = E[S] + CPU per
   commit the least time a durable commit can take (one whole flush of a batch of one and
   its own CPU work) and the batch taken as N, the most a flush can carry.

Pure: no I/O, no printing. Times in ms, rates per second unless a name says otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from commitadvisor import latency as L
from commitadvisor.case import NORMAL, Batched, Case, Deferred, Synchronous, regime_time_shares
from commitadvisor.case import strategy_name as _strategy_name
from commitadvisor.policy import format_value
from commitadvisor.results import RegimeResult
from commitadvisor.strategies import batched as _batched
from commitadvisor.strategies import deferred as _deferred
from commitadvisor.strategies import synchronous as _synchronous
from commitadvisor.strategies.common import mixed_poisson_quantile
from commitadvisor.strategies.context import RegimeContext, build_context
from commitadvisor.summary import _settings

__all__ = [
    "NoBenchmark",
    "ThinkTime",
    "DurableFigure",
    "AtRisk",
    "Bound",
    "Feasibility",
    "Reproduction",
    "BenchmarkReview",
    "think_time",
    "default_batched",
    "deferred_at_risk",
    "durable_bounds",
    "review_benchmark",
    "DEFERRAL",
    "DEFAULT_GATHER_TARGET_COMMITS",
]

DEFAULT_GATHER_TARGET_COMMITS = 16
REPRODUCTION_TOLERANCE = 0.10  # a model within 10 % of the reported rate "reproduces" it
DEFERRAL = (
    "These are model estimates computed from the figures in the case file, not measurements "
    "and not a decision. The organisation's recovery policy, its owners and the applicable "
    "regulation decide which commit strategy is acceptable."
)


class NoBenchmark(ValueError):
    """The case has no ``[benchmark]`` section to review."""


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class ThinkTime:
    """Z from the benchmark's own figures: Z = N/X - R (interactive response time law)."""

    sessions: int
    reported_commits_per_s: float
    reported_mean_ms: float
    raw_think_ms: float  # N/X - R as computed; negative when the figures are inconsistent
    think_ms: float  # the Z used: max(0, raw)
    consistent: bool
    case_think_ms: float | None  # the case's own workload think time, when it has one
    message: str


@dataclass(frozen=True)
class DurableFigure:
    """One durable strategy in one regime for the benchmark's sessions and think time."""

    strategy: str  # "synchronous" or "batched"
    settings: str  # in words
    settings_source: str  # the case's strategy it came from, or the default's rule
    regime: str
    time_share: float
    throughput_per_s: float  # the saturating rate when saturated
    ack_mean_ms: float | None  # None when saturated
    ack_p50_ms: float | None
    ack_p99_ms: float | None
    ack_p999_ms: float | None
    law_mean_ms: float  # N/X - Z; a lower bound on the mean when saturated
    mean_batch_commits: float | None
    cpu_utilisation: float | None
    copies_at_ack: int
    saturated: bool
    saturation_message: str | None
    notes: tuple[str, ...]


@dataclass(frozen=True)
class AtRisk:
    """Acknowledged commits that were not yet durable during a deferred-commit run."""

    applies: bool  # False when the benchmark ran with durable commits
    commit_mode: str
    rate_per_s: float
    flush_every_ms: float | None
    flush_mean_ms: float | None  # E[S] for a flush carrying one cycle's commits
    flush_p999_ms: float | None
    cycle_ms: float | None  # C = max(interval, E[S])
    host_window_mean_ms: float | None  # C/2 + E[S]: until the flush that holds it completes
    process_window_mean_ms: float | None  # C/2: until it is handed to the operating system
    host_at_risk_mean: float | None  # X E[W] (Little)
    process_at_risk_mean: float | None
    steady_peak: float | None  # p99.9 over flush cycles of the count just before a flush ends
    buffer_bound: float | None  # buffer_bytes // log_bytes_per_commit
    buffer_fill_ms: float | None  # how long a stopped flush takes to fill the buffer
    at_most: float | None  # the buffer bound, or the steady peak without a buffer size
    at_most_basis: str
    value_per_commit: float | None
    currency: str | None
    value_at_most: float | None
    value_steady_peak: float | None
    value_mean: float | None
    host_bounded: bool  # False: the device does not count as durable, a power loss can take more
    commits_in_run: float | None  # X x duration, when the duration is given
    notes: tuple[str, ...]


@dataclass(frozen=True)
class Bound:
    """One asymptotic bound on the durable commit rate."""

    name: str  # sessions, bandwidth, cpu
    limit_per_s: float | None  # None: no such bound (no CPU model)
    formula: str


@dataclass(frozen=True)
class Feasibility:
    """Whether the reported rate is reachable with durable commits in one regime."""

    regime: str
    bounds: tuple[Bound, ...]
    binding: str
    ceiling_per_s: float
    reported_per_s: float
    possible: bool
    least_mean_ms: float  # D = E[S] of a batch of one + CPU per commit
    message: str


@dataclass(frozen=True)
class Reproduction:
    """The model of the benchmark's own commit mode against the reported rate."""

    commit_mode: str
    model_per_s: float | None
    reported_per_s: float
    ratio: float | None  # model / reported
    reproduces: bool
    message: str


@dataclass(frozen=True)
class BenchmarkReview:
    case_title: str
    benchmark_title: str
    device: str
    device_counts_as_durable: bool
    commit_mode: str
    reported_commits_per_s: float
    reported_mean_ms: float
    reported_p99_ms: float | None
    sessions: int
    flush_every_ms: float | None
    buffer_bytes: int | None
    duration_s: float | None
    think: ThinkTime
    durable: tuple[DurableFigure, ...]
    at_risk: AtRisk
    feasibility: tuple[Feasibility, ...]
    reproduction: Reproduction
    verdict: str
    notes: tuple[str, ...]
    deferral: str = DEFERRAL

    def durable_figure(self, strategy: str, regime: str = NORMAL) -> DurableFigure:
        return next(f for f in self.durable if f.strategy == strategy and f.regime == regime)

    def feasibility_in(self, regime: str = NORMAL) -> Feasibility:
        return next(f for f in self.feasibility if f.regime == regime)


# --------------------------------------------------------------------------- the pieces
def _n(x: float | None, unit: str = "") -> str:
    return format_value(x, unit)


def think_time(sessions: int, commits_per_s: float, mean_latency_ms: float,
               case_think_ms: float | None = None) -> ThinkTime:
    """Z = N/X - R in ms (interactive response time law; Lazowska et al. 1984, ch. 3).

    Clamped at 0: a negative value means more than N commits were in flight at once, which
    N sessions cannot do, so the reported figures are inconsistent (and said to be).
    """
    raw = 1000.0 * sessions / commits_per_s - mean_latency_ms
    consistent = raw >= 0
    z = max(0.0, raw)
    cycle = 1000.0 * sessions / commits_per_s
    if consistent:
        msg = (f"Z = N/X - R = {sessions} / {_n(commits_per_s)}/s - "
               f"{_n(mean_latency_ms, 'ms')} = {_n(z, 'ms')} (interactive response time law)")
    else:
        msg = (f"the reported figures are inconsistent: {sessions} sessions at "
               f"{_n(commits_per_s)} commits/s leave each session {_n(cycle, 'ms')} per "
               f"commit, less than the reported mean latency of {_n(mean_latency_ms, 'ms')} "
               f"(N/X - R = {_n(raw, 'ms')} < 0 would need more than {sessions} commits in "
               "flight); the review uses Z = 0 and its figures inherit the inconsistency")
    if case_think_ms is not None and not math.isclose(case_think_ms, z, rel_tol=0.05,
                                                      abs_tol=0.005):
        msg += (f"; the case's workload says {_n(case_think_ms, 'ms')}, the review uses the "
                "benchmark's own figure")
    return ThinkTime(sessions, commits_per_s, mean_latency_ms, raw, z, consistent,
                     case_think_ms, msg)


def default_batched(case: Case, device: str) -> tuple[Batched, str]:
    """The case's first batched strategy on ``device``, else the default: a gathering window
    of the device's median flush time in the normal regime (the added wait is at most one
    ordinary flush) and a target of min(16, N) commits (at least 2)."""
    for s in case.strategies:
        if isinstance(s, Batched) and s.device == device:
            return s, f"the case's strategy '{_strategy_name(s)}'"
    from commitadvisor.latency import from_entry

    median_ms = float(from_entry(case.devices[device].latency[NORMAL]).quantile(0.5))
    window_ms = float(f"{median_ms:.2g}")
    n = case.benchmark.sessions if case.benchmark else (case.workload.sessions or 2)
    target = max(2, min(DEFAULT_GATHER_TARGET_COMMITS, n))
    s = Batched(kind="batched", device=device, gather_window_ms=window_ms,
                gather_target_commits=target, name="batched (default)")
    why = (f"default (the case has no batched strategy on {device}): gathering window = the "
           f"device's median flush time, {_n(window_ms, 'ms')}; target = min(16, sessions) = "
           f"{target} commits")
    return s, why


def _review_case(case: Case, sessions: int, think_ms: float) -> Case:
    """The case with its workload replaced by the benchmark's closed sessions."""
    w = case.workload.model_copy(update={
        "kind": "closed", "sessions": sessions, "think_time_ms": think_ms,
        "think_time_distribution": "exponential", "commit_rate_per_s": None})
    return case.model_copy(update={"workload": w, "stack": ()})


def _durable_figure(kind: str, rr: RegimeResult, settings: str, source: str,
                    sessions: int, think_ms: float) -> DurableFigure:
    x_per_ms = rr.throughput_per_s / 1000.0
    law = sessions / x_per_ms - think_ms
    notes = list(rr.notes)
    msg = None
    if rr.saturation is not None:
        msg = rr.saturation.message
        notes.append(
            f"{sessions} closed sessions cannot build a growing backlog: at most {sessions} "
            "commits are ever waiting, so the throughput is held at or below this ceiling "
            f"and the mean response is at least N/X - Z = {_n(law, 'ms')} (interactive "
            "response time law); a saturated regime has no percentiles: check it with the "
            "simulator")
    return DurableFigure(
        strategy=kind, settings=settings, settings_source=source, regime=rr.regime,
        time_share=rr.time_share, throughput_per_s=rr.throughput_per_s,
        ack_mean_ms=rr.ack_mean_ms, ack_p50_ms=rr.ack_p50_ms, ack_p99_ms=rr.ack_p99_ms,
        ack_p999_ms=rr.ack_p999_ms, law_mean_ms=law, mean_batch_commits=rr.mean_batch_commits,
        cpu_utilisation=rr.cpu_utilisation, copies_at_ack=rr.copies_at_ack,
        saturated=rr.saturated, saturation_message=msg, notes=tuple(notes))


def deferred_at_risk(case: Case, ctx: RegimeContext) -> AtRisk:
    """Acknowledged-but-not-durable commits during the benchmark's deferred-commit run.

    E[W] = C/2 + E[S] with C = max(interval, E[S]) and S the flush of one cycle's commits
    (ms); at risk on average = X E[W] (Little 1961); the steady peak, the p99.9 over flush
    cycles of the count just before a flush completes, a Poisson count of mean X (C + S) mixed
    over S; the hard bound buffer_bytes // log_bytes_per_commit. Counts are commits.
    """
    b = case.benchmark
    assert b is not None
    rate_per_s = b.reported_commits_per_s
    value, currency = case.recovery.value_per_commit, case.recovery.currency
    if b.commit_mode != "deferred":
        durable = case.devices[b.device].counts_as_durable
        zero = 0.0 if durable else None  # a device that does not count bounds nothing
        return AtRisk(
            applies=False, commit_mode=b.commit_mode, rate_per_s=rate_per_s,
            flush_every_ms=None, flush_mean_ms=None, flush_p999_ms=None, cycle_ms=None,
            host_window_mean_ms=zero, process_window_mean_ms=0.0, host_at_risk_mean=zero,
            process_at_risk_mean=0.0, steady_peak=zero, buffer_bound=None,
            buffer_fill_ms=None, at_most=zero,
            at_most_basis="acknowledged only after the flush" if durable else
            f"acknowledged after a flush of {b.device}, which does not count as durable",
            value_per_commit=value, currency=currency,
            value_at_most=zero if value else None, value_steady_peak=zero if value else None,
            value_mean=zero if value else None, host_bounded=durable,
            commits_in_run=rate_per_s * b.duration_s if b.duration_s else None, notes=())
    dev = ctx.devices[b.device]
    lam = rate_per_s / 1000.0
    interval = float(b.flush_every_ms)
    log_bytes = ctx.log_bytes
    flush = dev.flush(lam * interval, log_bytes)
    cycle = max(interval, flush.mean_ms)
    notes = []
    if flush.mean_ms > interval:
        # flushes run back to back, each carrying a whole (longer) cycle's commits
        flush = dev.flush(lam * cycle, log_bytes)
        cycle = max(interval, flush.mean_ms)
        notes.append(f"a flush ({_n(flush.mean_ms, 'ms')}) outlasts the "
                     f"{_n(interval, 'ms')} interval: flushes ran back to back")
    s_mean, s_p999 = flush.mean_ms, float(flush.quantile(0.999))
    host_w = cycle / 2 + s_mean
    proc_w = cycle / 2
    host_mean = lam * host_w
    proc_mean = lam * proc_w
    # just before a flush completes: its batch (one cycle's commits) and those that arrived
    # during it, a Poisson count with mean X (C + S); its p99.9 over the flush times
    peak = mixed_poisson_quantile(L.add_constant(flush, cycle), lam, 0.999)
    bound = float(b.buffer_bytes // log_bytes) if b.buffer_bytes else None
    fill_ms = b.buffer_bytes / (lam * log_bytes) if b.buffer_bytes else None
    if bound is not None:
        at_most = bound
        basis = (f"the log buffer's hard bound, {b.buffer_bytes:,} bytes / {log_bytes:,} bytes "
                 f"per commit; reached only when flushes stop for {_n(fill_ms, 'ms')}")
        if peak > bound:
            notes.append("the steady peak exceeds the buffer: commits stalled waiting for "
                         "buffer space during the run")
    else:
        at_most = peak
        basis = ("the benchmark gives no buffer size: one cycle's commits plus those that "
                 "arrive during the flush in flight, exceeded in 1 flush cycle in 1,000 (p99.9); "
                 "a stalled flush can hold more")
    durable = dev.device.counts_as_durable
    if not durable:
        notes.append(f"{b.device} has a volatile write cache not declared as honouring "
                     "flushes: a power loss can also take commits it reported as flushed, so "
                     "the host-crash figures are not bounded by the flush")
    return AtRisk(
        applies=True, commit_mode=b.commit_mode, rate_per_s=rate_per_s,
        flush_every_ms=interval, flush_mean_ms=s_mean, flush_p999_ms=s_p999, cycle_ms=cycle,
        host_window_mean_ms=host_w, process_window_mean_ms=proc_w,
        host_at_risk_mean=host_mean, process_at_risk_mean=proc_mean, steady_peak=peak,
        buffer_bound=bound, buffer_fill_ms=fill_ms, at_most=at_most, at_most_basis=basis,
        value_per_commit=value, currency=currency,
        value_at_most=at_most * value if value else None,
        value_steady_peak=peak * value if value else None,
        value_mean=host_mean * value if value else None, host_bounded=durable,
        commits_in_run=rate_per_s * b.duration_s if b.duration_s else None,
        notes=tuple(notes))


def durable_bounds(ctx: RegimeContext, device: str, sessions: int, think_ms: float,
                   reported_per_s: float) -> Feasibility:
    """The asymptotic bounds on the durable commit rate in one regime (commits/s):
    sessions N / (Z + D), bandwidth / log bytes per commit, and the CPU ceiling
    cpus (1 - other) / (CPU per commit + CPU per flush / N) (Lazowska et al. 1984, ch. 5)."""
    dev = ctx.devices[device]
    s1 = dev.flush(1, ctx.log_bytes).mean_ms
    d_ms = s1 + ctx.cpu_ms_per_commit
    bounds = [
        Bound("sessions", 1000.0 * sessions / (think_ms + d_ms),
              f"N / (Z + E[S] + CPU) = {sessions} / ({_n(think_ms, 'ms')} + "
              f"{_n(s1, 'ms')} + {_n(ctx.cpu_ms_per_commit, 'ms')})"),
        Bound("bandwidth", 1000.0 * dev.bandwidth_bytes_per_ms / ctx.log_bytes,
              f"{_n(dev.bandwidth_bytes_per_ms * 1000 / 1e6)} MB/s / {ctx.log_bytes:,} bytes "
              "per commit"),
    ]
    cpu = ctx.cpu_ceiling_per_ms(sessions, dev.overhead_ms)
    bounds.append(Bound(
        "cpu", None if cpu is None else 1000.0 * cpu,
        "no CPU figures in the case" if cpu is None else
        f"{ctx.cpus} CPUs / ({_n(ctx.cpu_ms_per_commit, 'ms')} per commit + "
        f"{_n(dev.overhead_ms, 'ms')} per flush / {sessions}), after other work"))
    known = [b for b in bounds if b.limit_per_s is not None]
    binding = min(known, key=lambda b: b.limit_per_s)
    ceiling = float(binding.limit_per_s)
    possible = reported_per_s <= ceiling
    words = {"sessions": f"the sessions bound ({sessions} sessions, think time and the least "
                         "time a durable commit takes)",
             "bandwidth": f"the bandwidth of {device}", "cpu": "the host's CPU"}[binding.name]
    if possible:
        msg = (f"not ruled out: {_n(reported_per_s)} commits/s is below every bound for durable "
               f"commits on {device}; {words} binds, at {_n(ceiling)} commits/s")
    else:
        msg = (f"not reachable with durable commits on {device}: {words} allows at most "
               f"{_n(ceiling)} commits/s, below the reported {_n(reported_per_s)}")
    return Feasibility(ctx.regime, tuple(bounds), binding.name, ceiling, reported_per_s,
                       possible, d_ms, msg)


def _reproduce(case: Case, ctx: RegimeContext, figures: tuple[DurableFigure, ...]
               ) -> Reproduction:
    """The model of the benchmark's own mode, fed its own Z, against its reported rate."""
    b = case.benchmark
    assert b is not None
    model: float | None
    if b.commit_mode == "deferred":
        s = Deferred(kind="deferred", device=b.device, flush_every_ms=b.flush_every_ms,
                     buffer_bytes=b.buffer_bytes or 64 * 2**20)
        rr = _deferred.evaluate_regime(case, s, ctx)
        model = rr.throughput_per_s
        saturated = rr.saturated
    else:
        f = next(f for f in figures if f.strategy == b.commit_mode and f.regime == ctx.regime)
        model, saturated = f.throughput_per_s, f.saturated
    ratio = model / b.reported_commits_per_s
    reproduces = abs(ratio - 1.0) <= REPRODUCTION_TOLERANCE
    what = f"the model of {b.commit_mode} commit, fed the benchmark's own think time,"
    if reproduces:
        msg = (f"{what} reaches {_n(model)} commits/s against the reported "
               f"{_n(b.reported_commits_per_s)} ({_n(100 * (ratio - 1))} %): the case's "
               "device and host figures reproduce the run")
    else:
        side = "above" if ratio > 1 else "below"
        msg = (f"{what} reaches {_n(model)} commits/s, {_n(abs(100 * (ratio - 1)))} % {side} "
               f"the reported {_n(b.reported_commits_per_s)}"
               + (" (at a saturated resource)" if saturated else "")
               + ": the case's host or device figures (CPU per commit, CPUs, flush profile) "
               "do not reproduce the benchmark host; read the durable figures with that margin")
    return Reproduction(b.commit_mode, model, b.reported_commits_per_s, ratio, reproduces, msg)


def _verdict(case: Case, think: ThinkTime, sync: DurableFigure, bat: DurableFigure,
             risk: AtRisk, feas: Feasibility, rep: Reproduction) -> str:
    b = case.benchmark
    assert b is not None
    dev = b.device
    cur = case.recovery.currency or ""
    lat = f"{_n(b.reported_mean_latency_ms, 'ms')} mean" + (
        f", p99 {_n(b.reported_p99_ms, 'ms')}" if b.reported_p99_ms else "")
    parts = []
    if b.commit_mode == "deferred":
        parts.append(
            f"The reported {_n(b.reported_commits_per_s)} commits/s ({lat}, {b.sessions} "
            f"sessions) were measured with deferred commit: each commit was acknowledged "
            f"from the log buffer before it was durable, and the buffer was flushed every "
            f"{_n(b.flush_every_ms, 'ms')}. That is a valid measurement of deferred commit, not "
            "of durable commits.")
        if risk.host_bounded:
            money = (f" (worth {_n(risk.value_steady_peak)} {cur})"
                     if risk.value_steady_peak else "")
            text = (f"During the run about {_n(risk.host_at_risk_mean)} acknowledged commits "
                    f"were at risk at any instant on average (Little's law: "
                    f"{_n(risk.rate_per_s)}/s x {_n(risk.host_window_mean_ms, 'ms')}, the wait "
                    f"for the next flush plus the flush) and up to {_n(risk.steady_peak)} just "
                    f"before a flush completed (in 999 of 1,000 flush cycles): a power loss "
                    f"then would have lost those {_n(risk.steady_peak)}{money}.")
            if risk.buffer_bound is not None:
                text += (f" Had the flushes stopped for {_n(risk.buffer_fill_ms, 'ms')}, the "
                         f"full log buffer would have held {_n(risk.at_most)}"
                         + (f" ({_n(risk.value_at_most)} {cur})" if risk.value_at_most else "")
                         + ", the most it can lose.")
            else:
                text += f" The most it can lose: {_n(risk.at_most)} ({risk.at_most_basis})."
            parts.append(text)
        else:
            parts.append(
                f"{dev} does not count as durable, so a power loss during the run could have "
                "lost acknowledged commits without bound (more than the flush interval's).")
    else:
        parts.append(
            f"The reported {_n(b.reported_commits_per_s)} commits/s ({lat}, {b.sessions} "
            f"sessions) were measured with {b.commit_mode} commit, acknowledged after the "
            "flush.")
    if not think.consistent:
        parts.append(think.message[0].upper() + think.message[1:] + ".")
    sync_words = _figure_words(sync)
    bat_words = _figure_words(bat)
    parts.append(
        f"With durable commits the same {b.sessions} sessions (think time "
        f"{_n(think.think_ms, 'ms')} from the benchmark's own figures) reach {sync_words} "
        f"on {dev} with synchronous commit (natural group commit), and {bat_words} with "
        f"batched commit ({bat.settings}), by the closed-workload model.")
    parts.append(feas.message[0].upper() + feas.message[1:] + ".")
    if not rep.reproduces:
        parts.append(rep.message[0].upper() + rep.message[1:] + ".")
    if not case.devices[dev].counts_as_durable:
        parts.append(f"No commit on {dev} is durable as the case describes it (a volatile "
                     "write cache not declared as honouring flushes).")
    return " ".join(parts)


def _figure_words(f: DurableFigure) -> str:
    if f.saturated:
        return (f"at most about {_n(f.throughput_per_s)} commits/s (held at a saturated "
                f"resource; mean at least {_n(f.law_mean_ms, 'ms')}, no percentiles)")
    return (f"about {_n(f.throughput_per_s)} commits/s at mean {_n(f.ack_mean_ms, 'ms')}, "
            f"p99 {_n(f.ack_p99_ms, 'ms')}")


def review_benchmark(case: Case) -> BenchmarkReview:
    """Review the case's ``[benchmark]``: think time, durable figures per regime, commits at
    risk during the run, the asymptotic bounds and a verdict paragraph (see the module
    docstring for the laws and their sources). Raises :class:`NoBenchmark` without one."""
    b = case.benchmark
    if b is None:
        raise NoBenchmark("the case has no [benchmark] section: add one with the benchmark's "
                          "reported_commits_per_s, reported_mean_latency_ms, sessions, "
                          "commit_mode (with flush_every_ms for deferred) and device")
    case_z = case.workload.think_time_ms if case.workload.kind == "closed" else None
    think = think_time(b.sessions, b.reported_commits_per_s, b.reported_mean_latency_ms,
                       case_z)
    rc = _review_case(case, b.sessions, think.think_ms)
    contexts = [build_context(rc, name, share) for name, share in regime_time_shares(rc).items()]
    sync = Synchronous(kind="synchronous", device=b.device, grouping="natural",
                       name="synchronous")
    bat, bat_source = default_batched(case, b.device)
    figures = []
    for kind, s, module, source in (
            ("synchronous", sync, _synchronous, "natural group commit on the benchmark's device"),
            ("batched", bat, _batched, bat_source)):
        for ctx in contexts:
            rr = module.evaluate_regime(rc, s, ctx)
            figures.append(_durable_figure(kind, rr, _settings(s), source, b.sessions,
                                           think.think_ms))
    figures_t = tuple(figures)
    normal = contexts[0]
    risk = deferred_at_risk(rc, normal)
    feas = tuple(durable_bounds(ctx, b.device, b.sessions, think.think_ms,
                                b.reported_commits_per_s) for ctx in contexts)
    rep = _reproduce(rc, normal, figures_t)
    by = {(f.strategy, f.regime): f for f in figures_t}
    verdict = _verdict(case, think, by[("synchronous", NORMAL)], by[("batched", NORMAL)],
                       risk, feas[0], rep)
    notes = ["the sessions' think time is taken as exponential (the closed chain is exact "
             "for it); the benchmark's own think-time distribution is not known"]
    if not case.devices[b.device].counts_as_durable:
        notes.append(f"{b.device} has a volatile write cache not declared as honouring "
                     "flushes: the 'durable' figures are those of waiting for its flush, which "
                     "the case does not count as durable")
    if len(contexts) > 1:
        notes.append("the benchmark is taken to have run in the normal regime; the other "
                     "regimes show what durable commits reach during them")
    if b.commit_mode == "deferred" and b.buffer_bytes is None:
        notes.append("no buffer size given: the model of the benchmark's own mode used a "
                     "64 MiB buffer (it matters only when the device stalls)")
    return BenchmarkReview(
        case_title=case.title, benchmark_title=b.title, device=b.device,
        device_counts_as_durable=case.devices[b.device].counts_as_durable,
        commit_mode=b.commit_mode, reported_commits_per_s=b.reported_commits_per_s,
        reported_mean_ms=b.reported_mean_latency_ms, reported_p99_ms=b.reported_p99_ms,
        sessions=b.sessions, flush_every_ms=b.flush_every_ms, buffer_bytes=b.buffer_bytes,
        duration_s=b.duration_s, think=think, durable=figures_t, at_risk=risk,
        feasibility=feas, reproduction=rep, verdict=verdict, notes=tuple(notes))

