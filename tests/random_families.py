"""Random small product families, for tests only (invented data, no real product).

``random_family(seed, products)`` takes a feature-rich random problem
(:mod:`tests.random_problems`) as the shared tables and draws two or three products
from it: instance counts per block (some blocks left out), a price and a volume each,
the salvage bins and requirements of the draw on the first product only.
"""

from __future__ import annotations

import copy

import numpy as np

from tests.random_problems import random_problem


def random_family(seed: int, products: int = 2, **knobs) -> dict:
    base = random_problem(seed, **knobs)
    rng = np.random.default_rng(seed + 911)
    shared = {k: copy.deepcopy(v) for k, v in base.items() if k not in ("market", "design")}
    shared.pop("uncertain", None)
    shared.pop("requirements", None)
    blocks = shared["block"]
    out = []
    for k in range(products):
        counts = {}
        for b in blocks:
            full = int(b.get("count", 1))
            counts[b["name"]] = int(rng.integers(0 if k else 1, full + 1))
        if not any(counts.values()):
            counts[blocks[0]["name"]] = 1
        market = copy.deepcopy(base["market"])
        market["unit_price"] = float(market["unit_price"]) * float(rng.uniform(0.5, 2.0))
        market["volume"] = float(market["volume"]) * float(10 ** rng.uniform(-1.5, 0.5))
        bins = market.pop("salvage_bin", [])
        if k == 0 and all(counts[b["block"]] == _count(blocks, b["block"]) for b in bins):
            market["salvage_bin"] = bins
        product = {"name": f"prod{k}", "market": market, "blocks": counts}
        if k == 0 and "requirements" in base:
            product["requirements"] = copy.deepcopy(base["requirements"])
        out.append(product)
    shared["product"] = out
    shared["title"] = f"random family {seed}"
    return shared


def _count(blocks: list[dict], name: str) -> int:
    return next(int(b.get("count", 1)) for b in blocks if b["name"] == name)
