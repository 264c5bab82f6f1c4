"""Every answer is checked before anyone sees it.

:func:`verify_solution` re-checks each design the solver is about to report against the
problem's rules and mandates, independently of how the search built it, and a proven
answer against its own bound. A failure is a bug in dieplan: it raises
:class:`~optimizer.invariants.InvariantViolation` instead of printing a wrong answer.
"""

from __future__ import annotations

import math

from optimizer.designs import DesignResult, design_violations
from optimizer.invariants import InvariantViolation
from optimizer.problem import Problem, Requirements

# relative slack for figures recomputed from the same floating-point inputs
_SLACK = 1e-9


def design_breaks(problem: Problem, design: DesignResult, need: Requirements) -> list[str]:
    """The rules and mandates ``design`` breaks (empty when it keeps all of them).

    The rules an explicit design is marked against (:func:`design_violations`), plus what
    only a solver could get wrong: every block instance placed exactly once, spare and
    repair counts the file offers, finite costs and profit.
    """
    broken = design_violations(problem, design, need)
    placed: dict[str, int] = {}
    blocks = {b.name: b for b in problem.block}
    for die in design.dies:
        for name, count in die.blocks.items():
            placed[name] = placed.get(name, 0) + count * die.copies
        for name, spares in die.spares.items():
            if spares not in blocks[name].spare_choices:
                broken.append(f"die '{die.name}': {spares} spares of '{name}' not offered")
        for name, repairs in die.repair.items():
            offered = blocks[name].repair
            if offered is None or repairs not in set(offered.repair_choices) | {0}:
                broken.append(f"die '{die.name}': {repairs} repairs of '{name}' not offered")
        if not (math.isfinite(die.cost_per_passed_die) and die.gross_dies_per_wafer > 0):
            broken.append(f"die '{die.name}' has no finite cost per passed die")
    for name, block in blocks.items():
        if placed.get(name, 0) != block.count:
            broken.append(f"block '{name}' placed {placed.get(name, 0)} times, not {block.count}")
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
