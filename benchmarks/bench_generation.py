"""Candidate dies generated on demand against pricing them all up front.

The synthetic benchmark family (`synthetic.py`: single blocks of 20-90 mm^2, three
processes, three packagings, up to 8 dies, linked neighbours). Each (size, method) runs
in its own process, so that its peak memory is its own; both methods must report the
same optimum wherever both finish.

* ``generated``: `optimizer.solver.generation.generated_search` (column generation with
  the branch-and-bound content search, then screening by reduced cost);
* ``enumerated``: `optimizer.solver.search.milp_search` (every content priced first).

Timing protocol: wall-clock seconds of the search alone in a fresh process (problem
built, imports and the integer-program solver's first call done before the clock
starts), the gross-die cache empty. Peak memory is the process's maximum resident set.

Run:  python benchmarks/bench_generation.py [--sizes 16 18 20 22 24] [--enumerate-up-to 20]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).parent

CHILD = r"""
import json, resource, sys, time
sys.path.insert(0, {here!r})
from synthetic import synthetic_problem
from optimizer.evaluator import Evaluator
from optimizer.solver import solve
from optimizer.solver.generation import generated_search
from optimizer.solver.search import milp_search
solve(synthetic_problem(4), top=1)  # imports and the solver's first call
problem = synthetic_problem({size}, chiplet_favoured={favoured})
evaluator = Evaluator(problem)
start = time.perf_counter()
if {method!r} == "generated":
    out = generated_search(evaluator, top=1, deadline=start + {limit})
else:
    out = milp_search(evaluator, top=1, deadline=start + {limit})
seconds = time.perf_counter() - start
print(json.dumps({{
    "seconds": seconds,
    "proven": out.proven,
    "cost": out.ranked[0].total_cost if out.ranked else None,
    "bound": out.bound_total_cost,
    "candidates": out.stats.get("candidate_dies"),
    "contents": out.stats.get("contents_generated"),
    "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
}}))
"""


def run(size: int, method: str, limit: float, favoured: bool) -> dict:
    code = CHILD.format(here=str(HERE), size=size, method=method, limit=limit, favoured=favoured)
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=limit + 600
    )
    if done.returncode != 0:
        return {"error": done.stderr.strip().splitlines()[-1] if done.stderr else "failed"}
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--sizes", type=int, nargs="*", default=[16, 18, 20, 22, 24])
    parser.add_argument("--enumerate-up-to", type=int, default=20)
    parser.add_argument("--limit", type=float, default=600.0, help="seconds per search")
    parser.add_argument("--chiplet-favoured", action="store_true")
    args = parser.parse_args()
    print(
        "blocks  method      seconds  proven  cost gap  peak MB  candidate dies  contents  "
        "best total cost"
    )
    for size in args.sizes:
        results = {}
        methods = ["generated"] + (["enumerated"] if size <= args.enumerate_up_to else [])
        for method in methods:
            r = run(size, method, args.limit, args.chiplet_favoured)
            results[method] = r
            if "error" in r:
                print(f"{size:6d}  {method:10s}  {r['error']}")
                continue
            gap = (r["cost"] - r["bound"]) / r["cost"] if r["cost"] else float("nan")
            print(
                f"{size:6d}  {method:10s}  {r['seconds']:7.2f}  {str(r['proven']):6s}  "
                f"{gap:8.2e}  {r['peak_mb']:7.0f}  {r['candidates'] or 0:14d}  "
                f"{r['contents'] or '-':>8}  {r['cost']:.10e}"
            )
        both = [r for r in results.values() if "cost" in r and r["cost"] is not None]
        if len(both) == 2:
            same = abs(both[0]["cost"] - both[1]["cost"]) <= 1e-9 * abs(both[1]["cost"])
            ratio = results["enumerated"]["seconds"] / results["generated"]["seconds"]
            print(f"        same optimum: {same}; enumerated / generated time: {ratio:.2f}x")


if __name__ == "__main__":
    main()
