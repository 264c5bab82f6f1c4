"""Every answer is checked before anyone sees it.

:func:`verify_solution` re-checks each design the solver is about to report against the
problem's rules and mandates, independently of how the search built it, and a proven
answer against its own bound. A failure is a bug in dieplan: it raises
:class:`~optimizer.invariants.InvariantViolation` instead of printing a wrong answer.
"""

from __future__ import annotations

import math

from optimizer.designs import DesignResult
from optimizer.invariants import InvariantViolation
from optimizer.problem import Problem, Requirements

# relative slack for figures recomputed from the same floating-point inputs
_SLACK = 1e-9


def design_breaks(problem: Problem, design: DesignResult, need: Requirements) -> list[str]:
    """The rules and mandates ``design`` breaks (empty when it keeps all of them)."""
    broken = list(design.violations)
    placed: dict[str, int] = {}
    packaging = problem.packaging[problem.packaging_index(design.packaging)]
    blocks = {b.name: b for b in problem.block}
    for die in design.dies:
        process = problem.process[problem.process_index(die.process)]
        for name, count in die.blocks.items():
            placed[name] = placed.get(name, 0) + count * die.copies
        for name, spares in die.spares.items():
            if spares not in blocks[name].spare_choices:
                broken.append(f"die '{die.name}': {spares} spares of '{name}' not offered")
        for name, repairs in die.repair.items():
            offered = blocks[name].repair
            if offered is None or repairs not in set(offered.repair_choices) | {0}:
                broken.append(f"die '{die.name}': {repairs} repairs of '{name}' not offered")
        short = min(process.reticle_width_mm, process.reticle_height_mm)
        long = max(process.reticle_width_mm, process.reticle_height_mm)
        w, h = sorted((die.width_mm, die.height_mm))
        if w > short * (1 + _SLACK) or h > long * (1 + _SLACK):
            broken.append(f"die '{die.name}' exceeds the reticle field of '{process.name}'")
        if not (math.isfinite(die.cost_per_passed_die) and die.gross_dies_per_wafer > 0):
            broken.append(f"die '{die.name}' has no finite cost per passed die")
        if need.min_die_yield is not None and die.die_yield < need.min_die_yield * (1 - _SLACK):
            broken.append(
                f"die '{die.name}' yield {die.die_yield:.6g} below the mandated "
                f"{need.min_die_yield:g}"
            )
        if need.min_sigma_margin is not None and not (
            die.sigma_margin >= need.min_sigma_margin * (1 - _SLACK)
        ):
            broken.append(
                f"die '{die.name}' margin {die.sigma_margin:g} sigma below the mandated "
                f"{need.min_sigma_margin:g}"
            )
        if need.max_defect_level is not None and die.defect_level > need.max_defect_level * (
            1 + _SLACK
        ):
            broken.append(
                f"die '{die.name}' defect level {die.defect_level:.3g} above the mandated "
                f"{need.max_defect_level:g}"
            )
    for name, block in blocks.items():
        if placed.get(name, 0) != block.count:
            broken.append(f"block '{name}' placed {placed.get(name, 0)} times, not {block.count}")
    if design.n_dies > min(packaging.max_dies, problem.constraints.max_dies):
        broken.append(f"{design.n_dies} dies exceed the die limit of '{packaging.name}'")
    if not math.isfinite(design.profit):
        broken.append("profit is not a finite number")
    return broken


def verify_solution(
    problem: Problem,
    designs: list[DesignResult],
    need: Requirements,
    proven: bool,
    bound_profit: float,
    proven_profit: float,
    tolerance: float,
) -> None:
    """Raise InvariantViolation unless every design keeps every rule and the proof holds.

    ``proven_profit`` is the best profit the proof covers (before any refinement beyond
    it), ``bound_profit`` the proven upper bound, ``tolerance`` the money within which
    designs count as tied.
    """
    for rank, design in enumerate(designs, start=1):
        broken = design_breaks(problem, design, need)
        if broken:
            raise InvariantViolation(
                f"the design ranked {rank} breaks a rule it must keep: {broken[0]}"
            )
    if proven and proven_profit > bound_profit + tolerance + _SLACK * abs(bound_profit):
        raise InvariantViolation(
            f"the proven best profit {proven_profit:.10g} is above its own bound "
            f"{bound_profit:.10g}"
        )
    if designs and not designs[0].profit >= proven_profit - tolerance:
        raise InvariantViolation("the reported winner is less profitable than the proven best")
