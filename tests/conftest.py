"""Shared fixtures: a tiny valid problem file that tests mutate one field at a time.

The numbers are invented for tests only.
"""

from __future__ import annotations

from pathlib import Path

import pytest

TINY_PROBLEM = """
title = "tiny test problem (invented numbers)"

[market]
currency = "USD"
unit_price = 500.0
volume = 100000

[constraints]
max_die_area = "800 mm^2"
max_dies = 4

[[process]]
name = "fast"
wafer_diameter = "300 mm"
edge_exclusion = "3 mm"
scribe_width = "100 um"
wafer_cost = 10000.0
defect_density = "0.1 /cm^2"
yield_model = "negative_binomial"
clustering_alpha = 2.0
mask_set_cost = 5.0e6
sort_cost_per_die = 1.0
fault_coverage = 0.99

[[process]]
name = "cheap"
wafer_diameter = "300 mm"
edge_exclusion = "3 mm"
scribe_width = "100 um"
wafer_cost = 4000.0
defect_density = "0.08 /cm^2"
yield_model = "poisson"
mask_set_cost = 1.0e6
sort_cost_per_die = 0.5
area_scale = { logic = 2.0, memory = 1.8, analog = 1.1, io = 1.05 }

[[packaging]]
name = "single"
kind = "single_die"
package_cost = 10.0
final_test_cost = 5.0

[[packaging]]
name = "multi"
kind = "organic_substrate"
max_dies = 4
bond_cost_per_die = 2.0
bond_yield = 0.995
carrier_cost = 15.0
package_cost = 10.0
final_test_cost = 6.0
interface_density = "100 GB/s/mm^2"
port_area = "0.5 mm^2"
design_cost = 1.0e6

[design_cost]
per_die_design = 2.0e6
per_mm2 = 10000.0

[[block]]
name = "compute"
kind = "logic"
area = "150 mm^2"
count = 2
spare_choices = [0, 1]

[[block]]
name = "io"
kind = "io"
area = "40 mm^2"

[[link]]
blocks = ["compute", "io"]
bandwidth = "200 GB/s"

[[design]]
name = "mono"
packaging = "single"
[[design.die]]
process = "fast"
blocks = { compute = 2, io = 1 }

[[design]]
name = "split"
packaging = "multi"
[[design.die]]
name = "cpu"
process = "fast"
copies = 2
blocks = { compute = 1 }
[[design.die]]
name = "hub"
process = "cheap"
blocks = { io = 1 }
"""


@pytest.fixture
def tiny_text() -> str:
    return TINY_PROBLEM


@pytest.fixture
def write_problem(tmp_path: Path):
    """Write problem text (optionally edited by old -> new replacements) to a file."""

    def write(text: str = TINY_PROBLEM, *edits: tuple[str, str], name: str = "p.toml") -> Path:
        for old, new in edits:
            assert old in text, f"fixture edit target not found: {old!r}"
            text = text.replace(old, new, 1)
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        return path

    return write
