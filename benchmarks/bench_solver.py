"""Solver speed: the proven MILP search against the exhaustive reference, and scaling.

1. An 8-block problem with three processes and three packaging options (4,140 set
   partitions, about two million complete designs): both methods in one run, same
   optimum required, time ratio reported.
2. Proven solve time as the block count grows (4 to 20 blocks), with a time limit.

Run:  python benchmarks/bench_solver.py [--sizes 4 6 8 10 12 14 16 18 20] [--limit 120]
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from synthetic import synthetic_problem  # noqa: E402

from optimizer.formulas import wafer  # noqa: E402
from optimizer.solver import solve  # noqa: E402


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--sizes", type=int, nargs="*", default=[4, 6, 8, 10, 12, 14, 16, 18, 20])
    parser.add_argument("--limit", type=float, default=120.0)
    parser.add_argument("--skip-exhaustive", action="store_true")
    args = parser.parse_args()
    if not args.skip_exhaustive:
        problem = synthetic_problem(8)
        # both start with an empty gross-die cache, so both pay for the exact counts
        wafer.clear_count_cache()
        t0 = time.perf_counter()
        ours = solve(problem, top=1)
        t_ours = time.perf_counter() - t0
        wafer.clear_count_cache()
        t0 = time.perf_counter()
        brute = solve(problem, top=1, method="exhaustive")
        t_brute = time.perf_counter() - t0
        same = abs(ours.best.profit - brute.best.profit) <= 1e-9 * abs(brute.best.profit)
        print(
            f"8 blocks: milp {t_ours:.2f} s (proven {ours.proven_optimal}), exhaustive "
            f"{t_brute:.2f} s over {brute.stats['designs_priced']:,} designs; "
            f"same optimum: {same}; ratio {t_brute / t_ours:.1f}x"
        )
    print("blocks  seconds  proven  gap        candidates  programs  rounds  peak RSS MB")
    for n in args.sizes:
        problem = synthetic_problem(n)
        t0 = time.perf_counter()
        s = solve(problem, top=1, time_limit=args.limit)
        dt = time.perf_counter() - t0
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(
            f"{n:6d}  {dt:7.2f}  {str(s.proven_optimal):6s}  {s.gap:9.2e}  "
            f"{s.stats['candidate_dies']:10d}  {s.stats['programs']:8d}  "
            f"{s.stats.get('rounds', 0):6d}  {rss:11.0f}"
        )


if __name__ == "__main__":
    main()
