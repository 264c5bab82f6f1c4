"""Random small problems that combine every feature of the schema at once.

Invented data for tests and fuzzing only: no number here describes a real process,
package or product. Each draw is small enough for the exhaustive reference to price
every design quickly (2 to 4 blocks of 1 to 4 instances, 1 to 3 processes and
packagings, a bounded count of complete designs), yet mixes salvage bins, spares and
array repair on one block, defect-reduction curves of both forms, margins,
critical-area options (one of them free of area overhead), low fault coverage, twin
processes, near-tied options, links, keep rules, die-area limits and mandates.

``random_problem(seed, **knobs)`` returns the decoded-TOML dict that
``optimizer.problem.parse_problem`` accepts; ``features_of(data)`` names what a dict
contains, read back from the dict itself (so it stays right after hand edits).
"""

from __future__ import annotations

import copy
import math

import numpy as np

from optimizer.problem import YIELD_MODEL_NAMES
from optimizer.solver.partitions import multiset_partitions

PACKAGING_KINDS = ("single_die", "organic_substrate", "silicon_interposer", "stacked")
BLOCK_KINDS = ("logic", "memory", "analog", "io")

# Probability of each optional feature; a knob of 1.0 forces it, 0.0 rules it out.
DEFAULT_KNOBS: dict[str, float] = {
    "salvage": 0.5,  # salvage bins on a multi-instance block
    "salvage_redundancy": 0.6,  # given salvage: spares and/or repair on the bin's block
    "spares": 0.5,  # spare_choices on some other block
    "repair": 0.5,  # array repair on some memory block
    "log_ratio": 0.35,  # per process: continuous defect-reduction curve
    "table": 0.3,  # per process: tabled defect-reduction targets
    "margin": 0.35,  # per process: sigma margin curve
    "critical_area": 0.5,  # [critical_area_reduction]
    "zero_overhead": 0.5,  # given critical_area: one option costs no area at all
    "low_coverage": 0.4,  # per process: fault coverage in [0.5, 0.99]
    "twin_process": 0.3,  # a copy of a process differing in one number only
    "near_tie": 0.25,  # an (almost) identical duplicate process or packaging
    "links": 0.6,
    "keep_together": 0.15,
    "keep_apart": 0.15,
    "die_area_limits": 0.3,
    "max_dies": 0.3,  # a global max_dies below the packagings' limits
    "requirements": 0.15,
    "die_count_method": 0.1,  # per process: "formula" or "area_ratio" gross-die counts
}

# Upper bound of complete designs the exhaustive reference may face (it prices a few
# hundred thousand designs per second, so this keeps one draw well under a second).
DEFAULT_BUDGET = 60_000


