"""``sweep``: solves over a grid of one input or two, and where the winner changes."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from optimizer.api.explore_shared import design_rows, family_rows, make_runner
from optimizer.api.files import ProblemFile, _as_file
from optimizer.api.frames import _RunFolder, csv_writer, figure_writers, named, records
from optimizer.outputs import Writer, json_writer

if TYPE_CHECKING:
    import pandas as pd


@dataclass
class SweepOutcome(_RunFolder):
    """A finished sweep (``dieplan sweep``): ``points`` (points.csv), ``crossovers``
    (crossovers.csv), ``curves`` (curves.csv, 1-D only), ``designs`` (each winner held
    fixed, by id), ``result`` (the library's), ``objective`` (None for families) and
    ``options``. Example::

        >>> sw = sweep("problems/edge_accelerator.toml", "market.volume", 1e5, 1e7, steps=5)
        >>> sw.crossovers[["at", "kind_before", "kind_after", "crossing"]]  # doctest: +SKIP
    """

    problem_file: ProblemFile
    result: Any
    objective: Any
    options: dict
    runner: Any
    command = "sweep"

    @property
    def family(self) -> bool:
        return self.objective is None

    @property
    def _name(self) -> str:
        return "profit" if self.family else self.objective.name

    @property
    def points(self) -> pd.DataFrame:
        return named(self.result.points, self._name)

    @property
    def crossovers(self) -> pd.DataFrame:
        return named(self.result.crossovers, self._name)

    @property
    def curves(self) -> pd.DataFrame | None:
        return self.result.curves

    @property
    def designs(self) -> dict:
        return self.result.designs

    def _design_payload(self) -> dict:
        if self.family:
            return {key: family_rows(d) for key, d in self.result.designs.items()}
        return design_rows(self.result.designs)

    def to_dict(self) -> dict:
        """The ``dieplan sweep --json`` object, without ``run_folder``."""
        return {
            "command": "sweep",
            "options": self.options,
            "points": records(self.points),
            "crossovers": records(self.crossovers),
            "designs": self._design_payload(),
        }

    def files(self) -> dict[str, Writer]:
        from optimizer.explore.plots import sweep_figure

        result = self.result
        pf = self.problem_file
        if self.family:
            stem = "profit" if len(result.axes) == 1 else "winner_map"
            figure = sweep_figure(result, pf.currency)
        else:
            stem = self.objective.name if len(result.axes) == 1 else "winner_map"
            figure = sweep_figure(result, pf.currency, self.objective.words)
        files: dict[str, Writer] = {
            "points.csv": csv_writer(self.points),
            "crossovers.csv": csv_writer(self.crossovers),
            "designs.json": json_writer(self._design_payload()),
            "options.json": json_writer(self.options),
            **figure_writers(stem, figure, pf.title),
            "problem.toml": pf.problem_writer(),
        }
        if result.curves is not None:
            files["curves.csv"] = csv_writer(result.curves)
        return files


def sweep_axes(kind: str, vary, steps=21, log=False, vary2=None, steps2=11, log2=False) -> list:
    """The axes of a sweep, checked (raises ProblemError): ``vary`` is (path, low, high);
    ``kind`` the file's (family files name ``product.NAME.*`` paths, life files
    ``life.*`` ones too)."""
    if kind == "family":
        from optimizer.explore.family import make_family_axis

        def make(v, n, lg, option, steps_option):
            return make_family_axis(v[0], v[1], v[2], n, lg, option, steps_option)
    else:
        from optimizer.explore.sweep import make_axis

        if kind == "life":
            from optimizer.explore.life_paths import resolve_life as resolver
        else:
            from optimizer.explore.paths import resolve as resolver

        def make(v, n, lg, option, steps_option):
            return make_axis(v[0], v[1], v[2], n, lg, option, steps_option, resolver=resolver)

    axes = [make(vary, steps, log, "--vary", "--steps")]
    if vary2 is not None:
        axes.append(make(vary2, steps2, log2, "--vary2", "--steps2"))
    return axes


def _axes_echo(result) -> list[dict]:
    return [
        {
            "path": a.path.text,
            "unit": a.path.unit_text,
            "low": a.low,
            "high": a.high,
            "steps": a.steps,
            "log": a.log,
        }
        for a in result.axes
    ]


def sweep(
    problem_file,
    path: str,
    low: float | str,
    high: float | str,
    steps: int = 21,
    log: bool = False,
    *,
    path2: str | None = None,
    low2: float | str | None = None,
    high2: float | str | None = None,
    steps2: int = 11,
    log2: bool = False,
    refine: bool = True,
    every_point: bool = False,
    workers: int | None = None,
    scheduler: str | None = None,
    runner=None,
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> SweepOutcome:
    """Solve over a grid of one input (or two: ``path2``...), as ``dieplan sweep``.

    ``low``/``high`` are numbers in the field's base unit or quantities (``"0.05
    /cm^2"``); ``workers``/``scheduler`` (or a ready ``runner``) say where solves run.
    Returns a :class:`SweepOutcome`. Raises ProblemError. Example::

        >>> sw = sweep(load("problems/edge_accelerator.toml"), "market.volume", 1e5, 1e7)
        >>> sw.points[["market.volume", "design_kind", "profit"]]  # doctest: +SKIP
    """
    pf = _as_file(problem_file, exploring=True)
    vary2 = None if path2 is None else (path2, low2, high2)
    axes = sweep_axes(pf.kind, (path, low, high), steps, log, vary2, steps2, log2)
    runner = runner or make_runner(workers, scheduler)
    study = pf.study
    common = dict(
        runner=runner,
        time_limit=time_limit,
        refine=refine,
        progress=progress,
        stage=stage,
    )
    with runner.session():
        runner.start()
        if pf.kind == "family":
            from optimizer.explore.family import run_family_sweep

            result = run_family_sweep(study, axes, **common)
        else:
            from optimizer.explore.sweep import run_sweep

            result = run_sweep(study, axes, every_point=every_point, **common)
    scheduler = scheduler if scheduler is not None else runner.scheduler
    if pf.kind == "family":
        options = {
            "problem": pf.source,
            "family": True,
            "products": study.family.names,
            "axes": _axes_echo(result),
            "refine": refine,
            "every_point": every_point,
            "strategy": result.strategy,
            "solves": result.solves,
            "workers": runner.workers,
            "scheduler": scheduler,
            "time_limit": time_limit,
        }
        return SweepOutcome(pf, result, None, options, runner)
    from optimizer.explore.objective import objective_of

    objective = objective_of(study)
    options = {
        "problem": pf.source,
        "axes": _axes_echo(result),
        "refine": refine,
        "every_point": every_point,
        "strategy": result.strategy,
        "solves": result.solves,
        "workers": runner.workers,
        "scheduler": scheduler,
        "time_limit": time_limit,
        "shared_candidates": result.shared_candidates,
        "objective": objective.words,
    }
    return SweepOutcome(pf, result, objective, options, runner)
