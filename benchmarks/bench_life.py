"""Product life: a 20-period life against the one-period problem, same design choices.

The 8-block benchmark problem (``synthetic.py``: three processes, three packagings;
invented numbers) is solved once as it is (``solve``, one set of numbers) and once
over a life of 20 quarters (``solve_life``): volumes ramping up and tailing off, the
unit price eroding 10% a year, the first process's defect density learning towards
half its start value with an 18-month time constant, its wafer cost eroding 5% a year.

Timing protocol: both first solve a 4-block problem once (imports, compiled kernels,
the first integer program), and the gross-die cache is cleared before every timed run;
each time is the median of ``--repeat`` runs of the whole call.

Run:  python benchmarks/bench_life.py [--blocks 8] [--periods 20] [--repeat 3]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from synthetic import synthetic_data  # noqa: E402

from optimizer.formulas import wafer  # noqa: E402
from optimizer.life import life_plan  # noqa: E402
from optimizer.problem import parse_problem  # noqa: E402
from optimizer.solver import solve  # noqa: E402
from optimizer.solver.life import solve_life  # noqa: E402


def life_data(blocks: int, periods: int) -> dict:
    data = synthetic_data(blocks)
    volume = float(data["market"]["volume"])
    ramp = [min(k + 1, 4, periods - k) for k in range(periods)]  # up, flat, down
    total = sum(ramp)
    process = data["process"][0]
    value, unit = str(process["defect_density"]).split()
    data["life"] = {
        "period": "quarter",
        "volumes": [volume * r / total for r in ramp],
        "discount_rate": 0.1,
        "market": {"unit_price": {"form": "erosion", "per_year": 0.10}},
        "process": {
            process["name"]: {
                "defect_density": {
                    "form": "learn_by_time",
                    "mature": f"{float(value) * 0.5} {unit}",
                    "time_constant": "18 month",
                },
                "wafer_cost": {"form": "erosion", "per_year": 0.05},
            }
        },
    }
    return data


def timed(function, repeat: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeat):
        wafer.clear_count_cache()
        t0 = time.perf_counter()
        out = function()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--blocks", type=int, default=8)
    parser.add_argument("--periods", type=int, default=20)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    solve(parse_problem(synthetic_data(4)), top=1)
    data = life_data(args.blocks, args.periods)
    plain = {k: v for k, v in data.items() if k != "life"}
    problem = parse_problem(plain)
    plan = life_plan(data)
    t_one, one = timed(lambda: solve(problem, top=1, refine=False), args.repeat)
    t_life, life = timed(lambda: solve_life(plan), args.repeat)
    print(
        f"{args.blocks} blocks: one period {t_one:.3f} s (proven {one.proven_optimal}); "
        f"{args.periods}-quarter life {t_life:.3f} s (proven {life.proven}, "
        f"{life.listed} designs listed); ratio {t_life / t_one:.1f}x"
    )


if __name__ == "__main__":
    main()
