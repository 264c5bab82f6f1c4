"""Product families: the proven family search, and the same family by exhaustive enumeration.

The families are generated here (invented numbers, for timing only): three products
built from one shared set of block kinds. The first two kinds scale with the product
(a compute-like logic block and a memory block, 1, 2 and 4 instances by default); every
other kind is in a product with probability 0.7, one instance. Each product has its own
price and volume, rising and falling with its tier. Links join neighbouring unscaled
kinds only: a link touching a block whose count differs between products gives a die
holding it a different interface area in each, so such a die could never be shared.

1. Proven family solve (``solve_family``) for each ``--sizes`` block-kind count
   (default 10): seconds, whether the optimum is proven, its gap, the designs listed
   per product, the shared dies and the reuse premium.
2. At the ``--exhaustive-sizes`` (default 4 and 5 kinds), the same family by brute force:
   every design of each product priced with the exhaustive reference
   (``exhaustive_search``, no pruning), each turned into a full design
   (``selection_specs`` + ``evaluate_specs``), then every combination of one design per
   product valued (one die design paid once, one defect-density target per process) and
   the best kept. The combination loop runs over the designs of all products but the
   one with the longest list, and values that product's whole list at once with arrays;
   the values are written out here, not taken from the solver, and the best combination
   is priced again by ``optimizer.solver.family.family_profit``. Both methods must give
   the same family profit.

Timing protocol: both methods first solve a 2-kind family once, so start-up (imports,
loading the compiled counting kernel, the first integer program) is outside both
timings; the gross-die cache is cleared before every timed run, so each pays for its
own exact counts. Timed for the solver: the whole ``solve_family`` call (each product
alone, the split-cost bounds, the listings and the combination program), median of
``--repeat`` runs. Timed for the reference, once: enumeration and pricing of every
design, building the full designs, and the combination loop (each part also shown).

Run:  python benchmarks/bench_family.py [--sizes 10] [--exhaustive-sizes 4 5] [--limit 60]
                                        [--repeat 3] [--seed 0] [--skip-exhaustive]
"""

from __future__ import annotations

import argparse
import itertools
import math
import statistics
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import scipy.sparse as sp

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from optimizer.designs import DesignResult, evaluate_specs  # noqa: E402
from optimizer.evaluator import Evaluator  # noqa: E402
from optimizer.family import Family, parse_family  # noqa: E402
from optimizer.formulas import wafer  # noqa: E402
from optimizer.problem import Problem  # noqa: E402
from optimizer.solver.exhaustive import exhaustive_search  # noqa: E402
from optimizer.solver.family import die_key, family_profit, solve_family  # noqa: E402
from optimizer.solver.selection import selection_specs  # noqa: E402

TIER_NAMES = ("small", "mid", "large", "xl", "xxl")