def random_problem(
    seed: int,
    *,
    blocks: int | None = None,
    budget: int = DEFAULT_BUDGET,
    **knobs: float,
) -> dict:
    """A random feature-rich small problem (invented numbers) for ``seed``.

    ``blocks`` fixes the block count (2 to 4 by default); ``budget`` caps the exhaustive
    design count, trimmed by lowering die limits and option lists; any name of
    :data:`DEFAULT_KNOBS` sets that feature's probability.
    """
    unknown = set(knobs) - set(DEFAULT_KNOBS)
    if unknown:
        raise TypeError(f"unknown knobs {sorted(unknown)}; use {sorted(DEFAULT_KNOBS)}")
    p = {**DEFAULT_KNOBS, **knobs}
    rng = np.random.default_rng(seed)

    def flag(name: str) -> bool:
        return bool(rng.random() < p[name])

    def log_uniform(lo: float, hi: float) -> float:
        return float(10 ** rng.uniform(math.log10(lo), math.log10(hi)))

    volume = float(round(log_uniform(1e3, 1e8)))
    nre_scale = log_uniform(1e-4, 10.0)  # one-time costs from trifling to ruinous

    # ---- blocks
    n_blocks = int(blocks) if blocks is not None else int(rng.integers(2, 5))
    counts = [int(rng.choice([1, 1, 2, 3, 4])) for _ in range(n_blocks)]
    while sum(counts) > 8:
        counts[int(np.argmax(counts))] -= 1
    total_area = float(rng.uniform(30, 500))
    shares = rng.dirichlet(np.ones(n_blocks))
    block_list = []
    for b in range(n_blocks):
        block_list.append(
            {
                "name": f"b{b}",
                "kind": str(rng.choice(BLOCK_KINDS)),
                "area": f"{max(total_area * shares[b] / counts[b], 1.0):.4f} mm^2",
                "count": counts[b],
                "defect_sensitivity": round(float(rng.uniform(0.3, 1.0)), 4),
            }
        )

    def add_spares(block: dict) -> None:
        block["spare_choices"] = [0, 1] if rng.random() < 0.7 else [0, 1, 2]

    def add_repair(block: dict) -> None:
        block["kind"] = "memory"
        choices = sorted({0, *(int(x) for x in rng.choice([1, 2, 4, 8], size=2))})
        if rng.random() < 0.3:
            choices = [c for c in choices if c > 0]  # 0 unlisted: offered all the same
        block["repair"] = {
            "repairable_fraction": round(float(rng.uniform(0.3, 0.95)), 4),
            "repair_choices": choices,
            "area_per_repair": f"{rng.uniform(0.001, 0.05):.4f} mm^2",
            "test_cost_per_die": round(float(rng.uniform(0, 0.5)), 4),
        }

    salvage = flag("salvage")
    salvage_block = None
    if salvage:
        salvage_block = block_list[int(rng.integers(n_blocks))]
        salvage_block["count"] = max(salvage_block["count"], int(rng.integers(2, 5)))
        if flag("salvage_redundancy"):
            mix = int(rng.integers(3))  # spares, repair, or both on the bin's block
            if mix in (0, 2):
                add_spares(salvage_block)
            if mix in (1, 2):
                add_repair(salvage_block)
    others = [blk for blk in block_list if blk is not salvage_block]
    if flag("spares") and others:
        add_spares(others[int(rng.integers(len(others)))])
    if flag("repair"):
        memory = [blk for blk in others if blk["kind"] == "memory" and "repair" not in blk]
        pool = memory or [blk for blk in others if "repair" not in blk]
        if pool:
            add_repair(pool[int(rng.integers(len(pool)))])

    # ---- processes
    n_proc = int(rng.integers(1, 4))
    processes = [_random_process(rng, f"p{k}", k, p, flag, nre_scale) for k in range(n_proc)]
    if flag("twin_process"):
        src = processes[int(rng.integers(len(processes)))]
        twin = copy.deepcopy(src)
        twin["name"] = f"{src['name']}_twin"
        if rng.random() < 0.5:
            # differs only in defect density (curves clipped to stay valid)
            base = _density(src)
            new = base * float(rng.uniform(0.5, 1.5))
            twin["defect_density"] = f"{new:.6g} /cm^2"
            _fit_curve(twin, new)
        else:
            twin["wafer_cost"] = float(src["wafer_cost"]) * float(rng.uniform(0.7, 1.3))
        if len(processes) == 3:
            processes[2] = twin
        else:
            processes.append(twin)

    # ---- packagings
    n_pack = int(rng.integers(1, 4))
    kinds = [str(k) for k in rng.choice(PACKAGING_KINDS, size=n_pack, replace=False)]
    packagings = [
        _random_packaging(rng, f"g{k}", kind, processes, nre_scale) for k, kind in enumerate(kinds)
    ]

    if flag("near_tie"):
        # an exact duplicate, or one whose cost differs by 1e-7 relative: ties that the
        # integer program's tolerances must not break the wrong way
        exact = rng.random() < 0.4
        if rng.random() < 0.5 or len(packagings) == 3:
            src = processes[int(rng.integers(len(processes)))]
            dup = copy.deepcopy(src)
            dup["name"] = f"{src['name']}_tie"
            if not exact:
                dup["wafer_cost"] = float(src["wafer_cost"]) * (
                    1 + float(rng.choice([-1, 1])) * 1e-7
                )
            if len(processes) == 3:
                # replace one of the others, keeping the source of the tie
                spot = [i for i, proc in enumerate(processes) if proc is not src][-1]
                processes[spot] = dup
            else:
                processes.append(dup)
        else:
            src = packagings[int(rng.integers(len(packagings)))]
            dup = copy.deepcopy(src)
            dup["name"] = f"{src['name']}_tie"
            if not exact:
                dup["package_cost"] = float(src["package_cost"]) * (1 + 1e-7) + 1e-7
            packagings.append(dup)
    names = {proc["name"] for proc in processes}
    for pack in packagings:
        if pack.get("interposer_process") not in (None, *names):
            pack["interposer_process"] = processes[0]["name"]

    # ---- constraints and design-wide options
    constraints: dict = {}
    if flag("die_area_limits"):
        # room for the largest instance on most processes, so the limits bind but
        # seldom leave nothing feasible
        largest = max(float(blk["area"].split()[0]) for blk in block_list)
        constraints["min_die_area"] = f"{rng.uniform(2, 30):.3f} mm^2"
        constraints["max_die_area"] = f"{rng.uniform(min(2 * largest + 50, 700), 858):.3f} mm^2"
    if flag("max_dies"):
        constraints["max_dies"] = int(rng.choice([1, 2, 2, 3]))
    names_b = [blk["name"] for blk in block_list]
    pair_together = None
    if flag("keep_together"):
        pair_together = sorted(str(x) for x in rng.choice(names_b, size=2, replace=False))
        constraints["keep_together"] = [pair_together]
    if flag("keep_apart"):
        pair = sorted(str(x) for x in rng.choice(names_b, size=2, replace=False))
        if pair != pair_together:
            constraints["keep_apart"] = [pair]

    links = []
    if flag("links"):
        for _ in range(int(rng.integers(1, 4))):
            a, b = rng.choice(n_blocks, size=2, replace=False)
            links.append(
                {"blocks": [f"b{a}", f"b{b}"], "bandwidth": f"{log_uniform(5, 2000):.2f} GB/s"}
            )

    critical = None
    if flag("critical_area"):
        n_opt = int(rng.integers(1, 3))
        factors = [round(float(rng.uniform(0.5, 0.97)), 4) for _ in range(n_opt)]
        overheads = [round(float(rng.uniform(0.005, 0.08)), 4) for _ in range(n_opt)]
        if flag("zero_overhead"):
            overheads[int(rng.integers(n_opt))] = 0.0
        critical = {"sensitivity_factor": factors, "area_overhead": overheads}

    requirements: dict = {}
    if flag("requirements"):
        which = int(rng.integers(3))
        sigmas = [s for proc in processes for s in proc.get("margin", {}).get("sigma", [])]
        if which == 2 and sigmas:
            requirements["min_sigma_margin"] = float(rng.choice(sigmas))
        elif which == 1:
            requirements["max_defect_level"] = float(f"{log_uniform(1e-3, 0.1):.3g}")
        else:
            requirements["min_die_yield"] = round(float(rng.uniform(0.15, 0.7)), 4)

    design_cost = {
        "per_die_design": round(nre_scale * float(rng.uniform(0, 5e6)), 6),
        "per_mm2": round(nre_scale * float(rng.uniform(0, 3e4)), 6),
    }

    # ---- market: price set from a rough cost estimate so most optima make money
    unit_cost = _rough_unit_cost(block_list, processes, packagings, design_cost, volume)
    unit_price = round(unit_cost * float(rng.uniform(1.3, 4.0)), 4)
    market: dict = {"currency": "USD", "unit_price": unit_price, "volume": volume}
    if salvage:
        count = salvage_block["count"]
        n_bins = min(int(rng.integers(1, 3)), count)
        goods = sorted(int(x) for x in rng.choice(count, size=n_bins, replace=False))
        market["salvage_bin"] = [
            {
                "name": f"bin{j}",
                "block": salvage_block["name"],
                "min_good": g,
                "unit_price": round(unit_price * float(rng.uniform(0.2, 0.9)), 4),
                "demand": float(round(volume * log_uniform(0.005, 1.0))),
            }
            for j, g in enumerate(goods)
        ]
        # a bin needs at least one good unit; a drawn 0 becomes 1 (after the draws, so
        # the stream of random numbers, and every other seed's draw, stays as it was)
        bins = market["salvage_bin"]
        if bins[0]["min_good"] == 0:
            bins[0]["min_good"] = 1
            if len(bins) > 1 and bins[1]["min_good"] == 1:
                del bins[0]

    data = {
        "title": f"random feature mix, seed {seed} (invented numbers)",
        "note": "Invented data for solver tests; no real process, package or product.",
        "market": market,
        "constraints": constraints,
        "process": processes,
        "packaging": packagings,
        "design_cost": design_cost,
        "block": block_list,
        "link": links,
    }
    if critical is not None:
        data["critical_area_reduction"] = critical
    if requirements:
        data["requirements"] = requirements
    _trim_to_budget(data, rng, budget)
    return data


