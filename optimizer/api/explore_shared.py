"""Pieces the exploration commands share: held designs as JSON, where scenario solves
run, and the problem copies of a run folder."""

from __future__ import annotations

import os
from collections.abc import Sequence

from optimizer.api.files import ProblemFile
from optimizer.outputs import Writer


def design_rows(designs: dict) -> dict:
    """Held designs as JSON; a design held over a life names its target levels (0: the
    process's base density) instead of densities, which move with the periods."""
    return {
        key: {
            "kind": d.kind,
            "summary": d.summary,
            "packaging": d.packaging,
            "dies": [_die_row(s, getattr(d, "levels", None), j) for j, s in enumerate(d.specs)],
        }
        for key, d in designs.items()
    }


def _die_row(spec, levels: tuple[int, ...] | None, j: int) -> dict:
    row = {
        "name": spec.name,
        "process": spec.process,
        "copies": spec.copies,
        "blocks": spec.blocks,
        "spares": spec.spares,
        "repair": spec.repair,
        "defect_density_per_cm2": spec.defect_density_per_cm2,
        "sigma_margin": spec.sigma_margin,
        "critical_area_option": spec.critical_area_option,
    }
    if levels is not None:
        del row["defect_density_per_cm2"]
        row["target_level"] = levels[j]
    return row


def family_rows(fixed) -> dict:
    """A fixed family design as JSON: its library in brief and each product's design."""
    return {
        "kind": fixed.kind,
        "summary": fixed.summary,
        "library_dies": fixed.library_dies,
        "shared_dies": fixed.shared_dies,
        "shared": fixed.shared,
        "products": design_rows(dict(zip(fixed.names, fixed.designs, strict=True))),
    }


def make_runner(workers: int | None = None, scheduler: str | None = None):
    """Where scenario solves run: ``workers`` local processes (default one per CPU core)
    or a Dask ``scheduler`` address (raises ProblemError)."""
    from optimizer.explore.parallel import Runner, max_workers

    if workers is None:
        workers = min(os.cpu_count() or 1, max_workers())
    return Runner(workers=workers, scheduler=scheduler)


def _problem_copies(files: Sequence[ProblemFile]) -> dict[str, Writer]:
    if len(files) == 1:
        return {"problem.toml": files[0].problem_writer()}
    return {f"problem-{i + 1}-{pf.stem}.toml": pf.problem_writer() for i, pf in enumerate(files)}


def _no_stage(name: str, total: int) -> None:
    return None
