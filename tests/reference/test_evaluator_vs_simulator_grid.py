"""The analytic evaluator against the project's simulator over a grid of generated cases
(issue 4). The cases are in tests/reference/grid_cases.py (CI_GRID); each is its own test
id, named by strategy, workload, flush profile, settings, stalls, CPU share and writer busy
share (for example ``batched-open-ln2-gather1msx8-busy70``).

Per case the evaluator's figures must match the simulator's within fixed tolerances that
never widen: ack mean 3 %, ack p99 5 %; durable mean 3 % and durable p99 5 % where either
side gives one; the exposure window mean 3 % for each kind of failure where either side
gives one (not unbounded). A figure that one side gives and the other does not fails.
Differences under 5 microseconds are not counted (the floor of commitadvisor.verify, so
that two acknowledgement times of zero, as with deferred commit, do not fail on 0/0).

Simulated commits per case (``GridSpec.commits``), sized in two steps. First, four seeds
at 200,000 commits each: the seeds' spread gave each figure's relative standard deviation s,
and the case got 200,000 x (s / t)^2 commits, t = 0.6 % for means and 1.25 % for p99
figures. Four seeds understate a heavy tail's spread, so second, one run at that size gave
the simulator's own standard error of the ack mean from its independent lanes (batch means
over lanes; for deferred commit that of the host-crash at-risk mean, Little's law's image
of the window mean), and the case got n x (se / 0.5 %)^2 commits: a sixth of the 3 %
tolerance; dual-device cases acknowledging after the first copy keep the four-seed size
where it is larger (their lag is noisier than their ack mean). All between 200,000 and
3,000,000. A p99 has no lane standard error here: for independent commits its relative
standard error is sqrt(0.99 x 0.01 / n) / (f(q) q) (the order-statistic law; for a
lognormal f(q) q = phi(2.326) / sigma, so 3.7 sigma / sqrt(n), 0.7 % for sigma = 1 at
n = 300,000), and commits that share a flush make the effective n smaller, so
tests/benchmarks/bench_grid.py --ci --seeds 3 measures the p99 spread across seeds (see
the report of issue 4). ``test_grid_load`` checks the lane standard error in every run
against a quarter of the tolerance, so a case whose noise is not well below the tolerance
fails visibly instead of passing or failing by chance. A synchronous case with lognormal
p99/p50 = 20 was left out for that reason: its lane standard error was 1.5 % to 2 % at
1,000,000 commits, so a 3 % check would need more than ten million.

The grid's share of a CI run is about a minute on a loaded 2-core machine (both sides run
once per case and are cached for the two tests of the case).
"""

from __future__ import annotations

import functools
import math

import pytest

from commitadvisor.evaluate import evaluate
from commitadvisor.results import FAILURE_KINDS, RegimeResult
from commitadvisor.simulate import simulate_case
from tests.reference.grid_cases import BUSY_SHARE_SLACK, CI_GRID, GridSpec, build_case

MEAN_TOL = 0.03  # issue 4: ack mean within 3 %; never widened
P99_TOL = 0.05  # issue 4: ack p99 within 5 %; never widened
FLOOR_MS = 0.005  # differences under 5 us are not counted (commitadvisor.verify's floor)
NOISE_SHARE = 0.25  # the simulator's standard error of the ack mean: at most 1/4 of MEAN_TOL
SEED_BASE = 4100  # the simulator's seed for case i is SEED_BASE + i


@functools.cache
def run_case(index: int) -> tuple[RegimeResult, RegimeResult, object]:
    """(analytic, simulated, the simulator's segment) for CI_GRID[index], normal regime."""
    g = CI_GRID[index]
    case = build_case(g)
    analytic = evaluate(case).strategies[0].regimes[0]
    sim = simulate_case(case, seed=SEED_BASE + index, commits=g.commits)
    return analytic, sim.evaluation.strategies[0].regimes[0], sim.segments[0]


def own_noise(s: RegimeResult, seg) -> tuple[str, float]:
    """(figure, relative standard error) of the simulator's run, from its independent
    lanes: the ack mean's; where nobody waits (deferred commit, ack mean under the floor)
    the host-crash at-risk mean's, which is the commit rate times the exposure window mean
    (Little's law) and so carries that mean's relative noise."""
    if s.ack_mean_ms is not None and s.ack_mean_ms > FLOOR_MS and seg.ack_mean_se_ms:
        return "ack mean", seg.ack_mean_se_ms / s.ack_mean_ms
    risk_se = dict(seg.at_risk_se).get("host_crash")
    mean = s.exposure("host_crash").at_risk_mean
    if risk_se is None or not mean:
        return "ack mean (no standard error reported)", math.inf
    return "host-crash at-risk mean", risk_se / mean


def figure_pairs(
    a: RegimeResult, s: RegimeResult
) -> list[tuple[str, float | None, float | None, float]]:
    """(figure, analytic, simulated, tolerance) for every figure the grid asserts."""
    rows = [
        ("ack_mean_ms", a.ack_mean_ms, s.ack_mean_ms, MEAN_TOL),
        ("ack_p99_ms", a.ack_p99_ms, s.ack_p99_ms, P99_TOL),
        ("durable_mean_ms", a.durable_mean_ms, s.durable_mean_ms, MEAN_TOL),
        ("durable_p99_ms", a.durable_p99_ms, s.durable_p99_ms, P99_TOL),
    ]
    for kind in FAILURE_KINDS:
        ea, es = a.exposure(kind), s.exposure(kind)
        if ea.unbounded and es.unbounded:
            continue
        wa = None if ea.unbounded else ea.window_mean_ms
        ws = None if es.unbounded else es.window_mean_ms
        rows.append((f"{kind}.window_mean_ms", wa, ws, MEAN_TOL))
    return rows