# ------------------------------------------------------------------ parts of a draw


def _random_process(rng, name: str, k: int, p: dict, flag, nre_scale: float) -> dict:
    model = str(rng.choice(YIELD_MODEL_NAMES))
    density = float(rng.uniform(0.05, 0.8))
    proc: dict = {
        "name": name,
        "wafer_diameter": "300 mm" if rng.random() < 0.85 else "200 mm",
        "edge_exclusion": "3 mm",
        "scribe_width": f"{rng.uniform(50, 120):.1f} um",
        "wafer_cost": round(float(rng.uniform(2000, 17000)), 4),
        "yield_model": model,
        "systematic_yield": round(float(rng.uniform(0.9, 1.0)), 4),
        "mask_set_cost": round(nre_scale * float(rng.uniform(0.5e6, 2e7)), 6),
        "sort_cost_per_die": round(float(rng.uniform(0, 3)), 4),
        "fault_coverage": 1.0,
    }
    if model == "negative_binomial":
        proc["clustering_alpha"] = round(float(rng.uniform(0.5, 4)), 4)
    if model == "bose_einstein":
        layers = int(rng.integers(2, 12))
        proc["critical_layers"] = layers
        density /= layers  # the density is per critical layer
    proc["defect_density"] = f"{density:.6g} /cm^2"
    if flag("low_coverage"):
        proc["fault_coverage"] = round(float(rng.uniform(0.5, 0.99)), 4)
    elif rng.random() < 0.5:
        proc["fault_coverage"] = round(float(rng.uniform(0.99, 0.9999)), 6)
    if k > 0:
        proc["area_scale"] = {kind: round(float(rng.uniform(1.0, 3.0)), 4) for kind in BLOCK_KINDS}
    if flag("die_count_method"):
        proc["die_count"] = str(rng.choice(["formula", "area_ratio"]))
    if rng.random() < 0.1:
        proc["die_aspect_ratio"] = round(float(rng.uniform(1.0, 2.0)), 3)
    if flag("log_ratio"):
        proc["defect_reduction"] = {
            "form": "log_ratio",
            "floor": f"{density * float(rng.uniform(0.25, 0.8)):.6g} /cm^2",
            "one_time_per_log": round(nre_scale * float(rng.uniform(1e5, 2e7)), 6),
            "per_wafer_per_log": round(float(rng.uniform(0, 600)), 4),
            "levels": int(rng.choice([2, 3])),
        }
    elif flag("table"):
        n_points = int(rng.integers(1, 3))
        fractions = sorted((float(x) for x in rng.uniform(0.3, 0.95, size=n_points)), reverse=True)
        proc["defect_reduction"] = {
            "form": "table",
            "points": [
                [
                    f"{density * f:.6g} /cm^2",
                    round(nre_scale * float(rng.uniform(1e5, 1e7)) * (i + 1), 6),
                    round(float(rng.uniform(0, 400)) * (i + 1), 4),
                ]
                for i, f in enumerate(fractions)
            ],
        }
    if flag("margin"):
        n_sigma = int(rng.integers(1, 4))
        sigma = sorted(float(x) for x in rng.choice([1.5, 2.0, 2.5, 3.0, 4.0, 6.0], n_sigma, False))
        overhead = sorted(round(float(x), 4) for x in rng.uniform(0, 0.08, size=n_sigma))
        if rng.random() < 0.5:
            overhead[0] = 0.0
        proc["margin"] = {"two_sided": bool(rng.random() < 0.5), "sigma": sigma}
        proc["margin"]["area_overhead"] = overhead
    return proc


