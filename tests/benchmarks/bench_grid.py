"""The evaluator against the simulator over a larger grid than the CI test's, with a table.

Run: python tests/benchmarks/bench_grid.py [--count N] [--seed S] [--commits N] [--ci]
     [--seeds K]

Cases: ``bench_grid(seed, count)`` from tests/reference/grid_cases.py (a seeded random
grid; default 120 cases at 1,000,000 simulated commits each), or with ``--ci`` the CI grid
itself at its own commits per case. With ``--seeds K`` (K >= 2) every case is simulated
with K seeds and the table gives the spread of the simulated figure across the seeds as
its standard deviation relative to the mean (the simulator's own noise at that size).

For every case and asserted figure (the figures and tolerances of
tests/reference/test_evaluator_vs_simulator_grid.py: ack mean 3 %, ack p99 5 %, durable
mean and p99, exposure window means) it prints one row: case, figure, analytic,
simulated, relative difference, pass or fail; then per case the achieved writer busy share
and CPU utilisation, and the totals (cells, failing cells, failing cases, time).

Not a test (pytest collects test_*.py only); the figures are for the report.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from commitadvisor.evaluate import evaluate  # noqa: E402
from commitadvisor.simulate import simulate_case  # noqa: E402
from tests.reference.grid_cases import CI_GRID, bench_grid, build_case  # noqa: E402
from tests.reference.test_evaluator_vs_simulator_grid import (  # noqa: E402
    SEED_BASE,
    cell_verdict,
    figure_pairs,
)


def _fmt(x: float | None) -> str:
    return "-" if x is None else f"{x:.4g}"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--count", type=int, default=120)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument(
        "--commits",
        type=int,
        default=None,
        help="simulated commits per case (default: the case's own)",
    )
    ap.add_argument("--ci", action="store_true", help="run the CI grid instead")
    ap.add_argument("--seeds", type=int, default=1)
    ap.add_argument("--failing-only", action="store_true")
    args = ap.parse_args(argv)
    specs = CI_GRID if args.ci else bench_grid(args.seed, args.count)
    cells = failing = 0
    failing_cases: list[str] = []
    per_case: list[tuple[str, float | None, float | None, float, float, int, str]] = []
    started = time.perf_counter()
    width = max(len(g.name) for g in specs)
    print(
        f"{'case':<{width}}  {'figure':<28} {'analytic':>10} {'simulated':>10} "
        f"{'diff':>8} {'seeds sd':>8}  result"
    )
    for i, g in enumerate(specs):
        case = build_case(g)
        t0 = time.perf_counter()
        a = evaluate(case).strategies[0].regimes[0]
        t_eval = time.perf_counter() - t0
        commits = args.commits or g.commits
        sims = []
        t0 = time.perf_counter()
        for k in range(max(1, args.seeds)):
            sim = simulate_case(case, seed=SEED_BASE + i + 7919 * k, commits=commits)
            sims.append(sim.evaluation.strategies[0].regimes[0])
        t_sim = time.perf_counter() - t0
        s = sims[0]
        if a.saturated or s.saturated:
            ok = a.saturated and s.saturated
            cells += 1
            failing += 0 if ok else 1
            print(
                f"{g.name:<{width}}  {'saturated':<28} {str(a.saturated):>10} "
                f"{str(s.saturated):>10} {'':>8} {'':>8}  {'pass' if ok else 'FAIL'}"
            )
            if not ok:
                failing_cases.append(g.name)
            per_case.append(
                (g.name, None, None, t_eval, t_sim, commits, "pass" if ok else "FAIL saturated")
            )
            continue
        bad = False
        bad_figures: list[str] = []
        for j, (figure, av, sv, tol) in enumerate(figure_pairs(a, s)):
            ok, rel, note = cell_verdict(av, sv, tol)
            spread = ""
            if len(sims) > 1:
                vals = [figure_pairs(a, x)[j][2] for x in sims]
                if all(v is not None for v in vals) and np.mean(vals) > 0:
                    spread = f"{np.std(vals, ddof=1) / np.mean(vals):.2%}"
            cells += 1
            if not ok:
                failing += 1
                bad = True
                bad_figures.append(figure)
            if args.failing_only and ok:
                continue
            rel_s = "-" if rel is None or not math.isfinite(rel) else f"{rel:+.2%}"
            print(
                f"{g.name:<{width}}  {figure:<28} {_fmt(av):>10} {_fmt(sv):>10} "
                f"{rel_s:>8} {spread:>8}  {'pass' if ok else 'FAIL'}"
                f"{' (' + note + ')' if note and not ok else ''}",
                flush=True,
            )
        if bad:
            failing_cases.append(g.name)
        per_case.append(
            (
                g.name,
                s.writer_utilisation,
                s.cpu_utilisation,
                t_eval,
                t_sim,
                commits,
                "FAIL " + ", ".join(bad_figures) if bad_figures else "pass",
            )
        )
    total = time.perf_counter() - started
    print()
    print(
        f"{'case':<{width}}  {'busy share':>10} {'cpu util':>9} {'eval s':>7} {'sim s':>7} "
        f"{'commits':>10}  result"
    )
    for name, busy, cpu, te, ts, n, verdict in per_case:
        print(
            f"{name:<{width}}  {_fmt(busy):>10} {_fmt(cpu):>9} {te:7.2f} {ts:7.2f} {n:>10,}"
            f"  {verdict}"
        )
    print()
    print(
        f"cases {len(specs)}, cells {cells}, failing cells {failing}, failing cases "
        f"{len(failing_cases)}; wall time {total:.1f} s"
    )
    for name in failing_cases:
        print(f"  failing: {name}")
    return 1 if failing else 0


if __name__ == "__main__":
    raise SystemExit(main())
