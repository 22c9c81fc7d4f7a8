"""The tiers above the database: what a slow commit does to the response time at the top.

Each tier is a pool of ``threads`` serving the requests that reach it. A request holds a
thread for its own work plus its calls to the tier below, one after the other; the bottom
tier's calls go to the database, a share ``commit_share`` of them commits (acknowledged
with the strategy's commit latency distribution in the regime at hand) and the rest other
calls (the ``other_call`` profile). The holding time is built from the real distributions
by convolution, not replaced by an exponential, so that its tail is not misstated.

The wait for a thread is Erlang C's (M/M/c): the chance of waiting is C(c, a) on the offered
load a = lambda E[H] and the wait of those who wait is exponential with rate c mu - lambda,
P(W > t) = C e^{-(c mu - lambda) t} (Erlang 1917; Kleinrock, Queueing Systems vol. 1, 1975,
section 3.5). The holding time is not exponential here, so this wait law is an
approximation (exact for M/M/c); it is convolved with the holding time to give the tier's
response time. Calls are taken as independent draws within a regime; regimes are steady
states evaluated one at a time (quasi-static), never blended before the figures are read.

A tier whose offered load reaches its threads is reported as saturated, with the request
rate at which it saturates, never as a huge latency.

Pure: no I/O, no printing. Milliseconds throughout unless a name says otherwise.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

from commitadvisor.case import (
    NORMAL,
    Case,
    Deferred,
    DualDevice,
    Tier,
    strategy_name,
    tier_request_rates_per_s,
)
from commitadvisor.latency import (
    Exponential,
    Fixed,
    Latency,
    convolve,
    convolve_power,
    from_entry,
    mixture,
)
from commitadvisor.results import RegimeResult, StrategyResult

__all__ = [
    "erlang_b",
    "erlang_c",
    "erlang_c_mean_wait",
    "thread_wait_latency",
    "response_latency",
    "slow_request_chance",
    "calls_latency",
    "TierFigures",
    "StackSaturation",
    "StackRegime",
    "StackResult",
    "evaluate_stack",
    "evaluate_stacks",
    "APPROXIMATIONS",
]

AMPLIFICATION_MIN_MS = 0.01  # below this change of the commit p99 no factor is given

APPROXIMATIONS = (
    "thread wait: Erlang C (M/M/c) probability of waiting on the offered load, with its "
    "exponential wait law P(W > t) = C e^{-(c mu - lambda) t}; the holding times are not "
    "exponential, so the wait is an approximation (exact for M/M/c)",
    "calls: independent draws from the regime's distributions, made one after the other; "
    "the calls that do not commit keep their profile in every regime",
    "the commit latency each regime feeds in is the database's in that regime, held fixed "
    "when the saturating request rate is sought",
    "a device stall holds every commit that arrives during it at once; independent holding "
    "times cannot show that, so a separate check compares the requests a median stall "
    "holds with each tier's threads",
)


# --------------------------------------------------------------------------- Erlang formulas
def erlang_b(servers: int, offered_load_erlangs: float) -> float:
    """Erlang B blocking probability B(c, a), by the stable recursion
    B(0) = 1, B(k) = a B(k-1) / (k + a B(k-1)) (Erlang 1917; Kleinrock 1975, section 3.10)."""
    if servers < 1:
        raise ValueError("servers must be at least 1")
    if offered_load_erlangs < 0:
        raise ValueError("offered load must not be negative")
    b = 1.0
    for k in range(1, servers + 1):
        b = offered_load_erlangs * b / (k + offered_load_erlangs * b)
    return b


def erlang_c(servers: int, offered_load_erlangs: float) -> float:
    """Erlang C: the chance that an arrival must wait for one of ``servers`` (M/M/c),
    C(c, a) = B / (1 - (a/c)(1 - B)) with B Erlang B; needs a < c (Kleinrock 1975, 3.5)."""
    a = offered_load_erlangs
    if a >= servers:
        raise ValueError(f"offered load {a:g} erlangs reaches the {servers} servers: saturated")
    b = erlang_b(servers, a)
    return b / (1.0 - (a / servers) * (1.0 - b))


def erlang_c_mean_wait(servers: int, offered_load_erlangs: float, mean_holding: float) -> float:
    """Mean wait for a server in M/M/c, Wq = C(c, a) E[H] / (c - a), in the unit of
    ``mean_holding`` (Kleinrock 1975, section 3.5)."""
    c = erlang_c(servers, offered_load_erlangs)
    return c * mean_holding / (servers - offered_load_erlangs)


def thread_wait_latency(servers: int, rate_per_ms: float, mean_holding_ms: float) -> Latency:
    """The wait for a thread as Erlang C's law: 0 with probability 1 - C, otherwise
    exponential with rate c mu - lambda (per ms), mu = 1 / E[H]."""
    a = rate_per_ms * mean_holding_ms
    c = erlang_c(servers, a)
    theta_per_ms = servers / mean_holding_ms - rate_per_ms
    return mixture((1.0 - c, c), (Fixed(0.0), Exponential(1.0 / theta_per_ms)))


def response_latency(servers: int, rate_per_ms: float, holding: Latency) -> Latency:
    """A tier's response time: Erlang C's wait law followed by the holding time,
    (1 - C) H + C (Exp(c mu - lambda) + H), with the wait independent of the holding time."""
    a = rate_per_ms * holding.mean_ms
    c = erlang_c(servers, a)
    theta_per_ms = servers / holding.mean_ms - rate_per_ms
    if c <= 0.0:
        return holding
    # the mixture form keeps the atom at zero wait out of the convolution grid
    return mixture((1.0 - c, c), (holding, convolve(Exponential(1.0 / theta_per_ms), holding)))


def slow_request_chance(slow_share: float, calls: float) -> float:
    """The chance that at least one of ``calls`` independent calls is slow, 1 - (1 - q)^n
    (Dean and Barroso, The Tail at Scale, CACM 56(2), 2013)."""
    if not 0.0 <= slow_share <= 1.0:
        raise ValueError("slow_share must be between 0 and 1")
    if calls < 0:
        raise ValueError("calls must not be negative")
    return -math.expm1(calls * math.log1p(-slow_share)) if slow_share < 1 else 1.0


def calls_latency(call: Latency, calls: float) -> Latency:
    """The time ``calls`` calls take one after the other (independent draws of ``call``).

    A fractional count is a mixture of the two whole counts around it with the same mean
    (n = 2.5 calls: two or three calls, half the time each).
    """
    if calls < 0:
        raise ValueError("calls must not be negative")
    k = math.floor(calls)
    frac = calls - k
    if frac < 1e-12:
        return convolve_power(call, k)
    return mixture((1.0 - frac, frac), (convolve_power(call, k), convolve_power(call, k + 1)))


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class TierFigures:
    """One tier in one regime. Latency figures are None when the tier (or one below it)
    is saturated."""

    tier: str
    threads: int
    request_rate_per_s: float
    holding_mean_ms: float | None
    offered_load_erlangs: float | None
    utilisation: float | None
    wait_chance: float | None
    wait_mean_ms: float | None
    response_mean_ms: float | None
    response_p99_ms: float | None
    saturated: bool
    saturating_request_rate_per_s: float | None  # this tier's own rate at which a = threads


@dataclass(frozen=True)
class StackSaturation:
    """What saturates the stack in a regime: a tier's threads, or the database itself."""

    resource: str  # "tier:<name>" or "database"
    offered_top_rate_per_s: float
    saturating_top_rate_per_s: float | None  # top-tier request rate at which it saturates
    message: str