def _density(proc: dict) -> float:
    return float(proc["defect_density"].split()[0])


def _fit_curve(proc: dict, base: float) -> None:
    """Keep a copied defect-reduction curve valid under a new base density."""
    curve = proc.get("defect_reduction")
    if curve is None:
        return
    if curve["form"] == "log_ratio":
        floor = float(curve["floor"].split()[0])
        curve["floor"] = f"{min(floor, base):.6g} /cm^2"
    else:
        kept = [pt for pt in curve["points"] if float(pt[0].split()[0]) <= base]
        if kept:
            curve["points"] = kept
        else:
            del proc["defect_reduction"]


def _random_packaging(rng, name: str, kind: str, processes: list[dict], nre_scale: float) -> dict:
    pack: dict = {
        "name": name,
        "kind": kind,
        "max_dies": 1 if kind == "single_die" else int(rng.integers(2, 5)),
        "package_cost": round(float(rng.uniform(1, 40)), 4),
        "package_yield": round(float(rng.uniform(0.97, 1.0)), 5),
        "final_test_cost": round(float(rng.uniform(0.5, 15)), 4),
        "design_cost": round(nre_scale * float(rng.uniform(0, 3e6)), 6),
    }
    if kind != "single_die":
        pack.update(
            {
                "bond_cost_per_die": round(float(rng.uniform(0.2, 6)), 4),
                "bond_yield": round(float(rng.uniform(0.98, 1.0)), 5),
                "carrier_cost": round(float(rng.uniform(1, 40)), 4),
                "carrier_yield": round(float(rng.uniform(0.97, 1.0)), 5),
                "interface_density": f"{rng.uniform(30, 900):.1f} GB/s/mm^2",
                "port_area": f"{rng.uniform(0, 1):.3f} mm^2",
            }
        )
    if kind == "silicon_interposer":
        pack.update(
            {
                "interposer_process": processes[int(rng.integers(len(processes)))]["name"],
                "interposer_area_factor": round(float(rng.uniform(1.05, 1.4)), 3),
                "interposer_extra_area": f"{rng.uniform(0, 80):.2f} mm^2",
                "interposer_max_area": f"{rng.uniform(400, 2500):.0f} mm^2",
                "interposer_defect_sensitivity": round(float(rng.uniform(0.02, 0.3)), 4),
            }
        )
    return pack


