"""Independent reference models of commit durability, built on simpy.

These models are an outside check: they import nothing from ``commitadvisor`` and take
plain parameters and sampler callables, so the project's analytic evaluator and its own
fast simulator can be compared with something they were not derived from.

Units: simulated time is in milliseconds throughout; rates are given per second (and
converted once); byte counts are bytes. Every result array is in milliseconds.

Samplers
    A sampler is ``draw(rng) -> float``: one duration in ms from a ``numpy.random.Generator``.
    A flush sampler may also take the batch size, ``flush_ms(rng, batch_commits) -> float``;
    it is called with the batch size when its signature accepts a second positional argument.

Randomness
    ``seed`` feeds one ``numpy.random.SeedSequence``; each role (arrivals or think times,
    flush times of device a, stalls of device a, CPU service, flush times and stalls of
    device b, at-risk inspections) has its own child stream, so changing one part of a
    model (adding stalls, changing the mode) leaves the other draws unchanged (common
    random numbers) and the same arguments give the same output.

Stalls (``stalls=(rate_per_s, duration_sampler)``)
    Device stalls start as a Poisson process in time, independent of how often we flush.
    While at least one stall is active the device makes no progress: a flush in flight
    completes at its planned time plus the stalled time overlapping it, and a flush that
    starts during a stall waits for it to end. Overlapping stalls merge (the device is
    stalled on the union of the stall intervals).
    ``stalls=(rate_per_s, duration_sampler, "drop")`` instead drops a stall that would
    start during a stall: stall and gap alternate, each gap exponential with mean
    1/rate (an alternating renewal process, stalled share E[D] / (E[D] + 1/rate)), which
    is what a Poisson stream thinned of its starts inside a stall gives. ``"merge"`` as
    the third element is the default above.

Writer modes (one log writer, one flush at a time)
    ``group``           natural group commit: a commit arriving to an idle writer starts a
                        flush at once; commits arriving during a flush all go into the next.
    ``one_per_commit``  each commit is its own flush, first come first served (M/G/1).
    ``batched``         the writer holds a flush until ``gather_window_ms`` after the first
                        pending commit joined the writer, or until ``gather_target``
                        commits are pending, whichever comes first, and then flushes every
                        pending commit (no cap). Commits arriving during that flush are
                        pending for the next one; when the flush ends, the next one starts
                        at once if ``gather_target`` are already pending or the window of
                        the oldest pending commit (counted from when it joined, possibly
                        during the previous flush) has already run out; otherwise the
                        writer waits for whichever comes first. A missing window or target
                        means no limit on that side (at least one is needed).

The writer counts as busy from the moment it starts a flush (including any wait for a stall
to end) to the flush's completion; gathering time is not busy time.
"""

from __future__ import annotations

import inspect
import math
from collections import deque
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from statistics import NormalDist

import numpy as np
import simpy

__all__ = [
    "ClosedResult",
    "DeferredResult",
    "DualResult",
    "LogDevice",
    "OpenResult",
    "exp_quantile",
    "exp_sampler",
    "fixed_sampler",
    "lognormal_quantile",
    "lognormal_sampler",
    "mixture_sampler",
    "run_closed",
    "run_deferred",
    "run_dual",
    "run_open",
]

Sampler = Callable[[np.random.Generator], float]
Stalls = tuple[float, Sampler] | tuple[float, Sampler, str]
OVERLAPS = ("merge", "drop")

MODES = ("group", "one_per_commit", "batched")
_BLOCK = 4096  # interarrival times are drawn in blocks of this many

# Roles of the child random streams (fixed, so that each role keeps its draws).
_ARRIVALS, _FLUSH_A, _STALLS_A, _CPU, _FLUSH_B, _STALLS_B, _INSPECT, _SHARED = range(8)


# ---------------------------------------------------------------------------- samplers
@dataclass(frozen=True)
class _Exponential:
    mean_ms: float

    def __call__(self, rng: np.random.Generator) -> float:
        return float(rng.exponential(self.mean_ms))


@dataclass(frozen=True)
class _Fixed:
    ms: float

    def __call__(self, rng: np.random.Generator) -> float:
        return self.ms


@dataclass(frozen=True)
class _Lognormal:
    mu: float
    sigma: float

    def __call__(self, rng: np.random.Generator) -> float:
        return float(rng.lognormal(self.mu, self.sigma))


@dataclass(frozen=True)
class _Mixture:
    cumulative: tuple[float, ...]
    parts: tuple[Sampler, ...]

    def __call__(self, rng: np.random.Generator) -> float:
        u = rng.random()
        for edge, part in zip(self.cumulative, self.parts, strict=True):
            if u < edge:
                return part(rng)
        return self.parts[-1](rng)


def exp_sampler(mean_ms: float) -> Sampler:
    """Exponential durations with the given mean (ms)."""
    _positive("mean_ms", mean_ms)
    return _Exponential(float(mean_ms))


