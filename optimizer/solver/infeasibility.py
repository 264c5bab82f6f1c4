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