def _rough_unit_cost(blocks, processes, packagings, design_cost, volume: float) -> float:
    """A crude cost per good unit, only to put the unit price in a sensible range."""
    area = sum(float(b["area"].split()[0]) * b["count"] for b in blocks)
    per_proc = []
    for proc in processes:
        diameter = float(proc["wafer_diameter"].split()[0]) - 6.0
        per_mm2 = proc["wafer_cost"] / (math.pi * diameter**2 / 4)
        density = _density(proc) * proc.get("critical_layers", 1)
        dies_yield = max(math.exp(-area / 100 * density * 0.7), 0.02)
        per_proc.append(area * per_mm2 / dies_yield + proc["mask_set_cost"] / volume)
    pack = min(
        p["package_cost"] + p["final_test_cost"] + p.get("carrier_cost", 0.0) for p in packagings
    )
    nre = design_cost["per_die_design"] + design_cost["per_mm2"] * area
    return min(per_proc) + pack + nre / volume + 1.0


# ------------------------------------------------------------------ size control


def exhaustive_size(data: dict) -> int:
    """Upper bound of the complete designs the exhaustive reference prices for ``data``.

    Mirrors its enumeration (multiset partitions of the block instances into at most the
    die limit, every variant per part, identical parts counted once) but ignores the
    area limits, so it can only overestimate.
    """
    blocks = data["block"]
    counts = tuple(int(b["count"]) for b in blocks)
    constraints = data.get("constraints", {})
    names = [b["name"] for b in blocks]
    index = {n: i for i, n in enumerate(names)}
    contents = [()]
    for c in counts:
        contents = [(*row, k) for row in contents for k in range(c + 1)]
    contents = [row for row in contents if any(row)]
    for group in constraints.get("keep_together", []):
        cols = [index[n] for n in group]
        contents = [r for r in contents if len({round(r[i] / counts[i], 9) for i in cols}) == 1]
    for group in constraints.get("keep_apart", []):
        cols = [index[n] for n in group]
        contents = [r for r in contents if sum(r[i] > 0 for i in cols) <= 1]

    per_process = 0
    for proc in data["process"]:
        curve = proc.get("defect_reduction")
        if curve is None:
            levels = 1
        elif curve["form"] == "log_ratio":
            levels = int(curve.get("levels", 4))
        else:
            levels = 1 + len(curve["points"])
        margins = len(proc["margin"]["sigma"]) if "margin" in proc else 1
        per_process += levels * margins
    critical = data.get("critical_area_reduction")
    n_critical = 1
    if critical is not None:
        pairs = list(zip(critical["sensitivity_factor"], critical["area_overhead"], strict=True))
        n_critical = len(pairs) + (0 if (1.0, 0.0) in pairs else 1)
    local = []
    for b in blocks:
        spare = len(set(b.get("spare_choices", [0])) | {0})
        repair = len(set(b["repair"]["repair_choices"]) | {0}) if "repair" in b else 1
        local.append(spare * repair)

    def variants(row: tuple[int, ...]) -> int:
        n = per_process * n_critical
        for b, k in enumerate(row):
            if k:
                n *= local[b]
        return n

    total = 0
    global_max = int(constraints.get("max_dies", 16))
    for pack in data["packaging"]:
        n_max = min(int(pack.get("max_dies", 1)), global_max)
        parts = [counts] if pack["kind"] == "single_die" else contents
        if pack["kind"] == "single_die" and counts not in contents:
            continue
        for partition in multiset_partitions(counts, parts, n_max):
            groups: dict[tuple[int, ...], int] = {}
            for part in partition:
                groups[part] = groups.get(part, 0) + 1
            designs = 1
            for part, mult in groups.items():
                designs *= math.comb(variants(part) + mult - 1, mult)
            total += designs
    return total