@dataclass(frozen=True)
class StackRegime:
    """The stack in one regime, for one strategy."""

    regime: str
    tiers: tuple[TierFigures, ...]
    top_mean_ms: float | None
    top_p99_ms: float | None
    commit_p99_ms: float | None
    saturation: StackSaturation | None
    headroom_top_rate_per_s: float | None  # top request rate at which the first tier saturates
    db_calls_per_request: float
    commits_per_request: float
    slow_commit_share: float | None  # P(commit latency > goal) in this regime
    slow_request_chance: float | None  # P(a top request meets at least one slow commit)
    # (top p99 - normal top p99) / (commit p99 - normal commit p99); None when the commit p99
    # moves by less than 1 % (and 0.01 ms): the ratio would be noise
    amplification: float | None
    cautions: tuple[str, ...] = ()
    top_latency: Any = field(default=None, repr=False, compare=False)

    @property
    def saturated(self) -> bool:
        return self.saturation is not None


@dataclass(frozen=True)
class StackResult:
    strategy: str
    regimes: tuple[StackRegime, ...]
    approximations: tuple[str, ...] = APPROXIMATIONS

    def regime(self, name: str) -> StackRegime:
        return next(r for r in self.regimes if r.regime == name)

    @property
    def saturated(self) -> bool:
        return any(r.saturated for r in self.regimes)

    @property
    def worst(self) -> StackRegime:
        """The regime with the highest top-tier p99 (a saturated one first)."""
        sat = [r for r in self.regimes if r.saturated]
        if sat:
            return sat[0]
        return max(self.regimes, key=lambda r: r.top_p99_ms or 0.0)


