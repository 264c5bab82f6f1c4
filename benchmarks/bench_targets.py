"""What choosing yield targets costs in solve time, on the demo problems.

Each demo is solved as shipped (defect-density targets chosen by the solver) and with its
defect_reduction curves removed (base densities only), in one run; the ratio is reported.

Run:  python benchmarks/bench_targets.py
"""

from __future__ import annotations

import time
import tomllib
from pathlib import Path

from optimizer.formulas import wafer
from optimizer.problem import parse_problem
from optimizer.solver import solve


def timed(data: dict) -> tuple[float, float]:
    wafer.clear_count_cache()
    problem = parse_problem(data)
    start = time.perf_counter()
    solution = solve(problem, top=3)
    return time.perf_counter() - start, solution.best.profit


def main() -> None:
    solve(parse_problem(tomllib.loads(Path("problems/edge_accelerator.toml").read_text())), top=1)
    for name in ("server_processor", "edge_accelerator"):
        data = tomllib.loads(Path(f"problems/{name}.toml").read_text())
        plain = {
            **data,
            "process": [
                {k: v for k, v in p.items() if k != "defect_reduction"} for p in data["process"]
            ],
        }
        t_plain, p_plain = timed(plain)
        t_targets, p_targets = timed(data)
        print(
            f"{name}: without target choice {t_plain:.1f} s, with {t_targets:.1f} s, "
            f"ratio {t_targets / t_plain:.2f}x; profit {p_plain:.4g} -> {p_targets:.4g}"
        )


if __name__ == "__main__":
    main()
