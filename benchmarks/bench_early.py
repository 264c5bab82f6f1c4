"""Early designs under a time limit: the MILP search with and without the subset-DP seeds.

For every problem and every ``--time-limits`` value, ``solve(method="milp",
time_limit=L)`` is run with the seeding off (``search.DP_SEEDING = False``, the behaviour
before it) and on, and the script prints the returned design's cost per good unit
relative to the optimum, the cost gap the solver reports (to its proven bound) and the
wall time actually taken, with how far it ran past the limit.

Problems (invented data, no real process, package or product):

- the tie family (``tie_family.py``, ``max_dies=16``) at 14 and 16 blocks, seeds 0-2,
  inside the DP's exact class: the optimum is proven by ``method="subset_dp"``;
- outside that class, the synthetic family (``synthetic.py``: links, three processes,
  single-die, organic and silicon-interposer packagings, test escapes) with
  chiplet-favoured silicon at 14 and 16 blocks and ``--synthetic-volume`` units;
- outside it too, the tie family with test escapes (fault coverage 0.995, seed 0) at
  14 and 16 blocks: as tied as the family, but the cost is no longer a sum over dies.

Outside the class the reference is one MILP search with ``--reference-limit`` seconds
(seeded): when that search is not proven either, the ratio is to the best design known
and the reference's own gap to its proven bound is printed beside it.

Timing protocol: every method first solves a small problem once (imports, the compiled
kernels, the integer solver's first call), and the gross-die cache is cleared before
every timed run, so each run pays for pricing its own candidate dies. Wall time is
measured around the whole ``solve`` call.

Run:  python benchmarks/bench_early.py [--time-limits 1 2 5 10] [--tie-blocks 14 16]
      [--seeds 0 1 2] [--synthetic-blocks 14 16] [--synthetic-volume 1e6]
      [--escape-blocks 14 16] [--reference-limit 60] [--modes before after]
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from synthetic import synthetic_data  # noqa: E402
from tie_family import tie_problem  # noqa: E402

from optimizer.errors import ProblemError  # noqa: E402
from optimizer.formulas import wafer  # noqa: E402
from optimizer.problem import Problem, parse_problem  # noqa: E402
from optimizer.solver import search, solve  # noqa: E402

MODES = {"before": False, "after": True}


def timed(problem: Problem, method: str, limit: float | None, seeding: bool = True):
    """Wall seconds and the solution (None: no design found within the limit)."""
    search.DP_SEEDING = seeding
    wafer.clear_count_cache()
    t0 = time.perf_counter()
    try:
        solution = solve(problem, top=1, method=method, time_limit=limit, refine=False)
    except ProblemError:
        if limit is None:
            raise
        solution = None
    finally:
        search.DP_SEEDING = True
    return time.perf_counter() - t0, solution


def problems(args) -> list[tuple[str, Problem]]:
    out = []
    for blocks in args.tie_blocks:
        for seed in args.seeds:
            out.append((f"tie b{blocks} s{seed}", parse_problem(tie_problem(seed, blocks, 1, 16))))
    for blocks in args.synthetic_blocks:
        data = synthetic_data(blocks, seed=0, max_dies=8, chiplet_favoured=True)
        data["market"]["volume"] = args.synthetic_volume
        out.append((f"synthetic b{blocks}", parse_problem(data)))
    for blocks in args.escape_blocks:
        data = tie_problem(0, blocks, 1, 16)
        data["process"][0]["fault_coverage"] = 0.995
        out.append((f"escapes b{blocks}", parse_problem(data)))
    return out


def reference(name: str, problem: Problem, limit: float) -> tuple[float, str]:
    """Cost per good unit of the optimum (or best known design) and how it was found."""
    if name.startswith("tie "):
        seconds, best = timed(problem, "subset_dp", None)
        return best.best.cost_per_good_unit, f"subset_dp, proven, {seconds:.1f} s"
    seconds, best = timed(problem, "milp", limit)
    if best.proven_optimal:
        return best.best.cost_per_good_unit, f"milp, proven, {seconds:.1f} s"
    return (
        best.best.cost_per_good_unit,
        f"milp {limit:g} s, NOT proven: best known, cost gap {best.cost_gap:.3%}",
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--time-limits", type=float, nargs="+", default=[1, 2, 5, 10])
    parser.add_argument("--tie-blocks", type=int, nargs="*", default=[14, 16])
    parser.add_argument("--seeds", type=int, nargs="*", default=[0, 1, 2])
    parser.add_argument("--synthetic-blocks", type=int, nargs="*", default=[14, 16])
    parser.add_argument("--synthetic-volume", type=float, default=1e6)
    parser.add_argument("--escape-blocks", type=int, nargs="*", default=[14, 16])
    parser.add_argument("--reference-limit", type=float, default=60.0)
    parser.add_argument("--modes", nargs="+", default=list(MODES), choices=list(MODES))
    args = parser.parse_args()

    warm = parse_problem(tie_problem(99, 5, max_dies=3))
    for method in ("subset_dp", "milp"):
        solve(warm, method=method, refine=False)

    header = (
        f"{'problem':<14} {'limit':>5} {'mode':<6} {'cost/opt':>9} {'cost gap':>9} "
        f"{'wall s':>7} {'over s':>7} proven"
    )
    summary: dict[tuple[float, str], list[tuple[float, float]]] = {}
    for name, problem in problems(args):
        ref, how = reference(name, problem, args.reference_limit)
        print(f"\n{name}: reference {ref:.6g} per good unit ({how})")
        print(header)
        print("-" * len(header))
        for limit in args.time_limits:
            for mode in args.modes:
                wall, found = timed(problem, "milp", limit, MODES[mode])
                over = wall - limit
                if found is None:
                    summary.setdefault((limit, mode), []).append((math.inf, over))
                    print(
                        f"{name:<14} {limit:>5g} {mode:<6} {'none':>9} {'':>9} {wall:>7.2f} "
                        f"{over:>+7.2f} no design within the limit",
                        flush=True,
                    )
                    continue
                ratio = found.best.cost_per_good_unit / ref
                summary.setdefault((limit, mode), []).append((ratio, over))
                print(
                    f"{name:<14} {limit:>5g} {mode:<6} {ratio:>9.4f} {found.cost_gap:>9.2%} "
                    f"{wall:>7.2f} {over:>+7.2f} {'yes' if found.proven_optimal else 'no'}",
                    flush=True,
                )
    print("\nsummary over the problems: cost per good unit / optimum, seconds past the limit")
    line = f"{'limit':>5} {'mode':<6} {'worst':>8} {'mean':>8} {'within 1%':>10} {'most over':>10}"
    print(line)
    print("-" * len(line))
    for (limit, mode), rows in sorted(summary.items(), key=lambda item: item[0][0]):
        ratios = [r for r, _ in rows]
        found = [r for r in ratios if math.isfinite(r)]
        mean = math.fsum(found) / len(found) if found else math.inf
        near = sum(r <= 1.01 for r in ratios)
        print(
            f"{limit:>5g} {mode:<6} {max(ratios):>8.4f} {mean:>8.4f} "
            f"{near:>4} of {len(ratios):<3} {max(o for _, o in rows):>+10.2f}"
        )
    print("(worst inf: no design within the limit; the mean is over the designs found)")


if __name__ == "__main__":
    main()