# --------------------------------------------------------------------------- the model
def _regime_scale(case: Case, regime: str) -> float:
    if regime == NORMAL:
        return 1.0
    r = case.regime(regime)
    return r.commit_rate_factor if r is not None else 1.0


def _tiers_mean_loads(tiers: tuple[Tier, ...], rates_per_s: tuple[float, ...],
                      db_call_mean_ms: float) -> list[float] | None:
    """Offered load of each tier (top first) from means alone; None when one saturates."""
    loads = [0.0] * len(tiers)
    below_ms = db_call_mean_ms
    for i in range(len(tiers) - 1, -1, -1):
        t = tiers[i]
        hold_ms = from_entry(t.service).mean_ms + t.calls_per_request * below_ms
        a = rates_per_s[i] / 1000.0 * hold_ms
        loads[i] = a
        if a >= t.threads:
            return None
        below_ms = hold_ms + erlang_c_mean_wait(t.threads, a, hold_ms)
    return loads


def _saturating_scale(tiers: tuple[Tier, ...], rates_per_s: tuple[float, ...],
                      db_call_mean_ms: float) -> float:
    """The factor on all request rates at which the first tier reaches its threads
    (bisection on the mean-value recursion, relative precision 1e-9)."""
    lo, hi = 0.0, 1.0
    while _tiers_mean_loads(tiers, tuple(r * hi for r in rates_per_s), db_call_mean_ms):
        lo, hi = hi, hi * 2.0
        if hi > 1e12:
            raise ValueError("the stack does not saturate at any finite rate")
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if _tiers_mean_loads(tiers, tuple(r * mid for r in rates_per_s), db_call_mean_ms):
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-9 * hi:
            break
    return 0.5 * (lo + hi)


def _db_call(tier: Tier, ack: Latency) -> Latency:
    share = tier.commit_share if tier.commit_share is not None else 1.0
    if share >= 1.0 or tier.other_call is None:
        return ack
    return mixture((share, 1.0 - share), (ack, from_entry(tier.other_call)))


def _saturated_regime(regime: str, case: Case, rates: tuple[float, ...],
                      sat: StackSaturation, calls: float, commits: float) -> StackRegime:
    tiers = tuple(
        TierFigures(t.name, t.threads, r, None, None, None, None, None, None, None,
                    sat.resource == f"tier:{t.name}", None)
        for t, r in zip(case.stack, rates, strict=True)
    )
    return StackRegime(regime, tiers, None, None, None, sat, sat.saturating_top_rate_per_s,
                       calls, commits, None, None, None)