def fixed_sampler(ms: float) -> Sampler:
    """The same duration (ms) every time."""
    if not (math.isfinite(ms) and ms >= 0):
        raise ValueError(f"ms must be a finite duration >= 0, got {ms!r}")
    return _Fixed(float(ms))


def lognormal_sampler(p50_ms: float, p99_ms: float) -> Sampler:
    """Lognormal durations fixed by their median and 99th percentile (ms).

    ln X ~ Normal(mu, sigma) with mu = ln p50 and sigma = ln(p99/p50) / z_0.99.
    """
    _positive("p50_ms", p50_ms)
    if not p99_ms > p50_ms:
        raise ValueError(f"p99_ms must exceed p50_ms ({p50_ms!r}), got {p99_ms!r}")
    sigma = math.log(p99_ms / p50_ms) / NormalDist().inv_cdf(0.99)
    return _Lognormal(math.log(p50_ms), sigma)


def mixture_sampler(parts: Sequence[tuple[float, Sampler]]) -> Sampler:
    """A mixture: with probability ``share`` draw from that part's sampler.

    Shares must be positive and sum to 1; the parts are plain ``draw(rng)`` samplers.
    """
    if not parts:
        raise ValueError("a mixture needs at least one (share, sampler) part")
    shares = np.array([float(s) for s, _ in parts])
    if np.any(shares <= 0) or abs(shares.sum() - 1.0) > 1e-9:
        raise ValueError(f"mixture shares must be positive and sum to 1, got {shares.tolist()}")
    return _Mixture(tuple(np.cumsum(shares).tolist()), tuple(p for _, p in parts))


def exp_quantile(mean_ms: float) -> Callable[[float], float]:
    """Quantile function of an exponential flush time: Q(u) = -mean ln(1 - u)."""
    _positive("mean_ms", mean_ms)
    return lambda u: -mean_ms * math.log1p(-u)


def lognormal_quantile(p50_ms: float, p99_ms: float) -> Callable[[float], float]:
    """Quantile function of the lognormal with the given median and 99th percentile:
    Q(u) = p50 exp(sigma z(u)), sigma = ln(p99 / p50) / z(0.99), z the standard normal's
    inverse cdf (from the standard library)."""
    _positive("p50_ms", p50_ms)
    if not p99_ms > p50_ms:
        raise ValueError("p99_ms must exceed p50_ms")
    z = NormalDist()
    sigma = math.log(p99_ms / p50_ms) / z.inv_cdf(0.99)
    return lambda u: p50_ms * math.exp(sigma * z.inv_cdf(u))


def _positive(name: str, value: float) -> None:
    if not (math.isfinite(value) and value > 0):
        raise ValueError(f"{name} must be a finite number > 0, got {value!r}")


def _takes_batch(sampler: Callable[..., float]) -> bool:
    try:
        inspect.signature(sampler).bind(None, 1)
    except (TypeError, ValueError):  # ValueError: no signature available (some builtins)
        return False
    return True


def _flush_caller(sampler: Callable[..., float]) -> Callable[[np.random.Generator, int], float]:
    """Call a flush sampler with the batch size if it accepts one; check what it returns."""
    with_batch = _takes_batch(sampler)

    def draw(rng: np.random.Generator, batch_commits: int) -> float:
        ms = float(sampler(rng, batch_commits) if with_batch else sampler(rng))
        if not (math.isfinite(ms) and ms >= 0):
            raise ValueError(f"a flush sampler returned {ms!r}; expected a duration >= 0 ms")
        return ms

    return draw


def _streams(seed: int) -> list[np.random.Generator]:
    # spawn(8)'s first seven children are spawn(7)'s: adding a role changed no other draws
    return [np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(8)]


def _frozen(values: Sequence[float] | np.ndarray, dtype: type = float) -> np.ndarray:
    array = np.array(values, dtype=dtype)
    array.flags.writeable = False
    return array