def cell_verdict(
    analytic: float | None, simulated: float | None, tolerance: float
) -> tuple[bool, float | None, str]:
    """(passes, relative difference (sim - analytic) / |analytic|, note) for one figure."""
    if analytic is None and simulated is None:
        return True, None, "neither gives it"
    if analytic is None or simulated is None:
        return False, None, "only one side gives it"
    diff = simulated - analytic
    if abs(diff) <= FLOOR_MS:
        return True, (diff / abs(analytic) if analytic else 0.0), "within the 5 us floor"
    if analytic == 0:
        return False, None, "analytic is 0"
    rel = diff / abs(analytic)
    return abs(rel) <= tolerance, rel, ""


def _ids() -> list[str]:
    names = [g.name for g in CI_GRID]
    assert len(set(names)) == len(names), "grid case names must be unique"
    return names


PARAMS = list(range(len(CI_GRID)))


def test_grid_covers_what_issue_4_asks():
    specs: tuple[GridSpec, ...] = CI_GRID
    assert len(specs) >= 30
    busy = [g.busy_share for g in specs]
    assert min(busy) <= 0.10 and max(busy) >= 0.90
    assert max(g.cpu_share or 0.0 for g in specs) >= 0.90
    assert {g.strategy for g in specs} >= {"sync", "batched", "deferred", "dual_first", "dual_both"}
    assert {g.workload for g in specs} == {"open", "closed_exp", "closed_fixed"}
    assert {"exp", "ln2"} & {g.profile for g in specs}  # light-tailed
    assert {"ln10", "ln20", "mix1"} <= {g.profile for g in specs}  # heavy-tailed
    assert any(g.stalls for g in specs)
    assert sum(g.commits for g in specs) <= 40_000_000  # the CI time budget (about a minute)


@pytest.mark.parametrize("index", PARAMS, ids=_ids())
def test_grid_load(index):
    """The achieved load is the one the name states, and the simulator's noise is well
    below the tolerance."""
    g = CI_GRID[index]
    a, s, seg = run_case(index)
    assert not a.saturated and not s.saturated, (a.saturation, s.saturation)
    assert abs(s.writer_utilisation - g.busy_share) <= BUSY_SHARE_SLACK, (
        f"simulated writer busy share {s.writer_utilisation:.3f}, nominal {g.busy_share}"
    )
    if g.cpu_share is not None:
        assert abs(s.cpu_utilisation - g.cpu_share) <= BUSY_SHARE_SLACK, (
            f"simulated CPU utilisation {s.cpu_utilisation:.3f}, nominal {g.cpu_share}"
        )
    what, rel_se = own_noise(s, seg)
    assert rel_se <= NOISE_SHARE * MEAN_TOL, (
        f"the simulator's own standard error of the {what} is {rel_se:.2%} with "
        f"{seg.commits_measured:,} commits: not well below the {MEAN_TOL:.0%} tolerance"
    )


_LATENCY = ("ack_mean_ms", "ack_p99_ms", "durable_mean_ms", "durable_p99_ms")
_TAIL = ("ack_p99_ms", "durable_p99_ms")

# Cells where an approximation of the evaluator is inherently limited (README, "Known
# limits"). Each stays flagged by `evaluate --verify`; the test pins that the difference is
# still beyond the tolerance, so a model that comes to agree must leave this table.
KNOWN_LIMITS: dict[str, tuple[tuple[str, ...], str]] = {}


def test_known_limits_name_grid_cases():
    names = {g.name for g in CI_GRID}
    assert set(KNOWN_LIMITS) <= names, set(KNOWN_LIMITS) - names


@pytest.mark.parametrize("index", PARAMS, ids=_ids())
def test_grid_figures(index, record_property):
    g = CI_GRID[index]
    a, s, _ = run_case(index)
    record_property("writer_busy_share", s.writer_utilisation)
    record_property("cpu_utilisation", s.cpu_utilisation)
    failed = []
    limited, why = KNOWN_LIMITS.get(g.name, ((), ""))
    for figure, av, sv, tol in figure_pairs(a, s):
        ok, rel, note = cell_verdict(av, sv, tol)
        if figure in limited:
            if ok:
                failed.append(f"{figure}: now agrees ({av} vs {sv}); take it out of "
                              f"KNOWN_LIMITS ({why})")
            continue
        if not ok:
            rel_s = "-" if rel is None or not math.isfinite(rel) else f"{rel:+.2%}"
            failed.append(
                f"{figure}: analytic {av}, simulated {sv}, difference {rel_s} "
                f"(tolerance {tol:.0%}) {note}"
            )
    assert not failed, (
        f"{g.name} (busy {s.writer_utilisation:.3f}, cpu "
        f"{s.cpu_utilisation}):\n  " + "\n  ".join(failed)
    )