def _trim_to_budget(data: dict, rng, budget: int) -> None:
    """Shrink die limits and option lists until the exhaustive size fits the budget.

    The trims keep every feature present (a curve keeps two levels, a margin one entry),
    so a draw stays feature-rich while it gets cheaper.
    """
    for _ in range(200):
        if exhaustive_size(data) <= budget:
            return
        moves = []
        multi = [pk for pk in data["packaging"] if pk["max_dies"] > 2]
        if multi:
            moves.append(("dies", max(multi, key=lambda pk: pk["max_dies"])))
        for proc in data["process"]:
            if "margin" in proc and len(proc["margin"]["sigma"]) > 1:
                moves.append(("margin", proc))
            curve = proc.get("defect_reduction")
            if curve is not None and curve["form"] == "log_ratio" and curve["levels"] > 2:
                moves.append(("levels", proc))
            if curve is not None and curve["form"] == "table" and len(curve["points"]) > 1:
                moves.append(("points", proc))
        for blk in data["block"]:
            if len(blk.get("spare_choices", [0])) > 2:
                moves.append(("spares", blk))
            if "repair" in blk and len(set(blk["repair"]["repair_choices"]) | {0}) > 2:
                moves.append(("repair", blk))
        crit = data.get("critical_area_reduction")
        if crit is not None and len(crit["sensitivity_factor"]) > 1:
            moves.append(("critical", crit))
        bins = {b["block"]: b["min_good"] for b in data["market"].get("salvage_bin", [])}
        for blk in data["block"]:
            floor = max((g for name, g in bins.items() if name == blk["name"]), default=0)
            if blk["count"] > max(1, floor + 1):
                moves.append(("count", blk))
        if not moves:
            # nothing left to trim without dropping a feature: fewer dies per package
            for pk in data["packaging"]:
                if pk["kind"] != "single_die" and pk["max_dies"] > 1:
                    pk["max_dies"] -= 1
                    break
            else:
                return
            continue
        kind, item = moves[int(rng.integers(len(moves)))]
        if kind == "dies":
            item["max_dies"] -= 1
        elif kind == "margin":
            item["margin"]["sigma"] = item["margin"]["sigma"][:-1]
            item["margin"]["area_overhead"] = item["margin"]["area_overhead"][:-1]
        elif kind == "levels":
            item["defect_reduction"]["levels"] -= 1
        elif kind == "points":
            item["defect_reduction"]["points"] = item["defect_reduction"]["points"][:1]
        elif kind == "spares":
            item["spare_choices"] = item["spare_choices"][:2]
        elif kind == "repair":
            item["repair"]["repair_choices"] = sorted(set(item["repair"]["repair_choices"]))[:2]
        elif kind == "critical":
            # keep the option without area overhead, if any: it is a feature to test
            keep = item["area_overhead"].index(min(item["area_overhead"]))
            item["sensitivity_factor"] = [item["sensitivity_factor"][keep]]
            item["area_overhead"] = [item["area_overhead"][keep]]
        elif kind == "count":
            item["count"] -= 1
            _drop_dangling_salvage(data)


