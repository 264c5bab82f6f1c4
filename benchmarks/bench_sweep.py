"""Sweep throughput: scenarios per second on 1 and 2 local workers.

A 10-block synthetic problem (benchmarks/synthetic.py, invented numbers) is swept over

1. ``market.volume`` (log steps), exact from the upper envelope of the designs' profit
   lines (a few proven solves; optimizer/explore/envelope.py);
2. ``market.volume`` again with one proven solve per point (``--every-point``): every
   scenario differs only in the market, so each worker prices the candidate dies once;
3. ``process.n1.defect_density``: one solve per point, candidate dies priced anew.

Each sweep runs on 1 worker (in this process) and on 2 local worker processes; the two
results must be identical. Reported: wall time, scenarios per second, speed-up, and the
floor targets (1,000 scenarios under 5 minutes on 2 workers; 2 workers at least 1.6x
faster than 1). A control loop first measures how much faster the machine runs two
CPU-bound processes than one, the ceiling for any speed-up here.

Run:  python benchmarks/bench_sweep.py [--scenarios 1000] [--every-point-scenarios 1000]
      [--density-scenarios 300] [--blocks 10] [--workers 2]   (0 skips a sweep)
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

import pandas as pd  # noqa: E402
from synthetic import synthetic_data  # noqa: E402

from optimizer.explore.parallel import Runner  # noqa: E402
from optimizer.explore.paths import study_from_data  # noqa: E402
from optimizer.explore.sweep import make_axis, run_sweep  # noqa: E402


def timed_sweep(study, axis, workers: int, every_point: bool):
    runner = Runner(workers=workers)
    start = time.perf_counter()
    with runner.session():
        result = run_sweep(study, [axis], runner=runner, every_point=every_point)
    return result, time.perf_counter() - start


def bench(study, axis, workers: int, label: str, every_point: bool = True):
    one, t_one = timed_sweep(study, axis, 1, every_point)
    many, t_many = timed_sweep(study, axis, workers, every_point)
    pd.testing.assert_frame_equal(one.points, many.points)
    pd.testing.assert_frame_equal(one.crossovers, many.crossovers)
    n = len(one.points)
    kinds = one.points["design_kind"].nunique()
    print(
        f"{label}: {n} scenarios, {one.solves} solves ({one.strategy}), {kinds} winning "
        f"kinds, {len(one.crossovers)} crossovers, candidates shared: {one.shared_candidates}"
    )
    print(f"  1 worker : {t_one:7.1f} s  {n / t_one:6.2f} scenarios/s")
    print(
        f"  {workers} workers: {t_many:7.1f} s  {n / t_many:6.2f} scenarios/s  "
        f"speed-up {t_one / t_many:.2f}x  (identical results)"
    )
    return one, t_one, t_many


def floors(label: str, n: int, t_one: float, t_many: float, workers: int) -> None:
    per_1000 = t_many * 1000 / n
    speed_up = t_one / t_many
    print(
        f"  {label} floor targets: 1,000 scenarios in {per_1000:.0f} s on {workers} workers "
        f"(< 300 s: {'met' if per_1000 < 300 else 'NOT met'}); speed-up {speed_up:.2f}x "
        f"(>= 1.6x: {'met' if speed_up >= 1.6 else 'NOT met'})"
    )


def _spin(n: int) -> float:
    start = time.perf_counter()
    total = 0
    for i in range(n):
        total += i
    return time.perf_counter() - start


def machine_ceiling(workers: int, n: int = 20_000_000) -> float:
    """Speed-up the machine gives ``workers`` independent CPU-bound processes.

    The same pure-Python loop runs alone and then in ``workers`` processes at once;
    the ratio bounds what any process pool can reach here.
    """
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=workers) as pool:
        list(pool.map(_spin, [1000] * workers))  # start the processes first
        alone = list(pool.map(_spin, [n]))[0]
        start = time.perf_counter()
        list(pool.map(_spin, [n] * workers))
        together = time.perf_counter() - start
    return workers * alone / together


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--scenarios", type=int, default=1000)
    parser.add_argument("--every-point-scenarios", type=int, default=1000)
    parser.add_argument("--density-scenarios", type=int, default=300)
    parser.add_argument("--blocks", type=int, default=10)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    study = study_from_data(synthetic_data(args.blocks), f"synthetic-{args.blocks}")
    print(
        f"machine ceiling: {args.workers} CPU-bound processes run "
        f"{machine_ceiling(args.workers):.2f}x faster than one (pure-Python control loop)"
    )

    if args.scenarios:
        volume = make_axis("market.volume", 3e4, 3e7, args.scenarios, log=True)
        one, t_one, t_many = bench(
            study, volume, args.workers, "market.volume sweep", every_point=False
        )
        floors("envelope", len(one.points), t_one, t_many, args.workers)
    if args.every_point_scenarios:
        volume = make_axis("market.volume", 3e4, 3e7, args.every_point_scenarios, log=True)
        one, t_one, t_many = bench(study, volume, args.workers, "market.volume sweep, every point")
        floors("every point", len(one.points), t_one, t_many, args.workers)
    if args.density_scenarios:
        density = make_axis(
            "process.n1.defect_density", 0.04, 0.4, args.density_scenarios, log=True
        )
        one, t_one, t_many = bench(study, density, args.workers, "process.n1.defect_density sweep")
        floors("every point", len(one.points), t_one, t_many, args.workers)


if __name__ == "__main__":
    main()
