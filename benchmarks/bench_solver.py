"""Solver speed: the proven MILP search against the exhaustive reference, and scaling.

1. Eight blocks, three processes, three packaging options (4,140 set partitions, about
   two million complete designs): both methods on the same problem in one run, same
   optimum required, time ratio reported. Two instances: the benchmark problem (its
   optimum is one large die) and a chiplet-favoured variant (its optimum is three dies
   on the organic substrate), which makes the search do real integer programming.
2. Proven solve time as the block count grows (4 to 20 blocks), with a time limit.

Timing protocol: both methods first solve a 4-block problem once, so one-time start-up
(imports, loading the compiled counting kernel, the solver's first call) is outside both
timings; the gross-die cache is cleared before every timed run, so each run pays for
its own exact counts. The solver's time is the median of --repeat cold runs; the
exhaustive reference runs once (it is long enough not to need more).

Run:  python benchmarks/bench_solver.py [--sizes 4 6 8 10 12 14 16 18 20] [--limit 60]
"""

from __future__ import annotations

import argparse
import resource
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from synthetic import synthetic_data, synthetic_problem  # noqa: E402

from optimizer.formulas import wafer  # noqa: E402
from optimizer.problem import ProblemError  # noqa: E402
from optimizer.solver import solve  # noqa: E402


def cold_seconds(problem, method: str) -> tuple[float, object]:
    wafer.clear_count_cache()
    t0 = time.perf_counter()
    solution = solve(problem, top=1, method=method)
    return time.perf_counter() - t0, solution


def compare(label: str, problem, repeat: int) -> None:
    runs = [cold_seconds(problem, "milp") for _ in range(repeat)]
    t_ours = statistics.median(t for t, _ in runs)
    ours = runs[0][1]
    t_brute, brute = cold_seconds(problem, "exhaustive")
    same = abs(ours.best.profit - brute.best.profit) <= 1e-9 * abs(brute.best.profit)
    dies = sum(d.copies for d in ours.best.dies)
    print(
        f"{label}: optimum {dies} die(s) on {ours.best.packaging}; milp median "
        f"{t_ours * 1000:.0f} ms of {repeat} (min {min(t for t, _ in runs) * 1000:.0f} ms, "
        f"proven {ours.proven_optimal}); exhaustive {t_brute:.2f} s over "
        f"{brute.stats['designs_priced']:,} designs; same optimum: {same}; "
        f"ratio {t_brute / t_ours:.0f}x"
    )


def whole_process(label: str, data: dict, repeat: int) -> None:
    """`dieplan solve` as a user runs it: a fresh process, the file read from disk."""
    import subprocess
    import tempfile

    from fuzz_solver import to_toml

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "bench.toml"
        path.write_text(to_toml(data))
        exe = Path(sys.executable).with_name("dieplan")
        for extra in ([], ["--table-time", "0"]):
            times = []
            for _ in range(repeat):
                t0 = time.perf_counter()
                subprocess.run(
                    [str(exe), "solve", str(path), "--no-write", *extra],
                    check=True,
                    stdout=subprocess.DEVNULL,
                )
                times.append(time.perf_counter() - t0)
            what = " ".join(extra) or "default options (decision table included)"
            print(
                f"{label}, whole process, {what}: median {statistics.median(times):.2f} s "
                f"of {repeat} (min {min(times):.2f} s)"
            )


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--sizes", type=int, nargs="*", default=[4, 6, 8, 10, 12, 14, 16, 18, 20])
    parser.add_argument(
        "--limit", type=float, default=120.0, help="wall-clock seconds per solve, pricing included"
    )
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--skip-exhaustive", action="store_true")
    args = parser.parse_args()
    warm = synthetic_problem(4)
    solve(warm, top=1)
    solve(warm, top=1, method="exhaustive")
    whole_process("8 blocks, benchmark problem", synthetic_data(8), 3)
    whole_process("8 blocks, chiplet-favoured variant", synthetic_data(8, chiplet_favoured=True), 3)
    if not args.skip_exhaustive:
        compare("8 blocks, benchmark problem", synthetic_problem(8), args.repeat)
        compare(
            "8 blocks, chiplet-favoured variant",
            synthetic_problem(8, chiplet_favoured=True),
            args.repeat,
        )
    print("blocks  seconds  proven  gap        candidates  programs  rounds  peak RSS MB")
    for n in args.sizes:
        problem = synthetic_problem(n)
        t0 = time.perf_counter()
        try:
            s = solve(problem, top=1, time_limit=args.limit)
        except ProblemError as error:  # the limit covers pricing too
            print(f"{n:6d}  {time.perf_counter() - t0:7.2f}  no design within the limit: {error}")
            continue
        dt = time.perf_counter() - t0
        rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(
            f"{n:6d}  {dt:7.2f}  {str(s.proven_optimal):6s}  {s.gap:9.2e}  "
            f"{s.stats['candidate_dies']:10d}  {s.stats['programs']:8d}  "
            f"{s.stats.get('rounds', 0):6d}  {rss:11.0f}"
        )


if __name__ == "__main__":
    main()
