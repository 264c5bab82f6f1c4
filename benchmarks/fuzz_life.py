"""Fuzz the proven life solve, with its decision table, against brute force.

On demand, not in CI. Each seed draws a small feature-rich problem from
``tests/random_problems.py`` (invented data) and gives it a life plan
(``tests/test_life_solver.py: _random_life``): years or quarters, volumes ramping up and
down, the price eroding, the first process learning by time, its wafer cost eroding.
Half of the seeds buy defect-density targets per period, some pay their one-time costs
at period 2. ``solve_life(plan, table=True)`` is compared with every design of the
exhaustive reference priced period by period:

* the optimum must be proven and its NPV equal the brute-force best to 1e-9 relative;
* every proven row of the decision table must equal the brute-force best of its
  architecture (packaging, die count), and no row may be worth more than it;
* a row without a design must have none in the brute force either (when proven);
* a life no design keeps must be refused by both.

Run:  python benchmarks/fuzz_life.py [--seeds 80] [--start 100]
"""

from __future__ import annotations

import argparse
import math
import random
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from optimizer.errors import ProblemError  # noqa: E402
from optimizer.life import life_plan  # noqa: E402
from optimizer.solver.life import solve_life  # noqa: E402
from tests.test_life_solver import _brute_force_by_architecture, _random_life  # noqa: E402

RTOL = 1e-9


def _close(a: float, b: float) -> bool:
    return math.isclose(a, b, rel_tol=RTOL, abs_tol=1e-6)


def check(seed: int) -> str:
    """'agree', 'infeasible' (for both), or a line saying how they differ."""
    rng = random.Random(seed)
    data = _random_life(seed, rng.choice(["year", "quarter"]))
    if rng.random() < 0.5:
        data["life"]["targets"] = "per_period"
    if rng.random() < 0.3:
        data["life"]["one_time_period"] = 2
    plan = life_plan(data, f"seed{seed}")
    reference = _brute_force_by_architecture(plan)
    try:
        found = solve_life(plan, table=True)
    except ProblemError as exc:
        if not reference and "no design keeps" in exc.message:
            return "infeasible"
        return f"solver refused ({exc.message}); brute force best {max(reference.values())}"
    if not reference:
        return f"solver found {found.best.npv} where brute force has no design"
    best = max(reference.values())
    if not found.proven or not _close(found.best.npv, best):
        return f"optimum {found.best.npv} (proven {found.proven}) vs brute force {best}"
    for row in found.rows:
        want = reference.get((row.packaging, row.n_dies))
        if row.value is None:
            if row.proven and want is not None:
                return f"row {row.label} empty, brute force {want}"
            continue
        if want is None or row.npv > want + RTOL * abs(want) + 1e-6:
            return f"row {row.label} worth {row.npv}, brute force {want}"
        if row.proven and not _close(row.npv, want):
            return f"row {row.label} {row.npv} (proven) vs brute force {want}"
    return "agree"


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", type=int, default=80)
    parser.add_argument("--start", type=int, default=100)
    args = parser.parse_args()
    counts = {"agree": 0, "infeasible": 0, "differ": 0}
    for seed in range(args.start, args.start + args.seeds):
        outcome = check(seed)
        if outcome in counts:
            counts[outcome] += 1
        else:
            counts["differ"] += 1
            print(f"seed {seed}: {outcome}", flush=True)
    print(
        f"{args.seeds} lives from seed {args.start}: {counts['agree']} agree, "
        f"{counts['infeasible']} infeasible for both, {counts['differ']} differences"
    )


if __name__ == "__main__":
    main()
