"""Small problems for the exploration tests (invented numbers, for tests only)."""

from __future__ import annotations

import math
import tomllib

# Two uncertain inputs of the tiny test problem (tests/conftest.py).
UNCERTAIN = """
[[uncertain]]
path = "process.cheap.defect_density"
distribution = "lognormal"
median = "0.08 /cm^2"
sigma_log = 0.3

[[uncertain]]
path = "market.volume"
distribution = "triangular"
low = 6e4
mode = 1e5
high = 2e5
"""

# Two processes, one block, one packaging: exactly two candidate designs. "old" has the
# lower one-time cost and the higher unit cost, so the winner changes with volume.
BREAK_EVEN = """
title = "two-process break-even (invented numbers)"

[market]
unit_price = 300.0
volume = 1e6

[[process]]
name = "old"
wafer_diameter = "300 mm"
wafer_cost = 5000.0
defect_density = "0.1 /cm^2"
yield_model = "poisson"
mask_set_cost = 1.0e6
area_scale = { logic = 2.5 }

[[process]]
name = "new"
wafer_diameter = "300 mm"
wafer_cost = 9000.0
defect_density = "0.1 /cm^2"
yield_model = "poisson"
mask_set_cost = 2.0e7

[[packaging]]
name = "plain"
kind = "single_die"
package_cost = 8.0

[design_cost]
per_die_design = 3.0e6

[[block]]
name = "core"
area = "100 mm^2"
"""

# One die on one process with Poisson yield, full fault coverage, no sort cost and the
# area-ratio die count: every figure has a closed form (see one_die_profit).
ONE_DIE = """
title = "one die, closed form (invented numbers)"

[market]
unit_price = 120.0
volume = 2e6

[[process]]
name = "only"
wafer_diameter = "300 mm"
edge_exclusion = "3 mm"
scribe_width = "100 um"
wafer_cost = 6000.0
defect_density = "0.2 /cm^2"
yield_model = "poisson"
mask_set_cost = 4.0e6
die_count = "area_ratio"

[[packaging]]
name = "plain"
kind = "single_die"
package_cost = 8.0

[design_cost]
per_die_design = 1.0e6

[[block]]
name = "core"
area = "100 mm^2"
"""

ONE_DIE_NRE = 4.0e6 + 1.0e6


def one_die_profit(defect_density: float, unit_price: float = 120.0, volume: float = 2e6):
    """Hand-derived profit of ONE_DIE.

    Die 10 x 10 mm plus 0.1 mm scribe; usable radius 147 mm; area-ratio count
    N = pi 147^2 / 10.1^2. Poisson yield Y = exp(-A D) with A = 1 cm^2. With full fault
    coverage every passed die is good (Williams-Brown: pass fraction Y, defect level 0),
    so cost per good unit = (wafer cost / N) / Y + package cost, and
    profit = V (price - cost) - NRE.
    """
    gross = math.pi * 147.0**2 / 10.1**2
    cost = 6000.0 / gross * math.exp(1.0 * defect_density) + 8.0
    return volume * (unit_price - cost) - ONE_DIE_NRE


def one_die_unit_cost(defect_density: float) -> float:
    """Hand-derived cost per good unit of ONE_DIE before NRE (see one_die_profit)."""
    gross = math.pi * 147.0**2 / 10.1**2
    return 6000.0 / gross * math.exp(1.0 * defect_density) + 8.0


def one_die_density_for_profit(profit: float, unit_price: float = 120.0, volume: float = 2e6):
    """Inverse of :func:`one_die_profit` in the defect density."""
    gross = math.pi * 147.0**2 / 10.1**2
    raw = unit_price - 8.0 - (profit + ONE_DIE_NRE) / volume
    return math.log(raw / (6000.0 / gross)) / 1.0


def data(text: str) -> dict:
    return tomllib.loads(text)
