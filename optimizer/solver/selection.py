"""A selection: how many copies of which candidate dies, on one packaging option.

Selections are what the solver and the exhaustive reference produce; both price them
through the same evaluator call so that their figures are the evaluator's.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from optimizer.designs import DieSpec
from optimizer.evaluator import Evaluator, ProductPrices
from optimizer.solver.candidates import CandidateSet


@dataclass(frozen=True, order=True)
class Selection:
    """Copies of candidate dies (indices into one packaging's CandidateSet)."""

    packaging_index: int
    dies: tuple[tuple[int, int], ...]  # (candidate index, copies), sorted by index

    @staticmethod
    def of(packaging_index: int, pairs) -> Selection:
        merged: dict[int, int] = {}
        for c, k in pairs:
            merged[int(c)] = merged.get(int(c), 0) + int(k)
        return Selection(packaging_index, tuple(sorted(merged.items())))

    @property
    def n_dies(self) -> int:
        return sum(k for _, k in self.dies)


def selection_mix(selection: Selection, candidates: CandidateSet, n_processes: int = 0) -> tuple:
    """Dies per process (indexed like the problem's processes) of a selection."""
    size = max(n_processes, int(candidates.process.max(initial=-1)) + 1)
    counts = [0] * size
    for c, k in selection.dies:
        counts[int(candidates.process[c])] += k
    return tuple(counts)


def price_selections(
    evaluator: Evaluator, candidates: CandidateSet, selections: list[Selection]
) -> ProductPrices:
    """Exact product prices of many selections on the same packaging option."""
    width = max(len(s.dies) for s in selections)
    slot_die = np.zeros((len(selections), width), dtype=np.int64)
    slot_copies = np.zeros((len(selections), width), dtype=np.int64)
    for i, s in enumerate(selections):
        for j, (c, k) in enumerate(s.dies):
            slot_die[i, j] = c
            slot_copies[i, j] = k
    return evaluator.assemble(candidates.packaging_index, candidates.prices, slot_die, slot_copies)


def selection_specs(
    evaluator: Evaluator, candidates: CandidateSet, selection: Selection
) -> list[DieSpec]:
    """Die specs (by block name) of a selection, named after their main contents."""
    problem = evaluator.problem
    names = evaluator.blocks.names
    specs = []
    for j, (c, k) in enumerate(selection.dies):
        inst = candidates.instances[c]
        blocks = {names[b]: int(inst[b]) for b in np.flatnonzero(inst)}
        spares = {
            names[b]: int(candidates.spares[c, b]) for b in np.flatnonzero(candidates.spares[c])
        }
        repair = {
            names[b]: int(candidates.repairs[c, b]) for b in np.flatnonzero(candidates.repairs[c])
        }
        specs.append(
            DieSpec(
                process=problem.process[int(candidates.process[c])].name,
                blocks=blocks,
                spares=spares,
                repair=repair,
                copies=int(k),
                name=f"die{j + 1}",
                defect_density_per_cm2=float(candidates.prices.defect_density_per_cm2[c]),
                sigma_margin=(
                    float(candidates.prices.sigma_margin[c])
                    if np.isfinite(candidates.prices.sigma_margin[c])
                    else None
                ),
                critical_area_option=int(candidates.critical_option[c]),
            )
        )
    return specs
