"""Synthetic benchmark problems: n distinct blocks, three processes, three packagings.

Invented numbers, for timing only. Blocks have mixed kinds and areas; neighbouring
blocks are linked, so cuts cost interface area.
"""

from __future__ import annotations

import numpy as np

from optimizer.problem import Problem, parse_problem


def synthetic_problem(
    n_blocks: int, seed: int = 0, max_dies: int = 8, chiplet_favoured: bool = False
) -> Problem:
    """The validated problem of :func:`synthetic_data`."""
    return parse_problem(synthetic_data(n_blocks, seed, max_dies, chiplet_favoured))


def synthetic_data(
    n_blocks: int, seed: int = 0, max_dies: int = 8, chiplet_favoured: bool = False
) -> dict:
    """The problem as a decoded TOML document (what sweeps and studies start from).

    With ``chiplet_favoured`` the two leading processes have 2.5 times the defect density
    and the volume is ten times larger, so that splitting into chiplets pays (at eight
    blocks the optimum is three dies on the organic substrate, not one large die).
    """
    rng = np.random.default_rng(seed)
    kinds = ["logic", "memory", "analog", "io"]
    blocks = [
        {
            "name": f"blk{i:02d}",
            "kind": kinds[i % 4],
            "area": f"{rng.uniform(20, 90):.2f} mm^2",
            "defect_sensitivity": float(rng.uniform(0.4, 0.9)),
        }
        for i in range(n_blocks)
    ]
    links = [
        {
            "blocks": [f"blk{i:02d}", f"blk{i + 1:02d}"],
            "bandwidth": f"{rng.uniform(50, 400):.0f} GB/s",
        }
        for i in range(n_blocks - 1)
    ]
    processes = [
        {
            "name": "n1",
            "wafer_diameter": "300 mm",
            "wafer_cost": 16000.0,
            "defect_density": "0.12 /cm^2",
            "yield_model": "negative_binomial",
            "clustering_alpha": 2.0,
            "mask_set_cost": 1.5e7,
            "sort_cost_per_die": 2.0,
            "fault_coverage": 0.995,
        },
        {
            "name": "n2",
            "wafer_diameter": "300 mm",
            "wafer_cost": 9000.0,
            "defect_density": "0.08 /cm^2",
            "yield_model": "negative_binomial",
            "clustering_alpha": 3.0,
            "mask_set_cost": 6e6,
            "sort_cost_per_die": 1.5,
            "fault_coverage": 0.99,
            "area_scale": {"logic": 1.8, "memory": 1.6, "analog": 1.1, "io": 1.05},
        },
        {
            "name": "n3",
            "wafer_diameter": "300 mm",
            "wafer_cost": 4000.0,
            "defect_density": "0.05 /cm^2",
            "yield_model": "murphy",
            "mask_set_cost": 1.5e6,
            "sort_cost_per_die": 1.0,
            "fault_coverage": 0.98,
            "area_scale": {"logic": 3.5, "memory": 3.0, "analog": 1.2, "io": 1.1},
        },
    ]
    packagings = [
        {
            "name": "single",
            "kind": "single_die",
            "package_cost": 30.0,
            "package_yield": 0.995,
            "final_test_cost": 12.0,
            "design_cost": 5e5,
        },
        {
            "name": "organic",
            "kind": "organic_substrate",
            "max_dies": max_dies,
            "bond_cost_per_die": 2.5,
            "bond_yield": 0.997,
            "carrier_cost": 35.0,
            "carrier_yield": 0.99,
            "package_cost": 25.0,
            "package_yield": 0.995,
            "final_test_cost": 15.0,
            "interface_density": "90 GB/s/mm^2",
            "port_area": "0.5 mm^2",
            "design_cost": 1.5e6,
        },
        {
            "name": "interposer",
            "kind": "silicon_interposer",
            "max_dies": max_dies,
            "bond_cost_per_die": 4.0,
            "bond_yield": 0.995,
            "carrier_cost": 30.0,
            "carrier_yield": 0.99,
            "package_cost": 25.0,
            "package_yield": 0.995,
            "final_test_cost": 15.0,
            "interface_density": "400 GB/s/mm^2",
            "port_area": "0.2 mm^2",
            "design_cost": 3e6,
            "interposer_process": "n3",
            "interposer_area_factor": 1.2,
            "interposer_extra_area": "50 mm^2",
            "interposer_max_area": "3000 mm^2",
            "interposer_defect_sensitivity": 0.1,
        },
    ]
    if chiplet_favoured:
        processes[0]["defect_density"] = "0.3 /cm^2"
        processes[1]["defect_density"] = "0.2 /cm^2"
    return {
        "title": f"synthetic {n_blocks}-block problem (invented)",
        "market": {"unit_price": 1500.0, "volume": 3e6 if chiplet_favoured else 3e5},
        "constraints": {"max_dies": max_dies, "max_die_area": "858 mm^2"},
        "process": processes,
        "packaging": packagings,
        "design_cost": {"per_die_design": 5e6, "per_mm2": 4e4},
        "block": blocks,
        "link": links,
    }