# ---------------------------------------------------------------------------- the device
class LogDevice:
    """A log device that works on one flush at a time and stops during stalls.

    ``stalls=(rate_per_s, duration_sampler)`` starts stalls as a Poisson process in time
    (drawn from ``rng``); a third element ``"drop"`` drops the starts that fall inside a
    stall instead of merging the overlap (see the module docstring); ``schedule`` adds
    stalls at given ``(start_ms, duration_ms)``.
    ``flush(work_ms)`` is a generator for ``yield from`` inside a simpy process: it returns
    once ``work_ms`` of unstalled time have passed since it was called.
    """

    def __init__(
        self,
        env: simpy.Environment,
        *,
        stalls: Stalls | None = None,
        rng: np.random.Generator | None = None,
        schedule: Sequence[tuple[float, float]] = (),
    ) -> None:
        self.env = env
        self.stall_count = 0
        self._active = 0
        self._stalled_since = 0.0
        self._stalled_total = 0.0
        self._resume: simpy.Event | None = None
        self._in_flight: simpy.Process | None = None
        self.can_stall = stalls is not None or len(schedule) > 0
        if stalls is not None:
            rate_per_s, duration = stalls[0], stalls[1]
            overlap = stalls[2] if len(stalls) > 2 else "merge"
            if overlap not in OVERLAPS:
                raise ValueError(f"stall overlap must be one of {OVERLAPS}, got {overlap!r}")
            _positive("stall rate_per_s", rate_per_s)
            if rng is None:
                raise ValueError("Poisson stalls need an rng")
            env.process(self._poisson_stalls(1000.0 / rate_per_s, duration, rng,
                                             overlap == "drop"))
        for start_ms, duration_ms in schedule:
            env.process(self._scheduled_stall(float(start_ms), float(duration_ms)))

    @property
    def stalled(self) -> bool:
        return self._active > 0

    def stalled_ms(self) -> float:
        """Time (ms) the device has been stalled so far (union of the stall intervals)."""
        ongoing = self.env.now - self._stalled_since if self._active else 0.0
        return self._stalled_total + ongoing

    def flush(self, work_ms: float):
        if not self.can_stall:  # fast path, same result: nothing can interrupt the flush
            yield self.env.timeout(work_ms)
            return
        remaining = work_ms
        while True:
            while self._active:
                yield self._resume
            started = self.env.now
            self._in_flight = self.env.active_process
            try:
                yield self.env.timeout(remaining)
            except simpy.Interrupt:
                remaining = max(0.0, remaining - (self.env.now - started))
            else:
                return
            finally:
                self._in_flight = None

    def _poisson_stalls(self, mean_gap_ms: float, duration: Sampler, rng: np.random.Generator,
                        drop: bool = False):
        while True:
            yield self.env.timeout(rng.exponential(mean_gap_ms))
            if drop:  # the next gap starts when this stall ends (memoryless thinning)
                yield from self._one_stall(float(duration(rng)))
            else:
                self.env.process(self._one_stall(float(duration(rng))))

    def _scheduled_stall(self, start_ms: float, duration_ms: float):
        yield self.env.timeout(start_ms)
        yield from self._one_stall(duration_ms)

    def _one_stall(self, duration_ms: float):
        if not (math.isfinite(duration_ms) and duration_ms >= 0):
            raise ValueError(f"a stall duration sampler returned {duration_ms!r}")
        self.stall_count += 1
        self._active += 1
        if self._active == 1:
            self._stalled_since = self.env.now
            self._resume = self.env.event()
            if self._in_flight is not None:
                self._in_flight.interrupt("stall")
        yield self.env.timeout(duration_ms)
        self._active -= 1
        if self._active == 0:
            self._stalled_total += self.env.now - self._stalled_since
            self._resume.succeed()


# ---------------------------------------------------------------------------- the writer
class _Writer:
    """One log writer in front of one device; calls ``on_durable(batch, now)`` per flush."""

    def __init__(
        self,
        env: simpy.Environment,
        device: LogDevice,
        flush_ms: Callable[..., float],
        rng: np.random.Generator,
        on_durable: Callable[[list[int], float], None],
        *,
        mode: str,
        gather_window_ms: float | None = None,
        gather_target: int | None = None,
    ) -> None:
        if mode not in MODES:
            raise ValueError(f"mode must be one of {MODES}, got {mode!r}")
        if mode == "batched":
            if gather_window_ms is None and gather_target is None:
                raise ValueError("batched mode needs gather_window_ms or gather_target (or both)")
            if gather_window_ms is not None and not gather_window_ms >= 0:
                raise ValueError(f"gather_window_ms must be >= 0, got {gather_window_ms!r}")
            if gather_target is not None and gather_target < 1:
                raise ValueError(f"gather_target must be >= 1, got {gather_target!r}")
        elif gather_window_ms is not None or gather_target is not None:
            raise ValueError(f"gather settings apply to mode 'batched' only, not {mode!r}")
        self.env = env
        self.device = device
        self.mode = mode
        self.window = math.inf if gather_window_ms is None else float(gather_window_ms)
        self.target = math.inf if gather_target is None else gather_target
        self._draw = _flush_caller(flush_ms)
        self._rng = rng
        self._on_durable = on_durable
        self.pending: deque[int] = deque()
        self._first_at = 0.0
        self._wake: simpy.Event | None = None
        self._want: float = 1
        self.starts: list[float] = []
        self.ends: list[float] = []
        self.sizes: list[int] = []
        env.process(self._run())

    def submit(self, item: int) -> None:
        if not self.pending:
            self._first_at = self.env.now
        self.pending.append(item)
        if self._wake is not None and len(self.pending) >= self._want:
            self._wake.succeed()
            self._wake = None

    def _run(self):
        env = self.env
        while True:
            if not self.pending:
                self._want = 1
                self._wake = env.event()
                yield self._wake
            if self.mode == "batched":
                yield from self._gather()
            if self.mode == "one_per_commit":
                batch = [self.pending.popleft()]
            else:
                batch = list(self.pending)
                self.pending.clear()
            work = self._draw(self._rng, len(batch))
            started = env.now
            yield from self.device.flush(work)
            self.starts.append(started)
            self.ends.append(env.now)
            self.sizes.append(len(batch))
            self._on_durable(batch, env.now)

    def _gather(self):
        env = self.env
        deadline = self._first_at + self.window
        if len(self.pending) >= self.target or env.now >= deadline:
            return
        self._want = self.target
        self._wake = env.event()
        if math.isinf(deadline):
            yield self._wake
        else:
            yield self._wake | env.timeout(deadline - env.now)
        self._wake = None

    def log_between(self, t0: float, t1: float) -> tuple[np.ndarray, float]:
        """Sizes of the flushes ending in (t0, t1] and the busy time (ms) inside [t0, t1]."""
        starts, ends = np.array(self.starts), np.array(self.ends)
        sizes = np.array(self.sizes, dtype=int)
        inside = (ends > t0) & (ends <= t1)
        busy = np.clip(np.minimum(ends, t1) - np.maximum(starts, t0), 0.0, None).sum()
        return sizes[inside], float(busy)