def family_data(
    n_kinds: int, seed: int = 0, tiers: tuple[int, ...] = (1, 2, 4), max_dies: int = 6
) -> dict:
    """A family document (as decoded TOML) of len(tiers) products over n_kinds blocks."""
    if n_kinds < 2:
        raise ValueError("a family here needs at least 2 block kinds")
    rng = np.random.default_rng(seed)
    kinds = ["logic", "memory", "analog", "io"]
    blocks = [
        {
            "name": "core",
            "kind": "logic",
            "area": f"{rng.uniform(25, 45):.2f} mm^2",
            "defect_sensitivity": 0.75,
        },
        {
            "name": "sram",
            "kind": "memory",
            "area": f"{rng.uniform(8, 18):.2f} mm^2",
            "defect_sensitivity": 0.6,
        },
    ]
    for i in range(2, n_kinds):
        blocks.append(
            {
                "name": f"unit{i:02d}",
                "kind": kinds[i % 4],
                "area": f"{rng.uniform(4, 30):.2f} mm^2",
                "defect_sensitivity": float(rng.uniform(0.3, 0.9)),
            }
        )
    # neighbouring unscaled kinds only (see the module docstring)
    links = [
        {
            "blocks": [blocks[i]["name"], blocks[i + 1]["name"]],
            "bandwidth": f"{rng.uniform(1500, 4000):.0f} GB/s",
        }
        for i in range(2, n_kinds - 1)
    ]
    processes = [
        {
            "name": "p_fast",
            "wafer_diameter": "300 mm",
            "wafer_cost": 15000.0,
            "defect_density": "0.13 /cm^2",
            "yield_model": "negative_binomial",
            "clustering_alpha": 2.0,
            "mask_set_cost": 5e6,
            "sort_cost_per_die": 2.0,
            "fault_coverage": 0.995,
        },
        {
            "name": "p_mid",
            "wafer_diameter": "300 mm",
            "wafer_cost": 8000.0,
            "defect_density": "0.08 /cm^2",
            "yield_model": "negative_binomial",
            "clustering_alpha": 3.0,
            "mask_set_cost": 2.5e6,
            "sort_cost_per_die": 1.5,
            "fault_coverage": 0.99,
            "area_scale": {"logic": 1.8, "memory": 1.6, "analog": 1.1, "io": 1.05},
        },
        {
            "name": "p_old",
            "wafer_diameter": "300 mm",
            "wafer_cost": 3500.0,
            "defect_density": "0.05 /cm^2",
            "yield_model": "murphy",
            "mask_set_cost": 0.8e6,
            "sort_cost_per_die": 1.0,
            "fault_coverage": 0.98,
            "area_scale": {"logic": 3.5, "memory": 3.0, "analog": 1.2, "io": 1.1},
        },
    ]
    packagings = [
        {
            "name": "one_die",
            "kind": "single_die",
            "package_cost": 20.0,
            "package_yield": 0.995,
            "final_test_cost": 8.0,
            "design_cost": 5e5,
        },
        {
            "name": "multi_die",
            "kind": "organic_substrate",
            "max_dies": max_dies,
            "bond_cost_per_die": 2.0,
            "bond_yield": 0.997,
            "carrier_cost": 25.0,
            "carrier_yield": 0.99,
            "package_cost": 18.0,
            "package_yield": 0.995,
            "final_test_cost": 10.0,
            "interface_density": "90 GB/s/mm^2",
            "port_area": "0.5 mm^2",
            "design_cost": 1.5e6,
        },
    ]
    common = max(1, (n_kinds - 2) * 2 // 3)
    products = []
    for k, tier in enumerate(tiers):
        counts = {"core": tier, "sram": tier}
        for i, b in enumerate(blocks[2:]):
            # the first kinds are in every product, the last ones in the larger tiers
            counts[b["name"]] = int(i < common or rng.random() < 0.35 * (k + 1))
        products.append(
            {
                "name": TIER_NAMES[k] if k < len(TIER_NAMES) else f"tier{k}",
                "blocks": counts,
                "market": {
                    "unit_price": round(400.0 * tier**1.2 * rng.uniform(0.9, 1.1), 2),
                    "volume": round(2.0e6 / tier**1.3 * rng.uniform(0.8, 1.2)),
                },
            }
        )
    return {
        "title": f"synthetic {len(tiers)}-product family over {n_kinds} block kinds (invented)",
        "constraints": {
            "max_dies": max_dies,
            "max_die_area": "858 mm^2",
            "keep_together": [["core", "sram"]],
        },
        "process": processes,
        "packaging": packagings,
        "design_cost": {"per_die_design": 4e6, "per_mm2": 2e4},
        "block": blocks,
        "link": links,
        "product": products,
    }


def family_of(n_kinds: int, seed: int, tiers: tuple[int, ...], max_dies: int) -> Family:
    return parse_family(family_data(n_kinds, seed, tiers, max_dies), "<bench>")


# ------------------------------------------------------------------ the exhaustive reference
def all_designs(problem: Problem, name: str) -> tuple[list[DesignResult], float, float]:
    """Every admissible design of one product, priced; (designs, enumeration s, build s)."""
    evaluator = Evaluator(problem)
    t0 = time.perf_counter()
    outcome = exhaustive_search(evaluator, top=10**7)
    t1 = time.perf_counter()
    designs = []
    for sel, cost in outcome.priced.items():
        if not math.isfinite(cost):
            continue
        specs = selection_specs(evaluator, outcome.candidates[sel.packaging_index], sel)
        packaging = problem.packaging[sel.packaging_index].name
        design = evaluate_specs(evaluator, specs, packaging, name)
        if math.isfinite(design.profit) and not design.violations:
            designs.append(design)
    return designs, t1 - t0, time.perf_counter() - t1


@dataclass(frozen=True)
class Item:
    """One design as a family values it: its profit with its own one-time costs added
    back, its die designs (key -> NRE) and its targets (process -> density, one-time)."""

    own: float
    dies: dict
    targets: dict


def one_time_cost(problem: Problem, process_name: str, density: float) -> float:
    process = next(p for p in problem.process if p.name == process_name)
    for d, cost, _ in process.defect_targets():
        if abs(d - density) <= 1e-12 * max(abs(d), 1e-300):
            return float(cost)
    raise ValueError(f"{process_name}: no target at {density} /cm^2")


def item_of(problem: Problem, design: DesignResult) -> Item:
    dies: dict = {}
    targets: dict = {}
    for die in design.dies:
        dies[die_key(die)] = die.nre
        cost = one_time_cost(problem, die.process, die.defect_density_per_cm2)
        targets[die.process] = (die.defect_density_per_cm2, cost)
    own = design.profit + sum(dies.values()) + sum(c for _, c in targets.values())
    return Item(own, dies, targets)


def same_density(a: float, b: float) -> bool:
    return abs(a - b) <= 1e-12 * max(abs(a), abs(b), 1e-300)


def best_combination(items: list[list[Item]]) -> tuple[float, list[int], int]:
    """Value every combination of one item per product; (best value, its picks, count)."""
    order = sorted(range(len(items)), key=lambda i: len(items[i]))
    *head, last = order
    tail = items[last]
    keys: dict = {}
    pairs: dict = {}
    rows, cols, vals, trows, tcols = [], [], [], [], []
    for r, it in enumerate(tail):
        for key, nre in it.dies.items():
            rows.append(r)
            cols.append(keys.setdefault(key, len(keys)))
            vals.append(nre)
        for process, (density, cost) in it.targets.items():
            trows.append(r)
            tcols.append(pairs.setdefault((process, density, cost), len(pairs)))
    n = len(tail)
    die_nre = sp.csr_matrix((vals, (rows, cols)), shape=(n, max(len(keys), 1)))
    uses = sp.csr_matrix((np.ones(len(trows)), (trows, tcols)), shape=(n, max(len(pairs), 1)))
    own_tail = np.array([it.own for it in tail])
    nre_tail = np.asarray(die_nre.sum(axis=1)).ravel()
    pair_list = list(pairs)
    best, pick = -math.inf, []
    combos = 0
    for combo in itertools.product(*(range(len(items[i])) for i in head)):
        combos += n
        library: dict = {}
        held: dict = {}
        own = 0.0
        clash = False
        for i, j in zip(head, combo, strict=True):
            it = items[i][j]
            own += it.own
            library.update(it.dies)
            for process, (density, cost) in it.targets.items():
                if process in held:
                    if not same_density(held[process][0], density):
                        clash = True
                        break
                    held[process] = (density, max(held[process][1], cost))
                else:
                    held[process] = (density, cost)
            if clash:
                break
        if clash:
            continue
        present = np.zeros(die_nre.shape[1])
        for key in library:
            k = keys.get(key)
            if k is not None:
                present[k] = 1.0
        # what each tail design adds: its dies not yet in the library, its targets
        # beyond what the others already paid; a second density on a process is refused
        extra = np.zeros(uses.shape[1])
        refused = np.zeros(uses.shape[1])
        for q, (process, density, cost) in enumerate(pair_list):
            if process in held:
                if same_density(held[process][0], density):
                    extra[q] = max(0.0, cost - held[process][1])
                else:
                    refused[q] = 1.0
            else:
                extra[q] = cost
        paid = sum(library.values()) + sum(c for _, c in held.values())
        values = own + own_tail - paid - (nre_tail - die_nre @ present) - uses @ extra
        values[(uses @ refused) > 0] = -math.inf
        j = int(np.argmax(values))
        if values[j] > best:
            best = float(values[j])
            pick = [0] * len(items)
            for i, c in zip(head, combo, strict=True):
                pick[i] = c
            pick[last] = j
    return best, pick, combos


def exhaustive_family(family: Family) -> dict:
    problems = [m.problem for m in family.members]
    t0 = time.perf_counter()
    lists, enum_s, build_s = [], 0.0, 0.0
    for member in family.members:
        designs, e, b = all_designs(member.problem, member.name)
        lists.append(designs)
        enum_s += e
        build_s += b
    t1 = time.perf_counter()
    items = [[item_of(p, d) for d in designs] for p, designs in zip(problems, lists, strict=True)]
    value, pick, combos = best_combination(items)
    t2 = time.perf_counter()
    chosen = [lists[i][j] for i, j in enumerate(pick)]
    check = family_profit(problems, chosen)[0]
    return {
        "seconds": t2 - t0,
        "enumerate_s": enum_s,
        "build_s": build_s,
        "combine_s": t2 - t1,
        "designs": [len(x) for x in lists],
        "combinations": combos,
        "profit": value,
        "profit_checked": check,
        "designs_chosen": chosen,
    }


# ------------------------------------------------------------------ the runs
def cold_family(family: Family, limit: float | None):
    wafer.clear_count_cache()
    t0 = time.perf_counter()
    solution = solve_family(family, time_limit=limit)
    return time.perf_counter() - t0, solution


def shared_text(solution) -> str:
    shared = [d for d in solution.library if len(d.users) > 1]
    if not shared:
        return "none"
    return "; ".join(
        f"{d.process} [{', '.join(f'{b} x{k}' for b, k in d.blocks.items())}] "
        f"used by {', '.join(f'{u} x{c}' for u, c in d.users.items())}"
        for d in shared
    )


def same(a: float, b: float) -> bool:
    return abs(a - b) <= 1e-9 * max(abs(a), abs(b), 1.0)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument(
        "--sizes",
        type=int,
        nargs="*",
        default=[10],
        help="block-kind counts for the proven family solve",
    )
    parser.add_argument(
        "--exhaustive-sizes",
        type=int,
        nargs="*",
        default=[4, 5],
        help="block-kind counts also solved by exhaustive enumeration",
    )
    parser.add_argument(
        "--tiers",
        type=int,
        nargs="*",
        default=[1, 2, 4],
        help="instances of the two scaled kinds, one number per product",
    )
    parser.add_argument("--max-dies", type=int, default=6)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument(
        "--limit",
        type=float,
        default=60.0,
        help="wall-clock seconds per family solve, pricing included",
    )
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--skip-exhaustive", action="store_true")
    args = parser.parse_args()
    tiers = tuple(args.tiers)

    warm = family_of(2, args.seed, (1, 2), args.max_dies)
    solve_family(warm)
    exhaustive_family(warm)

    if args.sizes:
        proven_table(args, tiers)
    if args.skip_exhaustive or not args.exhaustive_sizes:
        return
    exhaustive_table(args, tiers)


def proven_table(args, tiers) -> None:
    print(
        f"1. proven family solve, {len(tiers)} products (tiers {tiers}), seed {args.seed}, "
        f"limit {args.limit:g} s, median of {args.repeat}"
    )
    print(
        "kinds  seconds (min-max)      proven  gap       listed per product   "
        "profit (M)   premium (M)  shared dies"
    )
    for n in args.sizes:
        family = family_of(n, args.seed, tiers, args.max_dies)
        runs = [cold_family(family, args.limit) for _ in range(args.repeat)]
        times = [t for t, _ in runs]
        s = runs[0][1]
        print(
            f"{n:5d}  {statistics.median(times):7.2f} ({min(times):.2f}-{max(times):.2f})"
            f"{'':4s}{str(s.proven):6s}  {s.gap:8.2e}  {str(s.stats['listed']):19s}  "
            f"{s.profit / 1e6:10.2f}  {s.reuse_premium / 1e6:11.2f}  {shared_text(s)}"
        )


def exhaustive_table(args, tiers) -> None:
    print()
    print("2. proven family solve vs exhaustive enumeration of the family's combined choices")
    print(
        "kinds  designs per product     combinations  exhaustive s (enum + build + combine)"
        "   solver s  ratio   same profit"
    )
    for n in args.exhaustive_sizes:
        family = family_of(n, args.seed, tiers, args.max_dies)
        runs = [cold_family(family, None) for _ in range(args.repeat)]
        t_ours = statistics.median(t for t, _ in runs)
        ours = runs[0][1]
        wafer.clear_count_cache()
        brute = exhaustive_family(family)
        agree = same(ours.profit, brute["profit"]) and same(
            brute["profit"], brute["profit_checked"]
        )
        print(
            f"{n:5d}  {str(brute['designs']):22s}  {brute['combinations']:12,d}  "
            f"{brute['seconds']:8.2f} ({brute['enumerate_s']:.2f} + {brute['build_s']:.2f} + "
            f"{brute['combine_s']:.2f}){'':6s}{t_ours:8.2f}  {brute['seconds'] / t_ours:5.1f}x  "
            f"{agree} (solver {ours.profit / 1e6:.4f} M, exhaustive {brute['profit'] / 1e6:.4f} M, "
            f"proven {ours.proven})"
        )


if __name__ == "__main__":
    main()