def _drop_dangling_salvage(data: dict) -> None:
    count = {b["name"]: b["count"] for b in data["block"]}
    bins = data["market"].get("salvage_bin")
    if bins:
        data["market"]["salvage_bin"] = [b for b in bins if b["min_good"] < count[b["block"]]]


# ------------------------------------------------------------------ features


def features_of(data: dict) -> list[str]:
    """Names of the features present in a problem dict (for coverage and reports)."""
    out: set[str] = set()
    blocks = {b["name"]: b for b in data["block"]}
    bins = data["market"].get("salvage_bin", [])
    if bins:
        out.add("salvage")
        for sbin in bins:
            blk = blocks[sbin["block"]]
            if len(set(blk.get("spare_choices", [0])) | {0}) > 1:
                out.add("salvage+spares")
            if "repair" in blk:
                out.add("salvage+repair")
        if len(bins) > 1:
            out.add("salvage_nested_bins")
    for blk in blocks.values():
        if len(set(blk.get("spare_choices", [0])) | {0}) > 1:
            out.add("spares")
        if "repair" in blk:
            out.add("repair")
            if 0 not in blk["repair"]["repair_choices"]:
                out.add("repair_listed_without_0")
        if len(set(blk.get("spare_choices", [0])) | {0}) > 1 and "repair" in blk:
            out.add("spares+repair_same_block")
    procs = data["process"]
    for proc in procs:
        curve = proc.get("defect_reduction")
        if curve is not None:
            out.add(f"defect_{curve['form']}")
        if "margin" in proc:
            out.add(
                "margin_two_sided" if proc["margin"].get("two_sided", True) else "margin_one_sided"
            )
        if proc.get("fault_coverage", 1.0) < 0.99:
            out.add("low_coverage")
        out.add(f"model_{proc.get('yield_model', 'negative_binomial')}")
        if proc.get("die_count", "exact") != "exact":
            out.add("die_count_" + proc["die_count"])
    for i, a in enumerate(procs):
        for b in procs[i + 1 :]:
            diff = {k for k in set(a) | set(b) if k != "name" and a.get(k) != b.get(k)}
            if not diff:
                out.add("tie_process_exact")
            elif diff == {"wafer_cost"}:
                rel = abs(a["wafer_cost"] - b["wafer_cost"]) / a["wafer_cost"]
                out.add("tie_process_1e-7" if rel < 1e-6 else "twin_wafer_cost")
            elif "defect_density" in diff and diff <= {"defect_density", "defect_reduction"}:
                out.add("twin_defect_density")
    packs = data["packaging"]
    for pack in packs:
        out.add(f"pack_{pack['kind']}")
    for i, a in enumerate(packs):
        for b in packs[i + 1 :]:
            diff = {k for k in set(a) | set(b) if k != "name" and a.get(k) != b.get(k)}
            if not diff:
                out.add("tie_packaging_exact")
            elif diff == {"package_cost"}:
                out.add("tie_packaging_1e-7")
    crit = data.get("critical_area_reduction")
    if crit is not None:
        out.add("critical_area")
        if 0.0 in crit["area_overhead"]:
            out.add("critical_zero_overhead")
    cons = data.get("constraints", {})
    for key in ("keep_together", "keep_apart"):
        if cons.get(key):
            out.add(key)
    if "min_die_area" in cons or "max_die_area" in cons:
        out.add("die_area_limits")
    if "max_dies" in cons:
        out.add("max_dies")
    if data.get("requirements"):
        out.add("requirements")
    if data.get("link"):
        out.add("links")
    volume = data["market"]["volume"]
    out.add("volume_low" if volume < 1e5 else "volume_high" if volume > 1e7 else "volume_mid")
    return sorted(out)
