"""``uncertainty``: seeded Monte Carlo over the file's uncertain inputs."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from optimizer.api.explore_shared import design_rows, family_rows, make_runner
from optimizer.api.files import ProblemFile, _as_file
from optimizer.api.frames import _RunFolder, csv_writer, figure_writers, named, records
from optimizer.errors import ProblemError
from optimizer.outputs import Writer, json_writer

if TYPE_CHECKING:
    import pandas as pd


@dataclass
class UncertaintyOutcome(_RunFolder):
    """Monte Carlo over the file's uncertain inputs (``dieplan uncertainty``): ``summary``
    (summary.csv: P10, P50, P90 and P(best) per design), ``samples`` (samples.csv),
    ``result`` (the library's), ``objective`` (None for families) and ``options``."""

    problem_file: ProblemFile
    result: Any
    objective: Any
    options: dict
    runner: Any
    command = "uncertainty"

    @property
    def family(self) -> bool:
        return self.objective is None

    @property
    def labels(self) -> list[str]:
        """The designs' labels over a life (optimum, first period's pick); else none."""
        if self.family or self.objective.name != "npv":
            return []
        return list(self.result.labels)

    @property
    def summary(self) -> pd.DataFrame:
        if self.family:
            return self.result.summary
        summary = named(self.result.summary, self.objective.name)
        if self.objective.name == "npv":
            summary.insert(1, "label", list(self.result.labels))
        return summary

    @property
    def samples(self) -> pd.DataFrame:
        frame = self.result.samples_frame()
        return frame if self.family else named(frame, self.objective.name)

    def to_dict(self) -> dict:
        """The ``dieplan uncertainty --json`` object, without ``run_folder``."""
        return {
            "command": "uncertainty",
            "options": self.options,
            "summary": records(self.summary),
        }

    def files(self) -> dict[str, Writer]:
        from optimizer.explore.plots import uncertainty_figure

        pf, result = self.problem_file, self.result
        if self.family:
            designs = {
                f"rank{k + 1}": {"label": label, **family_rows(d)}
                for k, (label, d) in enumerate(zip(result.labels, result.designs, strict=True))
            }
            stem = "profit_distribution"
            figure = uncertainty_figure(result, pf.currency)
        else:
            designs = design_rows({f"rank{k + 1}": d for k, d in enumerate(result.designs)})
            stem = f"{self.objective.name}_distribution"
            figure = uncertainty_figure(result, pf.currency, self.objective.words)
        return {
            "summary.csv": csv_writer(self.summary),
            "samples.csv": csv_writer(self.samples),
            "designs.json": json_writer(designs),
            "options.json": json_writer(self.options),
            **figure_writers(stem, figure, pf.title),
            "problem.toml": pf.problem_writer(),
        }


def check_uncertainty_top(kind: str, source: str, top: int | None) -> None:
    """A family or a life compares its own designs: ``top`` does not apply to them."""
    if top is None:
        return
    if kind == "family":
        raise ProblemError(
            "--top",
            str(top),
            f"does not apply to the product family in {source} (a family solve "
            "gives one family design; it is compared with the products' own optima); "
            "drop --top",
        )
    if kind == "life":
        raise ProblemError(
            "--top",
            str(top),
            f"does not apply to the life plan in {source} (a life solve gives one "
            "optimum; it is compared with the design picked on the first period's numbers); "
            "drop --top",
        )


def uncertainty(
    problem_file,
    samples: int = 1000,
    seed: int = 0,
    top: int | None = None,
    workers: int | None = None,
    scheduler: str | None = None,
    runner=None,
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> UncertaintyOutcome:
    """Seeded Monte Carlo over the file's ``[[uncertain]]`` inputs for the top designs
    (default 3; a family or a life compares its own), as ``dieplan uncertainty``.
    Raises ProblemError."""
    pf = _as_file(problem_file, exploring=True)
    check_uncertainty_top(pf.kind, pf.source, top)
    runner = runner or make_runner(workers, scheduler)
    study = pf.study
    common = dict(
        samples=samples,
        seed=seed,
        runner=runner,
        time_limit=time_limit,
        progress=progress,
        stage=stage,
    )
    top = 3 if top is None else top
    with runner.session():
        runner.start()
        if pf.kind == "family":
            from optimizer.explore.family import run_family_uncertainty

            result = run_family_uncertainty(study, **common)
        else:
            from optimizer.explore.uncertainty import run_uncertainty

            result = run_uncertainty(study, top=top, **common)
    scheduler = scheduler if scheduler is not None else runner.scheduler
    inputs = [entry.model_dump() for entry in study.uncertain]
    if pf.kind == "family":
        options = {
            "problem": pf.source,
            "family": True,
            "samples": samples,
            "seed": seed,
            "workers": runner.workers,
            "scheduler": scheduler,
            "time_limit": time_limit,
            "inputs": inputs,
        }
        return UncertaintyOutcome(pf, result, None, options, runner)
    from optimizer.explore.objective import objective_of

    objective = objective_of(study)
    options = {
        "problem": pf.source,
        "samples": samples,
        "seed": seed,
        "top": top,
        "workers": runner.workers,
        "scheduler": scheduler,
        "time_limit": time_limit,
        "inputs": inputs,
        "objective": objective.words,
    }
    return UncertaintyOutcome(pf, result, objective, options, runner)