def _cpu_station(env, cpu_servers, cpu_ms_per_commit):
    if cpu_servers is None and cpu_ms_per_commit is None:
        return None
    if cpu_servers is None or cpu_ms_per_commit is None or cpu_servers < 1:
        raise ValueError("a CPU station needs cpu_servers >= 1 and cpu_ms_per_commit together")
    return simpy.Resource(env, capacity=int(cpu_servers))


def _cpu_service(env, cpu, cpu_ms_per_commit, rng):
    """Generator: wait for one of the CPU servers (FIFO) and use it for one commit."""
    with cpu.request() as request:
        yield request
        yield env.timeout(float(cpu_ms_per_commit(rng)))


# ---------------------------------------------------------------------------- results
@dataclass(frozen=True, eq=False)
class OpenResult:
    """An open-arrival run; times in ms, rates per second, measured after the warm-up.

    ``response_ms``: per measured commit, from arrival to durable (CPU included).
    ``cpu_response_ms``: per measured commit, from arrival to leaving the CPU (or None).
    ``batch_sizes`` / ``flushes``: the flushes that ended inside the measurement window,
    which runs from the first measured arrival to the last measured completion.
    """

    response_ms: np.ndarray
    flushes: int
    batch_sizes: np.ndarray
    simulated_s: float
    throughput_per_s: float
    writer_busy_share: float
    stall_count: int
    stalled_share: float
    cpu_response_ms: np.ndarray | None


@dataclass(frozen=True, eq=False)
class ClosedResult:
    """A closed run (N sessions); X in commits/s, times in ms, after the warm-up."""

    throughput_per_s: float
    mean_response_ms: float
    response_ms: np.ndarray
    flushes: int
    batch_sizes: np.ndarray
    simulated_s: float
    writer_busy_share: float
    stall_count: int


@dataclass(frozen=True, eq=False)
class DeferredResult:
    """A deferred-commit run; per measured commit (arrived inside the window) in ms.

    ``exposure_ms``: from acknowledgement to the completion of the flush that holds it.
    ``handed_ms``: from acknowledgement to the start of that flush (when the record is
    handed to the device: what a crash of the database process alone would lose).
    ``at_risk_time_avg``: the exact time integral over the window of the number of
    acknowledged-but-not-durable commits, divided by the window's length.
    ``at_risk_samples``: that number seen at Poisson inspection instants inside the window.
    ``commit_rate_per_s``: measured commits per second of window.
    ``writer_busy_share``: the share of the window in which a flush is in progress
    (started and not yet complete, any wait for a stall included).
    """

    ack_ms: np.ndarray
    exposure_ms: np.ndarray
    handed_ms: np.ndarray
    at_risk_time_avg: float
    at_risk_samples: np.ndarray
    at_risk_max: int
    commit_rate_per_s: float
    flushes: int
    batch_sizes: np.ndarray
    window_s: float
    stall_count: int
    writer_busy_share: float


@dataclass(frozen=True, eq=False)
class DualResult:
    """A dual-device run; per measured commit in ms from its arrival.

    ``response_ms``: acknowledgement (min or max of the two durable times).
    ``lag_ms``: from acknowledgement until the second copy is durable (0 for "both").
    ``durable_a_ms`` / ``durable_b_ms``: each device's own durable time.
    """

    response_ms: np.ndarray
    lag_ms: np.ndarray
    durable_a_ms: np.ndarray
    durable_b_ms: np.ndarray
    a_first_share: float
    flushes_a: int
    flushes_b: int
    batch_sizes_a: np.ndarray
    batch_sizes_b: np.ndarray
    simulated_s: float