def commit_stall_ms(case: Case, strategy: str, regime: str,
                    commit_rate_per_s: float) -> tuple[float, float] | None:
    """The median time a device stall holds the strategy's commits in ``regime`` and how
    often stalls start (per s), from the case's stall profiles; None when commits ride
    through (no stall, a second device that does not stall, or a log buffer that outlasts
    the median stall)."""
    s = next(x for x in case.strategies if strategy_name(x) == strategy)
    devices = s.devices if isinstance(s, DualDevice) else (s.device,)
    stalls = {d: case.devices[d].stalls.get(regime) for d in devices}
    medians = {d: float(from_entry(st.duration).quantile(0.5)) for d, st in stalls.items() if st}
    if not medians:
        return None
    if isinstance(s, DualDevice):
        if s.ack_after == "first":
            if len(medians) < len(devices):
                return None  # the other device acknowledges through the stall
            d = min(medians, key=medians.get)  # type: ignore[arg-type]
            return medians[d], min(st.per_s for st in stalls.values() if st)
        d = max(medians, key=medians.get)  # type: ignore[arg-type]
        return medians[d], sum(st.per_s for st in stalls.values() if st)
    d = devices[0]
    held_ms = medians[d]
    if isinstance(s, Deferred) and commit_rate_per_s > 0:
        fill_ms = s.buffer_bytes / (case.workload.log_bytes_per_commit * commit_rate_per_s) * 1e3
        held_ms -= fill_ms  # commits block only once the log buffer is full
        if held_ms <= 0:
            return None
    return held_ms, stalls[d].per_s  # type: ignore[union-attr]


def _stall_cautions(case: Case, strategy: str, rr: RegimeResult, rates: tuple[float, ...],
                    figures: list[TierFigures]) -> tuple[str, ...]:
    stall = commit_stall_ms(case, strategy, rr.regime, rr.throughput_per_s)
    if stall is None:
        return ()
    held_ms, per_s = stall
    out = []
    tiers = case.stack
    share = tiers[-1].commit_share if tiers[-1].commit_share is not None else 1.0
    for i, (t, f) in enumerate(zip(tiers, figures, strict=True)):
        calls_below = math.prod(x.calls_per_request for x in tiers[i:])
        p_commit = 1.0 - (1.0 - share) ** calls_below
        held = rates[i] * held_ms / 1000.0 * p_commit
        busy = (f.offered_load_erlangs or 0.0) + held
        if busy > t.threads:
            out.append(
                f"During a device stall of {held_ms:.0f} ms (the median in {rr.regime}, about "
                f"{per_s:g} a second), about {held:.0f} requests reach tier {t.name} and wait "
                f"on a commit, on top of {f.offered_load_erlangs or 0.0:.0f} busy threads: more "
                f"than its {t.threads} threads, so its pool empties at every stall and "
                "requests queue for a thread; this regime's top-tier figures, which assume "
                "independent holding times, understate that wait."
            )
    return tuple(out)


