"""The "many partitions nearly tie" family: a seeded generator of invented problems.

Invented numbers, for benchmarks and tests only: no process, package or product is
described. Every block has count 1 and an area drawn log-uniformly from 5 to 120 mm^2;
one organic-substrate packaging; fault coverage 1.0; no links; NRE tiny next to volume x
price. With one process the cost of a die depends on its area alone, so every partition
whose parts have about the same areas costs about the same: a great many designs lie
within a fraction of a percent of the optimum, which is what makes the family hard for
bounding methods and easy for the subset DP.

``tie_problem(seed, blocks, processes=1)`` returns the decoded-TOML dict that
``optimizer.problem.parse_problem`` accepts. With ``processes=3`` each block is pure
logic or pure IO, and three processes trade wafer cost against area scale (the cheap
ones shrink logic poorly and IO nearly as well as the leading one).
"""

from __future__ import annotations

import math

import numpy as np

# (name, wafer cost, defect density /cm^2, clustering alpha, logic scale, io scale)
PROCESSES = (
    ("lead", 16000.0, 0.10, 2.0, 1.0, 1.0),
    ("mid", 9000.0, 0.08, 2.5, 1.7, 1.08),
    ("old", 4000.0, 0.06, 3.0, 3.2, 1.15),
)


def tie_problem(seed: int, blocks: int, processes: int = 1, max_dies: int = 8) -> dict:
    """A tie-family problem (invented numbers) of ``blocks`` blocks for ``seed``."""
    if processes not in (1, 3):
        raise ValueError("processes must be 1 or 3")
    rng = np.random.default_rng(seed)
    areas = np.exp(rng.uniform(math.log(5.0), math.log(120.0), size=blocks))
    sensitivity = rng.uniform(0.6, 1.0, size=blocks)
    kinds = rng.choice(["logic", "io"], size=blocks, p=[0.7, 0.3]) if processes == 3 else None
    block_list = []
    for b in range(blocks):
        block = {
            "name": f"b{b:02d}",
            "kind": "logic" if kinds is None else str(kinds[b]),
            "area": f"{areas[b]:.4f} mm^2",
            "count": 1,
            "defect_sensitivity": round(float(sensitivity[b]), 4),
        }
        block_list.append(block)
    process_list = []
    for name, wafer_cost, density, alpha, logic, io in PROCESSES[:processes]:
        process_list.append(
            {
                "name": name,
                "wafer_diameter": "300 mm",
                "edge_exclusion": "3 mm",
                "scribe_width": "80 um",
                "wafer_cost": wafer_cost,
                "defect_density": f"{density} /cm^2",
                "yield_model": "negative_binomial",
                "clustering_alpha": alpha,
                "systematic_yield": 0.98,
                "mask_set_cost": 2000.0,  # negligible next to volume x price
                "sort_cost_per_die": 0.5,
                "fault_coverage": 1.0,
                "area_scale": {"logic": logic, "memory": logic, "analog": io, "io": io},
            }
        )
    packaging = {
        "name": "organic",
        "kind": "organic_substrate",
        "max_dies": max_dies,
        "bond_cost_per_die": 0.6,
        "bond_yield": 0.999,
        "carrier_cost": 8.0,
        "carrier_yield": 0.995,
        "package_cost": 5.0,
        "package_yield": 0.998,
        "final_test_cost": 3.0,
        "interface_density": "100 GB/s/mm^2",
        "port_area": "0.3 mm^2",
        "design_cost": 1000.0,
    }
    # price from a rough cost of the silicon on the leading process (about 640 cm^2 of
    # usable wafer), so that the optimum makes money
    total_cm2 = float(areas.sum()) / 100.0
    rough = 16000.0 / 640.0 * total_cm2 * 2.0 + 20.0
    return {
        "title": f"tie family, {blocks} blocks, {processes} process(es), seed {seed} (invented)",
        "note": "Invented data for benchmarks: no real process, package or product.",
        "market": {"currency": "USD", "unit_price": round(rough * 1.6, 4), "volume": 2.0e7},
        "constraints": {"max_die_area": "858 mm^2", "max_dies": max_dies},
        "process": process_list,
        "packaging": [packaging],
        "design_cost": {"per_die_design": 500.0, "per_mm2": 1.0},
        "block": block_list,
        "link": [],
    }