# ---------------------------------------------------------------------------- open arrivals
def _poisson_arrivals(env, rate_per_s, rng, arrive):
    """Generator: call ``arrive(i)`` for i = 0, 1, ... at Poisson instants, forever."""
    mean_gap_ms = 1000.0 / rate_per_s
    i = 0
    while True:
        for gap in rng.exponential(mean_gap_ms, _BLOCK).tolist():
            yield env.timeout(gap)
            arrive(i)
            i += 1


def run_open(
    rate_per_s: float,
    flush_ms: Callable[..., float],
    *,
    mode: str,
    seed: int,
    commits: int = 100_000,
    warmup_commits: int = 2_000,
    stalls: Stalls | None = None,
    gather_window_ms: float | None = None,
    gather_target: int | None = None,
    cpu_servers: int | None = None,
    cpu_ms_per_commit: Sampler | None = None,
) -> OpenResult:
    """Poisson commits at ``rate_per_s`` through one log writer (see the module docstring).

    The first ``warmup_commits`` commits are not measured; arrivals go on after the last
    measured one so that it sees the same load. With a CPU station each commit first takes
    ``cpu_ms_per_commit`` on one of ``cpu_servers`` servers (FIFO) and then joins the writer.
    """
    _positive("rate_per_s", rate_per_s)
    if commits < 1 or warmup_commits < 0:
        raise ValueError("commits must be >= 1 and warmup_commits >= 0")
    total = warmup_commits + commits
    rngs = _streams(seed)
    env = simpy.Environment()
    device = LogDevice(env, stalls=stalls, rng=rngs[_STALLS_A])
    arrived = np.full(total, np.nan)
    durable = np.full(total, np.nan)
    left_cpu = np.full(total, np.nan)
    finished = env.event()
    outstanding = total

    def on_durable(batch: list[int], now: float) -> None:
        nonlocal outstanding
        for i in batch:
            if i < total:
                durable[i] = now
                outstanding -= 1
        if outstanding == 0 and not finished.triggered:
            finished.succeed()

    writer = _Writer(
        env, device, flush_ms, rngs[_FLUSH_A], on_durable, mode=mode,
        gather_window_ms=gather_window_ms, gather_target=gather_target,
    )
    cpu = _cpu_station(env, cpu_servers, cpu_ms_per_commit)

    def through_cpu(i: int):
        yield from _cpu_service(env, cpu, cpu_ms_per_commit, rngs[_CPU])
        if i < total:
            left_cpu[i] = env.now
        writer.submit(i)

    def arrive(i: int) -> None:
        if i < total:
            arrived[i] = env.now
        if cpu is None:
            writer.submit(i)
        else:
            env.process(through_cpu(i))

    env.process(_poisson_arrivals(env, rate_per_s, rngs[_ARRIVALS], arrive))
    env.run(until=finished)

    t0, t1 = arrived[warmup_commits], env.now
    sizes, busy = writer.log_between(t0, t1)
    window = t1 - t0
    measured = slice(warmup_commits, total)
    return OpenResult(
        response_ms=_frozen(durable[measured] - arrived[measured]),
        flushes=int(sizes.size),
        batch_sizes=_frozen(sizes, int),
        simulated_s=t1 / 1000.0,
        throughput_per_s=float(sizes.sum()) / window * 1000.0 if window > 0 else math.nan,
        writer_busy_share=busy / window if window > 0 else math.nan,
        stall_count=device.stall_count,
        stalled_share=device.stalled_ms() / t1 if t1 > 0 else 0.0,
        cpu_response_ms=None if cpu is None else _frozen(left_cpu[measured] - arrived[measured]),
    )


