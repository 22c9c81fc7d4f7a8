"""The discrete-event simulator: the second, independent path to the evaluator's numbers.

It implements the system model the analytic evaluator shares, commit by commit: Poisson
arrivals or closed sessions (exponential or fixed think time), the host's CPU station (c
FIFO servers, exponential work dilated by the other work), the log writer of each strategy
(natural group commit, one flush per commit, batched with its gathering window counted from
the oldest pending commit's arrival, even during the previous flush; deferred with timer
ticks at k x interval and its buffer bound, two devices each with its own natural writer),
flush time = device draw + transfer beyond the profiled block + the writer's CPU and hand-
over + stall delay, time-based device stalls (one that would start during a stall is
dropped), wake costs (the k-th woken commit waits ceil(k / cpus) wake costs), and regimes in
time. A dual-device log's shared-cause share s pairs flushes: one of the second device that
starts together with one of the first reuses, with chance s, its quantile draw
(``sim.engine.SharedCause``); the two devices stall independently.

Two modes:

- **Steady segments** (always): each regime is simulated as its own steady state in many
  independent lanes (replications). Every lane starts empty (device stalls start in their
  own equilibrium; a deferred lane at a random phase of the tick grid), is warmed up for 10
  relaxation scales (20 for closed sessions; the scale is the slowest of the mean flush,
  the think time and a loaded queue's relaxation time) plus three gathering windows or
  flush intervals and one stall p99.9 duration, and is then measured over a window. The
  lanes' windows add up to about ``commits`` commits per regime (default 1,000,000) and,
  when the regime has stalls, to at least 500 stall intervals per million commits
  requested (5 at least), since a stalled regime's tail is made by its stalls, not by its
  commits, but to no more than 16 times the requested commits' own time: rarer stalls are
  simulated in proportion, and a segment expecting fewer than 50 says so in its note. A
  regime's figures come from the commits that ARRIVED in its measurement windows;
  per-time figures are over the same windows. Lanes are independent, so each
  segment also reports the standard error of its ack mean (``Segment.ack_mean_se_ms``) and
  of its at-risk means. A regime in which a resource's capacity is below the offered rate
  is reported saturated (resource, rate, backlog growth, drain time), not simulated.
- **Continuous timeline** (when ``duration_s`` is given): the timeline [0, duration) with
  the regimes switching at their periods and offsets, cut into consecutive segments run as
  lanes; each segment starts empty one warm-up before its start (the warm-up of the
  regimes in force shortly before, simulated with the real schedule), and segment starts
  are moved out of saturated regimes and their drain, so a backlog is never cut. This
  gives the per-window series.

Figures as defined here (where a definition had to be chosen): the wake order within a
batch is join order; a dual-device strategy's mean batch and writer utilisation are the
larger of its two devices'; CPU utilisation is the share of the cpus' time taken by commit
work (dilated by the other work), not counting the writer's own; the blend's percentiles
(exposure windows and durable p99 included) come from the pooled commits.

Why it is fast, and what limits it. An interpreted loop costs about a microsecond per
event. Here one numpy step advances every lane at once (hundreds to thousands of lanes):
with open arrivals one step starts one flush in every lane whose next flush is already
decided, and a single search over all lanes' buffered joins finds what each flush carries,
so a deferred or bursty writer costs a step per flush, not per commit; with closed
sessions one step handles the next event of every lane (a think time ending, the CPU done,
a flush starting). Arrivals, service and flush times are drawn in blocks, and per-commit
results are gathered in bulk when a lane's flushes are known. The limit is the fixed cost
of the 30 to 60 numpy calls of a step (a few microseconds each) shared by the lanes, so
speed falls with fewer lanes: long warm-ups (stalls, long flush intervals) or many sessions
per lane. The open CPU station is a sequential recursion over each lane's arrivals (one
step per arrival of every lane) and costs about as much as the writer. Measured on the
shipped ledger case (tests/benchmarks/bench_simulator.py): about 2 to 3 million commits
per CPU second per strategy in open workloads, about 6 million for deferred commit (no
wait to record); closed sessions with a CPU station run at a few hundred thousand. Memory
is bounded by the histograms (log-spaced, 200 bins per decade), at most 2^20 at-risk
probes with two million commits' probe slots held for bulk counting, and the buffer of
commits not yet flushed, not by the number of commits: about 400 MiB resident for ten
million commits.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from commitadvisor.case import Case, regime_time_shares, strategy_name
from commitadvisor.results import Evaluation, Saturation, StrategyResult
from commitadvisor.sim import assemble as asm
from commitadvisor.sim.lanes import Combine, run_closed, run_measured_latency, run_open
from commitadvisor.sim.params import (
    DeviceParams,
    HostParams,
    Schedule,
    capacity,
    device_params,
    host_params,
    schedule_for,
    time_scale_ms,
)
from commitadvisor.sim.record import Series, Steady
from commitadvisor.summary import _settings

__all__ = ["simulate_case", "Simulation", "WindowRow", "Segment", "DEFAULT_COMMITS"]

DEFAULT_COMMITS = 1_000_000
_STALLS_PER_MILLION = 500  # stall intervals measured per million requested commits
# The stalls may stretch a segment's measured time to at most this many times the time of
# its requested commits (the shipped ledger case needs about 12): rarer stalls are
# simulated in proportion, and the segment says how few were expected
_MAX_STALL_STRETCH = 16.0
_FEW_STALLS = 50  # fewer expected stalls than this in a segment: its note says so
_WARM_SCALES = {"open": 10.0, "closed": 20.0}
_MAX_LANES_OPEN = 4096
_CLOSED_CELLS = 131_072  # lanes x sessions per step
# Lanes: more lanes share each step's fixed cost, more warm-ups cost commits; the total
# work (L x warm-up + measured) x (1 + L0 / L) is least at L = sqrt(measured x L0 / warm-up),
# with L0 the lane count whose per-lane work equals a step's fixed cost (measured here).
_L0 = {"open": 500.0, "closed": 500.0}


@dataclass(frozen=True)
class WindowRow:
    """One window of simulated time on the continuous timeline.

    ``commits`` arrived in the window; ``ack_*`` and ``exposure_p99_ms`` (host crash: from
    acknowledgement to durable; None when unbounded) are theirs; ``throughput_per_s``
    counts acknowledgements inside the window; ``flushes`` started in it (all devices);
    ``regime`` is the one in force at the window's start.
    """

    strategy: str
    start_s: float
    regime: str
    commits: int
    throughput_per_s: float
    ack_mean_ms: float | None
    ack_p50_ms: float | None
    ack_p99_ms: float | None
    exposure_p99_ms: float | None
    flushes: int


@dataclass(frozen=True)
class Segment:
    """How one steady segment (or the continuous timeline, regime ``"timeline"``) ran."""

    strategy: str
    regime: str
    lanes: int
    warmup_s: float
    measured_s_per_lane: float
    commits_measured: int
    commits_simulated: int
    ack_mean_se_ms: float | None = None  # standard error of the ack mean over the lanes
    at_risk_se: tuple[tuple[str, float | None], ...] = ()  # of each probed at-risk mean


@dataclass(frozen=True)
class Simulation:
    evaluation: Evaluation
    series: tuple[WindowRow, ...]
    seed: int
    duration_s: float | None
    window_s: float
    segments: tuple[Segment, ...]
    notes: tuple[str, ...] = ()

    def series_for(self, strategy: str) -> tuple[WindowRow, ...]:
        return tuple(r for r in self.series if r.strategy == strategy)

    def commits_simulated(self, strategy: str) -> int:
        """Every commit the simulator ran for this strategy, warm-ups included."""
        return sum(s.commits_simulated for s in self.segments if s.strategy == strategy)


def simulate_case(case: Case, *, seed: int, duration_s: float | None = None,
                  commits: int | None = None, window_s: float = 10.0,
                  progress: Callable[[float], None] | None = None) -> Simulation:
    """Simulate every strategy of ``case``: per regime (steady segments of about ``commits``
    measured commits each) and blended, plus, when ``duration_s`` is given, the per-window
    series of a continuous timeline of that many seconds (windows of ``window_s``).

    Pure: no printing, no files; all randomness from ``seed`` (the same case and seed give
    the same result). ``progress``, if given, is called with the fraction done (0..1).
    """
    if not isinstance(seed, int | np.integer) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed!r}")
    if duration_s is not None and not (math.isfinite(duration_s) and duration_s > 0):
        raise ValueError(f"duration_s must be a positive number of seconds, got {duration_s!r}")
    if commits is not None and commits < 100:
        raise ValueError(f"commits must be at least 100, got {commits!r}")
    if not (math.isfinite(window_s) and window_s > 0):
        raise ValueError(f"window_s must be a positive number of seconds, got {window_s!r}")
    if duration_s is not None and duration_s < window_s:
        raise ValueError(f"duration_s ({duration_s:g}) is shorter than one window "
                         f"({window_s:g} s)")
    target = commits or DEFAULT_COMMITS
    shares = regime_time_shares(case)
    host = host_params(case)
    devices = {n: device_params(case, n) for n in case.devices}
    schedule = schedule_for(case)
    names = case.regime_names()
    units = len(case.strategies) * (len(names) + (1 if duration_s else 0))
    done_units = [0]

    def unit_progress(frac: float) -> None:
        if progress is not None:
            progress(min(1.0, (done_units[0] + frac) / units))

    strategies, series, segments = [], [], []
    notes = [f"simulated with seed {seed}"]
    if host.kind == "closed" and any(r.commit_rate_factor != 1.0 for r in case.regimes):
        notes.append("commit_rate_factor applies to open arrivals only; the closed sessions "
                     "are unchanged in every regime")
    for si, s in enumerate(case.strategies):
        devs = [devices[n] for n in (s.devices if s.kind == "dual_device" else (s.device,))]
        fig = _figures(case, s, host, devs)
        results, measured = [], []
        for ri, reg in enumerate(names):
            rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(si, ri)))
            res, m, seg = _steady(case, s, host, devices, devs, schedule, ri, reg,
                                  shares[reg], target, rng, fig, unit_progress)
            results.append(res)
            measured.append(m)
            if seg is not None:
                segments.append(seg)
            done_units[0] += 1
            unit_progress(0.0)
        results = asm.with_commit_shares(results)
        blended = asm.blend(results, measured, fig)
        name = strategy_name(s)
        strategies.append(StrategyResult(name=name, kind=s.kind, settings=_settings(s),
                                         regimes=tuple(results), blended=blended))
        if duration_s:
            rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(si, 1000)))
            rows, seg = _timeline(case, s, name, host, devices, devs, schedule, duration_s,
                                  window_s, rng, results, unit_progress)
            series.extend(rows)
            segments.append(seg)
            done_units[0] += 1
            unit_progress(0.0)
    ev = Evaluation(title=case.title, method="simulated", regimes=tuple(shares.items()),
                    strategies=tuple(strategies), notes=tuple(notes), seed=int(seed))
    return Simulation(evaluation=ev, series=tuple(series), seed=int(seed),
                      duration_s=duration_s, window_s=window_s, segments=tuple(segments),
                      notes=tuple(notes))


# --------------------------------------------------------------------------- pieces
def _figures(case: Case, s, host: HostParams, devs: list[DeviceParams]) -> asm.Figures:
    single = ("one copy: losing this device loses every commit that only it holds, until "
              "the log is archived or replicated elsewhere")
    unb: list[tuple[str, str]] = []
    counts = [d.counts_as_durable for d in devs]
    if s.kind == "dual_device":
        if not any(counts):
            unb.append(("host_crash", "neither device counts as durable"))
        copies = (sum(counts) if s.ack_after == "both" else (1 if any(counts) else 0))
    else:
        unb.append(("device_loss", single))
        if not counts[0]:
            unb.append(("host_crash", f"{devs[0].name} has a volatile write cache not declared "
                        "as honouring flushes: a completed flush may not be on stable media"))
        copies = 0 if (s.kind == "deferred" or not counts[0]) else 1
    bound = float(s.buffer_bytes // host.log_bytes) if s.kind == "deferred" else None
    rec = case.recovery
    return asm.Figures(
        unbounded=tuple(unb), bound=bound, copies_at_ack=copies,
        devices=tuple(d.name for d in devs), cpus=host.cpus,
        per_year=tuple((k, getattr(rec, k).per_year) for k in
                       ("process_crash", "host_crash", "device_loss")),
        value_per_commit=rec.value_per_commit)


def _offered(host: HostParams, r: int) -> float | None:
    return host.open_rate_per_ms[r] if host.kind == "open" else None


def _closed_rate_guess(s, host: HostParams, devs: list[DeviceParams], r: int) -> float:
    """A rough closed throughput (per ms), only to size the segment: N / (Z + CPU + flush)."""
    flush = 0.0 if s.kind == "deferred" else min(d.latency[r].mean_ms for d in devs)
    cycle = (host.think_ms or 0.0) + host.cpu_mean_ms[r] + flush
    x = host.sessions / max(cycle, 1e-3)
    if host.cpus:
        x = min(x, host.cpus / host.cpu_mean_ms[r])
    return x


def _saturation(case: Case, s, host, devices, r: int, reg: str) -> Saturation | None:
    cap = capacity(s, host, devices, r)
    lam = _offered(host, r)
    if cap is None or lam is None or lam < cap.rate_per_ms:
        return None
    growth = (lam - cap.rate_per_ms) * 1000.0
    regime = case.regime(reg)
    drain = None
    if regime is not None:
        cap0 = capacity(s, host, devices, 0)
        lam0 = host.open_rate_per_ms[0]
        if cap0 is not None and lam0 < cap0.rate_per_ms:
            drain = growth * regime.duration_s / ((cap0.rate_per_ms - lam0) * 1000.0)
    msg = (f"{cap.what} saturates at {cap.rate_per_ms * 1000:,.0f} commits/s; "
           f"{lam * 1000:,.0f}/s are offered, so the backlog grows by {growth:,.0f} commits "
           "each second")
    if regime is not None:
        msg += (f" (about {growth * regime.duration_s:,.0f} over the {regime.duration_s:g} s "
                "regime")
        msg += f", drained {drain:,.1f} s after it ends)" if drain is not None else \
            ", and the normal regime cannot drain it)"
    return Saturation(resource=cap.resource, saturating_rate_per_s=cap.rate_per_ms * 1000.0,
                      offered_rate_per_s=lam * 1000.0, backlog_growth_per_s=growth,
                      drain_time_s=drain, message=msg)


def _warmup_ms(s, host, devices, r: int, rate: float | None) -> tuple[float, float, float]:
    scale, period, stall_p999 = time_scale_ms(s, host, devices, r, rate)
    warm = _WARM_SCALES[host.kind] * scale + 3.0 * period + stall_p999
    tail = 10.0 * scale + 2.0 * period + stall_p999
    return max(warm, 1.0), max(tail, 1.0), stall_p999


def _run(s, host, devs, schedule, rng, t_init, m0, m1, t_stop, rec, stationary, progress):
    if s.kind == "synchronous" and devs[0].measures_commit_latency:
        return run_measured_latency(host, devs[0], schedule, rng, t_init, m0, m1, t_stop, rec, s)
    if host.kind == "open":
        return run_open(s, host, devs, schedule, rng, t_init, t_stop, rec,
                        stationary=stationary, progress=progress)
    return run_closed(s, host, devs, schedule, rng, t_init, m0, m1, rec,
                      stationary=stationary, progress=progress)


def _steady(case, s, host, devices, devs, schedule: Schedule, r: int, reg: str, share: float,
            target: int, rng, fig: asm.Figures, progress):
    notes: list[str] = []
    if s.kind != "synchronous" and any(d.measures_commit_latency for d in devs):
        notes.append("a device's profile is commit latency seen in production; this strategy "
                     "uses it as the device's flush time, which overstates the flush")
    sat = _saturation(case, s, host, devices, r, reg)
    if sat is not None:
        return asm.saturated(reg, share, sat, fig.copies_at_ack, tuple(notes)), None, None
    rate = _offered(host, r)
    if rate is None:
        rate_guess = _closed_rate_guess(s, host, devs, r)
    else:
        rate_guess = rate
        cap = capacity(s, host, devices, r)
        if cap is not None and rate > 0.9 * cap.rate_per_ms:
            notes.append(f"{cap.what} runs at {rate / cap.rate_per_ms:.0%} of its capacity: "
                         "the steady state is slow to reach and its tail is uncertain")
    warm, tail, _ = _warmup_ms(s, host, devices, r, rate)
    stall_rate = max(d.stall_rate_per_ms[r] for d in devs)
    meas_total = target / max(rate_guess, 1e-12)
    stalls_expected = None
    if stall_rate > 0:
        stalls = max(5.0, _STALLS_PER_MILLION * target / 1e6)
        meas_total = min(max(meas_total, stalls / stall_rate),
                         _MAX_STALL_STRETCH * meas_total)
        stalls_expected = sum(d.stall_rate_per_ms[r] for d in devs) * meas_total
    if host.kind == "closed":
        max_lanes = max(8, min(_MAX_LANES_OPEN, _CLOSED_CELLS // host.sessions))
    else:
        max_lanes = _MAX_LANES_OPEN
    lanes = int(np.clip(math.sqrt(meas_total * _L0[host.kind] / warm), 4, max_lanes))
    lanes = int(min(lanes, max(4, meas_total // (0.25 * warm))))
    per_lane = meas_total / lanes
    # the deferred writer's ticks are fixed in time: each lane starts at its own random
    # phase of the tick grid, or every window would sample the same phases of the cycle
    phase = s.flush_every_ms if s.kind == "deferred" else 0.0
    t_init = rng.random(lanes) * phase
    m0 = t_init + warm
    m1 = m0 + per_lane
    t_stop = m1 + tail
    pinned = schedule.pinned(r)
    rec = Steady(m0, m1, Combine(s, devs).probed(), len(devs), rng)
    simulated = _run(s, host, devs, pinned, rng, t_init, m0, m1, t_stop, rec, True, progress)
    m = asm.measured_from(rec, reg, share)
    se = f" (standard error of the mean {m.ack_mean_se_ms:.2g} ms)" if m.ack_mean_se_ms else ""
    notes.append(f"steady segment: {lanes} independent lanes, warm-up {warm / 1000:.3g} s "
                 f"each, {m.commits:,} commits measured{se}")
    if stalls_expected is not None and stalls_expected < _FEW_STALLS:
        notes.append(f"device stalls are rare here: about {stalls_expected:.2g} expected in "
                     f"the {meas_total / 1000:,.0f} s measured (stall rate x measured time); "
                     "the stalls' effect on the tail is estimated from few events (more "
                     "--commits measure more of them)")
    seg = Segment(strategy_name(s), reg, lanes, warm / 1000.0, per_lane / 1000.0, m.commits,
                  simulated, m.ack_mean_se_ms, m.at_risk_se)
    return asm.regime_result(m, fig, tuple(notes)), m, seg


def _timeline(case, s, name, host, devices, devs, schedule: Schedule, duration_s: float,
              window_s: float, rng, results, progress):
    total = duration_s * 1000.0
    window = window_s * 1000.0
    windows = int(math.ceil(total / window - 1e-9))
    ids = range(len(schedule.names))
    warm_r = np.array([_warmup_ms(s, host, devices, r, _offered(host, r))[0] for r in ids])
    tail = max(_warmup_ms(s, host, devices, r, _offered(host, r))[1] for r in ids)
    def warm_at(t: np.ndarray) -> np.ndarray:
        # a segment's warm-up: the longest of the regimes in force during the longest
        # warm-up before its start (a burst that just ended still needs its own warm-up)
        look = t[:, None] - np.linspace(0.0, 1.0, 65)[None, :] * warm_r.max()
        return warm_r[schedule.index(look)].max(axis=1)

    # as for steady segments, the lane count that minimises the total work (each segment
    # simulates its own warm-up before its start), with the warm-up a start needs on average
    typical = float(warm_at(np.linspace(0.0, total, 1001)[:-1]).mean())
    cap = 512 if host.kind == "open" else max(8, min(512, _CLOSED_CELLS // host.sessions))
    lanes = int(np.clip(math.sqrt(total * _L0[host.kind] / typical), 1, cap))
    lanes = int(min(lanes, max(1, total // (0.25 * typical))))
    bounds = np.linspace(0.0, total, lanes + 1)
    unsafe = _unsafe_intervals(case, results, schedule, total, float(warm_r.max()))
    cuts = [0.0]
    for b in bounds[1:-1]:
        if any(a <= b < z for a, z in unsafe):
            continue
        if b > cuts[-1]:
            cuts.append(float(b))
    cuts.append(total)
    m0 = np.array(cuts[:-1])
    m1 = np.array(cuts[1:])
    warm = warm_at(m0)
    t_init = m0 - warm
    t_stop = m1 + tail
    rec = Series(m0, m1, window, windows)
    simulated = _run(s, host, devs, schedule, rng, t_init, m0, m1, t_stop, rec, True, progress)
    rows = []
    for w in range(windows):
        start = w * window
        length = min(window, total - start)
        rows.append(WindowRow(
            strategy=name, start_s=start / 1000.0, regime=schedule.name_at(start),
            commits=int(rec.arrivals[w]), throughput_per_s=float(rec.acks[w]) / length * 1000.0,
            ack_mean_ms=float(rec.ack_sum_ms[w] / rec.arrivals[w]) if rec.arrivals[w] else None,
            ack_p50_ms=rec.quantile("ack", w, 0.5), ack_p99_ms=rec.quantile("ack", w, 0.99),
            exposure_p99_ms=rec.quantile("exposure", w, 0.99) if rec.exposure_known else None,
            flushes=int(rec.flushes[w])))
    seg = Segment(name, "timeline", m0.size, float(warm.max()) / 1000.0,
                  float((m1 - m0).mean()) / 1000.0, int(rec.arrivals.sum()), simulated)
    return rows, seg


def _unsafe_intervals(case: Case, results, schedule: Schedule, total: float,
                      warm: float) -> list[tuple[float, float]]:
    """Stretches in which a segment must not start: a saturated regime's occurrences and
    their drain (a backlog is carried there), plus a warm-up after them."""
    out = []
    for r, res in enumerate(results):
        if res.saturation is None or r == 0:
            continue
        reg = case.regime(res.regime)
        drain = (res.saturation.drain_time_s or 0.0) * 1000.0
        p, d, o = reg.period_s * 1000.0, reg.duration_s * 1000.0, reg.offset_s * 1000.0
        k0 = math.floor((0.0 - o) / p) - 1
        k = k0
        while o + k * p < total:
            a = o + k * p
            out.append((a, a + d + drain + warm))
            k += 1
    if any(res.saturation is not None for res in results[:1]):
        out.append((0.0, total))  # the normal regime itself saturates: one lane
    return out

