"""Subset DP against the proven MILP search on the tie family (invented problems).

For each size, one problem of ``benchmarks/tie_family.py`` (same seed for both methods)
is solved by ``method="subset_dp"`` and by ``method="milp"`` with a time limit; the
script prints both times, their ratio and whether the optima agree (profit to 1e-9
relative). When the MILP search stops unproven, its best design and its profit bound
are checked against the DP's optimum: the bound must not lie below it.

Timing protocol: both methods first solve a small problem once (imports, loading the
compiled kernels, the integer solver's first call), and the gross-die cache is cleared
before every timed run, so each run pays for pricing its own candidate dies.

Run:  python benchmarks/bench_subset_dp.py [--sizes 8 10 12 14 16 18] [--processes 1]
      [--max-dies 8] [--limit 300] [--seed 0]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from tie_family import tie_problem  # noqa: E402

from optimizer.formulas import wafer  # noqa: E402
from optimizer.problem import parse_problem  # noqa: E402
from optimizer.solver import solve  # noqa: E402

RTOL = 1e-9


def timed(problem, method: str, limit: float | None):
    wafer.clear_count_cache()
    t0 = time.perf_counter()
    solution = solve(problem, top=1, method=method, time_limit=limit, refine=False)
    return time.perf_counter() - t0, solution


def verdict(dp, milp) -> str:
    best, found = dp.best.profit, milp.best.profit
    tol = RTOL * max(abs(best), 1.0)
    if milp.proven_optimal:
        if abs(found - best) <= tol:
            return "agree"
        return f"DISAGREE (milp claims proof, off by {found - best:.6g})"
    gap = (best - found) / abs(best)
    bound_ok = milp.profit_bound >= best - tol
    return (
        f"milp unproven: best {gap:.3%} below optimum, "
        f"bound {'valid' if bound_ok else 'BELOW OPTIMUM'}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[8, 10, 12, 14, 16, 18])
    parser.add_argument("--processes", type=int, default=1, choices=[1, 3])
    parser.add_argument("--max-dies", type=int, default=8)
    parser.add_argument("--limit", type=float, default=300.0, help="MILP time limit [s]")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args()

    warm = parse_problem(tie_problem(99, 5, args.processes, max_dies=3))
    for method in ("subset_dp", "milp"):
        solve(warm, method=method, refine=False)

    print(
        f"tie family, {args.processes} process(es), up to {args.max_dies} dies, "
        f"seed {args.seed}, milp limit {args.limit:g} s"
    )
    header = (
        f"{'blocks':>6} {'dp s':>8} {'(pricing)':>9} {'milp s':>8} {'milp/dp':>8} "
        f"{'dies':>4}  result"
    )
    print(header)
    print("-" * len(header))
    for blocks in args.sizes:
        problem = parse_problem(tie_problem(args.seed, blocks, args.processes, args.max_dies))
        t_dp, dp = timed(problem, "subset_dp", None)
        t_milp, milp = timed(problem, "milp", args.limit)
        print(
            f"{blocks:>6} {t_dp:>8.2f} {dp.stats['pricing_seconds']:>9.2f} {t_milp:>8.2f} "
            f"{t_milp / t_dp:>8.1f} {dp.best.n_dies:>4}  {verdict(dp, milp)}",
            flush=True,
        )


if __name__ == "__main__":
    main()