# ---------------------------------------------------------------------------- closed sessions
def run_closed(
    sessions: int,
    think_mean_ms: float,
    flush_ms: Callable[..., float],
    *,
    think: str = "exponential",
    mode: str = "group",
    seed: int,
    commits: int | None = None,
    flushes: int | None = None,
    warmup: int = 2_000,
    stalls: Stalls | None = None,
    gather_window_ms: float | None = None,
    gather_target: int | None = None,
    cpu_servers: int | None = None,
    cpu_ms_per_commit: Sampler | None = None,
) -> ClosedResult:
    """N sessions: each thinks (mean ``think_mean_ms``), commits, waits until durable, repeats.

    Think time is ``"exponential"`` or ``"fixed"`` and starts at the acknowledgement; all
    sessions start thinking at time 0. The warm-up is the first ``warmup`` completed
    commits (rounded up to the end of the flush that holds the last of them); then either
    ``commits`` completed commits or ``flushes`` flushes are measured (give exactly one;
    the run ends at a flush completion). X = measured commits / measured time; R is the
    mean response (ms) of the measured commits, which includes CPU time when a CPU
    station is given.
    """
    if sessions < 1:
        raise ValueError(f"sessions must be >= 1, got {sessions!r}")
    if think_mean_ms < 0 or not math.isfinite(think_mean_ms):
        raise ValueError(f"think_mean_ms must be a finite number >= 0, got {think_mean_ms!r}")
    if think not in ("exponential", "fixed"):
        raise ValueError(f"think must be 'exponential' or 'fixed', got {think!r}")
    if (commits is None) == (flushes is None):
        raise ValueError("give exactly one of commits or flushes")
    if (commits is not None and commits < 1) or (flushes is not None and flushes < 1):
        raise ValueError("commits or flushes must be >= 1")
    rngs = _streams(seed)
    think_rng = rngs[_ARRIVALS]
    env = simpy.Environment()
    device = LogDevice(env, stalls=stalls, rng=rngs[_STALLS_A])
    issued = [0.0] * sessions
    acked = [env.event() for _ in range(sessions)]
    responses: list[float] = []
    state = {"completed": 0, "t_warm": None, "flushes": 0}
    finished = env.event()

    def on_durable(batch: list[int], now: float) -> None:
        measuring = state["t_warm"] is not None
        for k in batch:
            if measuring:
                responses.append(now - issued[k])
            event, acked[k] = acked[k], env.event()
            event.succeed()
        state["completed"] += len(batch)
        if not measuring:
            if state["completed"] >= warmup:
                state["t_warm"] = now
            return
        state["flushes"] += 1
        done = (commits is not None and len(responses) >= commits) or (
            flushes is not None and state["flushes"] >= flushes
        )
        if done and not finished.triggered:
            finished.succeed()

    writer = _Writer(
        env, device, flush_ms, rngs[_FLUSH_A], on_durable, mode=mode,
        gather_window_ms=gather_window_ms, gather_target=gather_target,
    )
    cpu = _cpu_station(env, cpu_servers, cpu_ms_per_commit)
    if think == "exponential":
        def think_ms() -> float:
            return float(think_rng.exponential(think_mean_ms)) if think_mean_ms > 0 else 0.0
    else:
        def think_ms() -> float:
            return think_mean_ms

    def session(k: int):
        while True:
            yield env.timeout(think_ms())
            issued[k] = env.now
            if cpu is not None:
                yield from _cpu_service(env, cpu, cpu_ms_per_commit, rngs[_CPU])
            event = acked[k]
            writer.submit(k)
            yield event

    for k in range(sessions):
        env.process(session(k))
    env.run(until=finished)

    t0, t1 = state["t_warm"], env.now
    sizes, busy = writer.log_between(t0, t1)
    response = _frozen(responses)
    return ClosedResult(
        throughput_per_s=response.size / (t1 - t0) * 1000.0,
        mean_response_ms=float(response.mean()),
        response_ms=response,
        flushes=int(sizes.size),
        batch_sizes=_frozen(sizes, int),
        simulated_s=t1 / 1000.0,
        writer_busy_share=busy / (t1 - t0),
        stall_count=device.stall_count,
    )


