"""Evaluator speed: compute time per shipped case after import, as figures and ratios.

Run: python tests/benchmarks/bench_evaluate.py [REPEATS]
Prints, per case, the best and median wall time of evaluate(case) over REPEATS runs (after
one warm-up run that pays for imports), and the ratio of each case's median to the fastest
case's, so a slowdown shows as a ratio measured within one run. Target: well under 1 s per
case on a 2-core machine (issue 3).
"""

from __future__ import annotations

import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from commitadvisor.case import load_case  # noqa: E402
from commitadvisor.evaluate import evaluate  # noqa: E402


def main(repeats: int = 5) -> None:
    rows = []
    for path in sorted((ROOT / "cases").glob("*.toml")):
        case = load_case(path)
        evaluate(case)  # warm-up: imports and first-call costs
        times = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            ev = evaluate(case)
            times.append(time.perf_counter() - t0)
        n = sum(len(s.regimes) for s in ev.strategies)
        rows.append((path.name, min(times), statistics.median(times), n))
    fastest = min(r[2] for r in rows)
    print(f"{'case':40s} {'best s':>8s} {'median s':>9s} {'strategy-regimes':>17s} {'ratio':>6s}")
    for name, best, med, n in rows:
        print(f"{name:40s} {best:8.3f} {med:9.3f} {n:17d} {med / fastest:6.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 5)
