"""Say which constraint rules out every design, in the user's terms."""

from __future__ import annotations

import math

import numpy as np

from optimizer.evaluator import Evaluator


def explain_infeasible(evaluator: Evaluator) -> str:
    """The first constraint found that no design can meet, with numbers and a fix."""
    problem = evaluator.problem
    blocks = evaluator.blocks
    limits = problem.constraints
    unit_min = (blocks.area_mm2 * blocks.scale).min(axis=0)
    field = max(p.reticle_width_mm * p.reticle_height_mm for p in problem.process)
    short_side = max(min(p.reticle_width_mm, p.reticle_height_mm) for p in problem.process)
    largest = min(limits.max_die_area_mm2, field)
    index = {name: i for i, name in enumerate(blocks.names)}
    for b, name in enumerate(blocks.names):
        if unit_min[b] > largest + 1e-9:
            return (
                f"block '{name}' needs at least {unit_min[b]:.1f} mm^2 on its most compact "
                f"process, but the largest die allowed is {largest:.1f} mm^2 (reticle field "
                f"and max_die_area); split the block or raise the limit"
            )
    for group in limits.keep_together:
        share = unit_min[[index[n] for n in group]] * blocks.count[[index[n] for n in group]]
        smallest = share.sum() / max(blocks.count[[index[n] for n in group]].min(), 1)
        if smallest > largest + 1e-9:
            return (
                f"keep_together {group} needs at least {smallest:.1f} mm^2 on one die, over the "
                f"largest allowed die of {largest:.1f} mm^2; loosen the group"
            )
    total_min = float(blocks.count @ unit_min)
    max_dies = min(limits.max_dies, max(p.max_dies for p in problem.packaging))
    needed = math.ceil(total_min / largest - 1e-12)
    if needed > max_dies:
        return (
            f"the blocks need at least {total_min:.0f} mm^2 of silicon, so at least {needed} dies "
            f"of at most {largest:.0f} mm^2, but at most {max_dies} dies are allowed "
            "(constraints.max_dies and packaging max_dies); allow more dies"
        )
    if total_min > largest + 1e-9 and all(p.kind == "single_die" for p in problem.packaging):
        return (
            f"the whole design needs at least {total_min:.0f} mm^2, over one die's limit of "
            f"{largest:.0f} mm^2 (reticle {short_side:g} mm short side), and every packaging "
            "option holds one die; add a multi-die packaging option"
        )
    if limits.min_die_area_mm2 > 0:
        biggest_die = min(total_min, largest)
        if limits.min_die_area_mm2 > biggest_die * 4:
            return (
                f"min_die_area {limits.min_die_area_mm2:g} mm^2 is far above what the blocks "
                f"fill ({total_min:.0f} mm^2 in all); lower min_die_area"
            )
    for p in problem.packaging:
        if p.kind == "silicon_interposer":
            need = p.interposer_area_factor * total_min + p.interposer_extra_area_mm2
            if need > p.interposer_max_area_mm2 and len(problem.packaging) == 1:
                return (
                    f"packaging '{p.name}': an interposer for at least {total_min:.0f} mm^2 of "
                    f"dies needs {need:.0f} mm^2, over its limit {p.interposer_max_area_mm2:g} "
                    "mm^2; raise interposer_max_area"
                )
    return (
        "no admissible design: every partition breaks the die-area range, the die limits or a "
        "keep_together / keep_apart rule; widen min_die_area / max_die_area or max_dies "
        f"(smallest possible silicon {np.round(total_min, 1)} mm^2)"
    )


def explain_requirements(evaluator: Evaluator, requirements) -> str | None:
    """Why a mandated target cannot be met, or None if every block can meet it alone.

    The die most likely to meet a die-level target for a block is one instance of that
    block alone; if even the best such die (any process, target, margin or option) misses
    the requirement, no design can meet it.
    """
    from optimizer.solver.candidates import _variants

    problem = evaluator.problem
    blocks = evaluator.blocks
    contents = np.eye(blocks.n_blocks, dtype=np.int64)
    packaging = problem.packaging[0]
    batch, _ = _variants(evaluator, contents, packaging)
    prices = evaluator.price_dies(batch)
    content_of = batch.instances.argmax(axis=1)
    checks = []
    if requirements.min_die_yield is not None:
        checks.append(("die yield", prices.die_yield, requirements.min_die_yield, max, "at least"))
    if requirements.min_sigma_margin is not None:
        sigma = np.where(np.isfinite(prices.sigma_margin), prices.sigma_margin, -np.inf)
        checks.append(
            ("design margin (sigma)", sigma, requirements.min_sigma_margin, max, "at least")
        )
    if requirements.max_defect_level is not None:
        checks.append(
            ("defect level", prices.defect_level, requirements.max_defect_level, min, "at most")
        )
    for label, values, limit, best_of, word in checks:
        for b, name in enumerate(blocks.names):
            mine = values[content_of == b]
            best = best_of(mine) if mine.size else np.nan
            ok = best >= limit * (1 - 1e-12) if best_of is max else best <= limit * (1 + 1e-12)
            if not ok:
                if label.startswith("design margin") and not np.isfinite(best):
                    return (
                        f"required sigma margin {limit:g} cannot be met: no process has a "
                        "[process.margin] curve, so margins are not modelled; add one"
                    )
                return (
                    f"required {label} {word} {limit:g} cannot be met: block '{name}' alone on "
                    f"its best die reaches only {best:.6g}; relax the requirement or add a "
                    "cleaner process, defect-reduction levels or larger margins"
                )
    return None