# ---------------------------------------------------------------------------- deferred commit
def run_deferred(
    rate_per_s: float,
    flush_ms: Callable[..., float],
    *,
    flush_every_ms: float,
    buffer_bytes: int,
    log_bytes_per_commit: int,
    seed: int,
    duration_s: float,
    warmup_s: float | None = None,
    stalls: Stalls | None = None,
    inspections: int = 20_000,
) -> DeferredResult:
    """Deferred commit: acknowledged once the record is in the log buffer.

    Poisson commits at ``rate_per_s``, each ``log_bytes_per_commit`` bytes. A record holds
    its space in the buffer (``buffer_bytes``) until the flush that writes it completes. A
    commit that finds no space (or others already waiting) waits, first come first served,
    and is acknowledged when a flush completion frees enough space.

    The background writer flushes at the ticks k * ``flush_every_ms`` (k = 1, 2, ...):
    each flush takes every acknowledged record not yet being flushed (nothing happens at
    a tick with an empty buffer). When a flush outlasts the interval, the ticks missed
    during it collapse into one flush that starts as soon as it ends and takes everything
    accumulated; the writer then goes back to the tick grid. The buffer filling up does
    not trigger an early flush.

    Measured: commits arriving in the window [warmup_s, duration_s] (the run continues
    until each of them is durable, so no exposure is cut short). ``warmup_s`` defaults to
    ten flush intervals.
    """
    _positive("rate_per_s", rate_per_s)
    _positive("flush_every_ms", flush_every_ms)
    _positive("duration_s", duration_s)
    if log_bytes_per_commit < 1 or buffer_bytes < log_bytes_per_commit:
        raise ValueError(
            f"buffer_bytes ({buffer_bytes!r}) must hold at least one commit of "
            f"log_bytes_per_commit ({log_bytes_per_commit!r}) bytes"
        )
    t0 = 10 * flush_every_ms if warmup_s is None else warmup_s * 1000.0
    t1 = duration_s * 1000.0
    if not 0 <= t0 < t1:
        raise ValueError(f"warmup_s must be >= 0 and below duration_s ({duration_s!r})")
    rngs = _streams(seed)
    env = simpy.Environment()
    device = LogDevice(env, stalls=stalls, rng=rngs[_STALLS_A])
    draw = _flush_caller(flush_ms)
    capacity = buffer_bytes // log_bytes_per_commit  # records that fit in the buffer

    arrived: list[float] = []
    acked: list[float] = []
    durable: list[float] = []
    handed: list[float] = []
    unflushed: list[int] = []
    blocked: deque[int] = deque()
    risk = {"count": 0, "last": 0.0, "area": 0.0, "max": 0, "open": 0}
    samples: list[int] = []
    finished = env.event()
    sizes: list[int] = []
    flush_ends: list[float] = []
    flush_starts: list[float] = []

    def change_at_risk(delta: int) -> None:
        now = env.now
        overlap = min(now, t1) - max(risk["last"], t0)
        if overlap > 0:
            risk["area"] += risk["count"] * overlap
        risk["last"] = now
        risk["count"] += delta
        risk["max"] = max(risk["max"], risk["count"])

    def acknowledge(i: int) -> None:
        acked[i] = env.now
        unflushed.append(i)
        change_at_risk(+1)

    def arrive(i: int) -> None:
        arrived.append(env.now)
        acked.append(math.nan)
        durable.append(math.nan)
        handed.append(math.nan)
        if t0 <= env.now <= t1:
            risk["open"] += 1
        # A record holds buffer space from its acknowledgement until it is durable, so the
        # records in the buffer are exactly the at-risk commits.
        if not blocked and risk["count"] < capacity:
            acknowledge(i)
        else:
            blocked.append(i)

    def background_writer():
        nonlocal unflushed
        k = 1
        while True:
            tick = k * flush_every_ms
            if env.now < tick:
                yield env.timeout(tick - env.now)
            started = env.now
            if unflushed:
                batch, unflushed = unflushed, []
                for i in batch:
                    handed[i] = started
                yield from device.flush(draw(rngs[_FLUSH_A], len(batch)))
                now = env.now
                for i in batch:
                    durable[i] = now
                    if t0 <= arrived[i] <= t1:
                        risk["open"] -= 1
                change_at_risk(-len(batch))
                sizes.append(len(batch))
                flush_ends.append(now)
                flush_starts.append(started)
                while blocked and risk["count"] < capacity:
                    acknowledge(blocked.popleft())
                if now >= t1 and risk["open"] == 0 and not finished.triggered:
                    finished.succeed()
            k = max(k + 1, int(started // flush_every_ms) + 1)

    def inspector(rng: np.random.Generator):
        yield env.timeout(t0)
        mean_gap = (t1 - t0) / inspections
        while True:
            yield env.timeout(rng.exponential(mean_gap))
            if env.now > t1:
                return
            samples.append(risk["count"])

    env.process(_poisson_arrivals(env, rate_per_s, rngs[_ARRIVALS], arrive))
    env.process(background_writer())
    if inspections > 0:
        env.process(inspector(rngs[_INSPECT]))
    env.run(until=t1)
    change_at_risk(0)  # close the integral at t1
    if risk["open"] > 0:
        env.run(until=finished)

    arr = np.array(arrived)
    measured = (arr >= t0) & (arr <= t1)
    ack = np.array(acked)[measured]
    dur = np.array(durable)[measured]
    ends = np.array(flush_ends)
    in_window = (ends > t0) & (ends <= t1)
    window = t1 - t0
    busy = np.clip(np.minimum(ends, t1) - np.maximum(np.array(flush_starts), t0), 0.0, None)
    return DeferredResult(
        ack_ms=_frozen(ack - arr[measured]),
        exposure_ms=_frozen(dur - ack),
        handed_ms=_frozen(np.array(handed)[measured] - ack),
        at_risk_time_avg=risk["area"] / window,
        at_risk_samples=_frozen(samples, int),
        at_risk_max=int(risk["max"]),
        commit_rate_per_s=int(measured.sum()) / window * 1000.0,
        flushes=int(in_window.sum()),
        batch_sizes=_frozen(np.array(sizes, dtype=int)[in_window], int),
        window_s=window / 1000.0,
        stall_count=device.stall_count,
        writer_busy_share=float(busy.sum()) / window,
    )


# ---------------------------------------------------------------------------- dual device
def run_dual(
    rate_per_s: float,
    flush_a_ms: Callable[..., float],
    flush_b_ms: Callable[..., float],
    *,
    ack_after: str = "first",
    seed: int,
    commits: int = 100_000,
    warmup: int = 2_000,
    stalls_a: Stalls | None = None,
    stalls_b: Stalls | None = None,
    shared_cause_share: float = 0.0,
    transfer_ms: Callable[[int], float] | None = None,
) -> DualResult:
    """The log written to two devices, each with its own natural-group-commit writer.

    Both writers see the same Poisson commit stream; each coalesces what arrived while it
    was busy. A commit is acknowledged at the first (``"first"``) or the second
    (``"both"``) of its two durable times. Device a uses the same random streams as
    ``run_open`` with the same seed, so its durable times equal that run's responses.
    There is no CPU station here.

    Shared cause (``shared_cause_share`` s > 0): the flush samplers are then quantile
    functions ``Q(u) -> ms`` (``exp_quantile``, ``lognormal_quantile``). Each flush of a
    draws its own uniform u; a flush of b that starts at the same instant as one of a
    (both writers idle when a commit arrives) uses, with chance s (one draw per flush of
    b), that flush's u, otherwise its own. ``transfer_ms(batch)``, if given, is added to
    every flush of both devices. Stalls stay independent per device.
    """
    if ack_after not in ("first", "both"):
        raise ValueError(f"ack_after must be 'first' or 'both', got {ack_after!r}")
    _positive("rate_per_s", rate_per_s)
    if commits < 1 or warmup < 0:
        raise ValueError("commits must be >= 1 and warmup >= 0")
    if not 0.0 <= shared_cause_share <= 1.0:
        raise ValueError(f"shared_cause_share must be in [0, 1], got {shared_cause_share!r}")
    total = warmup + commits
    rngs = _streams(seed)
    env = simpy.Environment()
    if shared_cause_share > 0:
        flush_a_ms, flush_b_ms = _shared_flushes(env, flush_a_ms, flush_b_ms,
                                                 shared_cause_share, rngs[_SHARED],
                                                 transfer_ms)
    elif transfer_ms is not None:
        raise ValueError("transfer_ms goes with shared_cause_share > 0 (quantile samplers)")
    arrived = np.full(total, np.nan)
    done = {"a": np.full(total, np.nan), "b": np.full(total, np.nan)}
    outstanding = 2 * total
    finished = env.event()

    def recorder(times: np.ndarray) -> Callable[[list[int], float], None]:
        def on_durable(batch: list[int], now: float) -> None:
            nonlocal outstanding
            for i in batch:
                if i < total:
                    times[i] = now
                    outstanding -= 1
            if outstanding == 0 and not finished.triggered:
                finished.succeed()

        return on_durable

    writers = [
        _Writer(
            env, LogDevice(env, stalls=stalls, rng=rngs[stall_role]), flush, rngs[flush_role],
            recorder(done[name]), mode="group",
        )
        for name, flush, flush_role, stalls, stall_role in (
            ("a", flush_a_ms, _FLUSH_A, stalls_a, _STALLS_A),
            ("b", flush_b_ms, _FLUSH_B, stalls_b, _STALLS_B),
        )
    ]

    def arrive(i: int) -> None:
        if i < total:
            arrived[i] = env.now
        for writer in writers:
            writer.submit(i)

    env.process(_poisson_arrivals(env, rate_per_s, rngs[_ARRIVALS], arrive))
    env.run(until=finished)

    m = slice(warmup, total)
    t_a, t_b = done["a"][m] - arrived[m], done["b"][m] - arrived[m]
    first, second = np.minimum(t_a, t_b), np.maximum(t_a, t_b)
    response = first if ack_after == "first" else second
    t0, t1 = arrived[warmup], env.now
    (sizes_a, _), (sizes_b, _) = (w.log_between(t0, t1) for w in writers)
    return DualResult(
        response_ms=_frozen(response),
        lag_ms=_frozen(second - response),
        durable_a_ms=_frozen(t_a),
        durable_b_ms=_frozen(t_b),
        a_first_share=float(np.mean(t_a < t_b)),
        flushes_a=int(sizes_a.size),
        flushes_b=int(sizes_b.size),
        batch_sizes_a=_frozen(sizes_a, int),
        batch_sizes_b=_frozen(sizes_b, int),
        simulated_s=t1 / 1000.0,
    )


def _shared_flushes(env: simpy.Environment, q_a: Callable[[float], float],
                    q_b: Callable[[float], float], share: float, coin: np.random.Generator,
                    transfer_ms: Callable[[int], float] | None):
    """Flush samplers (rng, batch) -> ms for the two devices of ``run_dual`` under a shared
    cause: a flush of b starting when one of a started reuses its uniform with chance
    ``share``. A flush's time is drawn when its writer starts it; at one instant a's writer
    runs first (it is the first to be woken by an arrival)."""
    last = {"t": -math.inf, "u": 0.0}

    def extra(batch: int) -> float:
        return float(transfer_ms(batch)) if transfer_ms is not None else 0.0

    def flush_a(rng: np.random.Generator, batch: int) -> float:
        u = float(rng.random())
        last["t"], last["u"] = env.now, u
        return float(q_a(u)) + extra(batch)

    def flush_b(rng: np.random.Generator, batch: int) -> float:
        u = float(rng.random())
        if float(coin.random()) < share and last["t"] == env.now:
            u = last["u"]
        return float(q_b(u)) + extra(batch)

    return flush_a, flush_b