def _one_regime(case: Case, strategy: str, rr: RegimeResult) -> StackRegime:
    tiers = case.stack
    scale = _regime_scale(case, rr.regime)
    rates = tuple(r * scale for r in tier_request_rates_per_s(tiers))
    calls = math.prod(t.calls_per_request for t in tiers)
    commits = calls * (tiers[-1].commit_share if tiers[-1].commit_share is not None else 1.0)
    if rr.saturated:
        sat = StackSaturation(
            "database", rates[0], None,
            f"the database saturates in {rr.regime}"
            + (f" ({rr.saturation.message})" if rr.saturation and rr.saturation.message else "")
            + "; the tiers above cannot be given a response time",
        )
        return _saturated_regime(rr.regime, case, rates, sat, calls, commits)
    ack = rr.ack_latency
    if ack is None:
        raise ValueError(f"regime {rr.regime}: the result carries no commit latency "
                         "distribution (ack_latency)")
    call = _db_call(tiers[-1], ack)
    sat_scale = _saturating_scale(tiers, rates, call.mean_ms)
    headroom = rates[0] * sat_scale
    figures: list[TierFigures] = []
    below = call
    for i in range(len(tiers) - 1, -1, -1):
        t = tiers[i]
        hold = convolve(from_entry(t.service), calls_latency(below, t.calls_per_request))
        rate_per_ms = rates[i] / 1000.0
        a = rate_per_ms * hold.mean_ms
        own_sat_rate = t.threads / hold.mean_ms * 1000.0
        if a >= t.threads:
            sat = StackSaturation(
                f"tier:{t.name}", rates[0], headroom,
                f"tier {t.name} needs {a:.1f} threads busy on average and has {t.threads}: "
                f"saturated at {rates[i]:.0f} requests/s (it saturates at "
                f"{own_sat_rate:.0f}/s; the top tier at {headroom:.0f}/s)",
            )
            return _saturated_regime(rr.regime, case, rates, sat, calls, commits)
        wait = thread_wait_latency(t.threads, rate_per_ms, hold.mean_ms)
        resp = response_latency(t.threads, rate_per_ms, hold)
        figures.append(TierFigures(
            tier=t.name, threads=t.threads, request_rate_per_s=rates[i],
            holding_mean_ms=hold.mean_ms, offered_load_erlangs=a,
            utilisation=a / t.threads, wait_chance=erlang_c(t.threads, a),
            wait_mean_ms=wait.mean_ms, response_mean_ms=resp.mean_ms,
            response_p99_ms=float(resp.quantile(0.99)), saturated=False,
            saturating_request_rate_per_s=own_sat_rate,
        ))
        below = resp
    figures.reverse()
    goal_ms = case.goals.commit_p99_ms
    q = float(ack.sf(goal_ms))
    share = tiers[-1].commit_share if tiers[-1].commit_share is not None else 1.0
    return StackRegime(
        regime=rr.regime, tiers=tuple(figures),
        top_mean_ms=below.mean_ms, top_p99_ms=float(below.quantile(0.99)),
        commit_p99_ms=rr.ack_p99_ms if rr.ack_p99_ms is not None else float(ack.quantile(0.99)),
        saturation=None, headroom_top_rate_per_s=headroom,
        db_calls_per_request=calls, commits_per_request=commits,
        slow_commit_share=q,
        # each database call commits with probability `share` and is then slow with q
        slow_request_chance=slow_request_chance(share * q, calls),
        amplification=None,
        cautions=_stall_cautions(case, strategy, rr, rates, figures),
        top_latency=below,
    )


def _with_amplification(regimes: list[StackRegime]) -> list[StackRegime]:
    normal = next((r for r in regimes if r.regime == NORMAL), None)
    if normal is None or normal.saturated:
        return regimes
    out = []
    for r in regimes:
        amp = None
        if r is not normal and not r.saturated and r.commit_p99_ms is not None \
                and normal.commit_p99_ms is not None:
            d_commit = r.commit_p99_ms - normal.commit_p99_ms
            # a ratio of two grid-level differences would be noise, not amplification
            if abs(d_commit) >= max(AMPLIFICATION_MIN_MS, 0.01 * normal.commit_p99_ms):
                amp = (r.top_p99_ms - normal.top_p99_ms) / d_commit
        out.append(replace(r, amplification=amp))
    return out


def evaluate_stack(case: Case, strategy: StrategyResult) -> StackResult:
    """The tiers' figures in each regime for one strategy (the case must have a stack).

    Top-tier mean and p99 in ms, each tier's Erlang C wait, the amplification
    Δ(top-tier p99) / Δ(commit p99) of each regime against ``normal``, and the chance that a
    top-tier request meets at least one commit slower than the commit goal,
    1 - (1 - s q)^n with n database calls per request, s the commit share and q the regime's
    P(commit > goal) (Dean and Barroso, CACM 2013; per regime, never on a blended q).
    """
    if not case.stack:
        raise ValueError("the case has no stack")
    regimes = [_one_regime(case, strategy.name, rr) for rr in strategy.regimes]
    return StackResult(strategy.name, tuple(_with_amplification(regimes)))


def evaluate_stacks(case: Case, strategies: tuple[StrategyResult, ...]
                    ) -> tuple[StackResult, ...]:
    """:func:`evaluate_stack` for every strategy; empty when the case has no stack."""
    if not case.stack:
        return ()
    return tuple(evaluate_stack(case, s) for s in strategies)
