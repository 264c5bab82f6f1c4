"""``compare``: the winners of process option sets, or of several files, side by side."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from optimizer.api.explore_shared import _no_stage, _problem_copies
from optimizer.api.files import ProblemFile, _as_file
from optimizer.api.frames import _RunFolder, csv_writer, figure_writers, named, records
from optimizer.errors import ProblemError
from optimizer.outputs import Writer, json_writer

if TYPE_CHECKING:
    import pandas as pd


@dataclass
class CompareResult(_RunFolder):
    """Winners side by side (``dieplan compare``): ``table`` (comparison.csv, one row per
    option, best first), ``comparison`` (the library's result), ``objective`` (None for
    families) and ``options``. Example::

        >>> cmp = compare(load("problems/edge_accelerator.toml"))
        >>> cmp.table[["option", "profit", "profit_vs_best"]]   # doctest: +SKIP
    """

    problem_files: list[ProblemFile]
    comparison: Any
    table: pd.DataFrame
    objective: Any
    options: dict
    command = "compare"

    @property
    def family(self) -> bool:
        return self.objective is None

    @property
    def label(self) -> str:
        return self.problem_files[0].stem

    @property
    def currency(self) -> str:
        return self.problem_files[0].currency

    def to_dict(self) -> dict:
        """The ``dieplan compare --json`` object, without ``run_folder``."""
        return {
            "command": "compare",
            "options": self.options,
            "comparison": records(self.table),
            "notes": {k: list(v) for k, v in self.comparison.notes.items()},
        }

    def files(self) -> dict[str, Writer]:
        from optimizer.explore.plots import comparison_figure, family_comparison_figure

        payload = self.to_dict()
        titles = " ".join(pf.title for pf in self.problem_files)
        if self.family:
            figure = family_comparison_figure(self.comparison, self.currency)
            stem = "family_profit"
        else:
            figure = comparison_figure(self.comparison, self.currency, self.objective.words)
            stem = "cost_by_component"
        return {
            "comparison.csv": csv_writer(self.table),
            "comparison.json": json_writer(payload),
            "options.json": json_writer(payload["options"]),
            **figure_writers(stem, figure, titles),
            **_problem_copies(self.problem_files),
        }


def _process_sets(processes) -> tuple[list[str] | None, list[list[str]] | None]:
    """(as echoed, as sets): each set a comma-joined string or a list of names."""
    if not processes:
        return (list(processes) if processes is not None else None), None
    texts = [p if isinstance(p, str) else ",".join(p) for p in processes]
    return texts, [t.split(",") for t in texts]


def check_compare_kinds(kinds: list[str], sources: list[str], processes: bool) -> None:
    """Files that can be compared: one with process sets, or several of one kind (families
    with families, lives with lives); raises ProblemError."""
    if len(kinds) > 1 and processes:
        raise ProblemError(
            "--processes",
            "",
            "applies to one problem file; give one file with --processes, or several "
            "files without it",
        )
    if "family" in kinds and any(k != "family" for k in kinds):
        plain = next(s for s, k in zip(sources, kinds, strict=True) if k != "family")
        raise ProblemError(
            plain,
            "product",
            "is a single-product file among product families; compare family files "
            "with family files and problem files with problem files",
        )
    if "life" in kinds and any(k != "life" for k in kinds) and "family" not in kinds:
        plain = next(s for s, k in zip(sources, kinds, strict=True) if k != "life")
        raise ProblemError(
            plain,
            "life",
            "has no [life] plan, unlike the other files: a life's NPV and one period's "
            "profit do not compare; compare life files with life files",
        )


def compare(
    problem_files,
    processes: Sequence[str | Sequence[str]] | None = None,
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> CompareResult:
    """The best design per process option set of one file, or per file (``dieplan compare``).

    ``problem_files`` is one file or a list (each a :class:`ProblemFile` or anything
    :func:`load` takes, read with ``exploring``); ``processes`` lists option sets, each
    names joined by commas (default: each process alone, then all). Family files are
    compared with family files, life files by NPV. Raises ProblemError.
    """
    many = isinstance(problem_files, list | tuple)
    files = [_as_file(p, exploring=True) for p in (problem_files if many else [problem_files])]
    echoed, sets = _process_sets(processes)
    check_compare_kinds([pf.kind for pf in files], [pf.source for pf in files], bool(sets))
    if files[0].kind == "family":
        return _compare_family(files, echoed, sets, time_limit, progress, stage or _no_stage)
    from optimizer.explore import compare as comparing
    from optimizer.explore.objective import objective_of

    studies = [pf.study for pf in files]
    objective = objective_of(studies[0])
    if len(studies) > 1:
        options = comparing.file_options(studies)
    else:
        options = comparing.process_options(studies[0], sets)
        if not options:
            raise ProblemError(files[0].source, "process", "no process can be packaged on its own")
    (stage or _no_stage)("solving options", len(options))
    result = comparing.compare(options, time_limit=time_limit, progress=progress)
    echo = {
        "problems": [pf.source for pf in files],
        "processes": echoed,
        "time_limit": time_limit,
        "objective": objective.words,
    }
    table = named(result.table, objective.name)
    return CompareResult(files, result, table, objective, echo)


def _compare_family(files, echoed, sets, time_limit, progress, stage) -> CompareResult:
    from optimizer.explore import family as fam

    studies = [pf.study for pf in files]
    if len(studies) > 1:
        options = fam.family_file_options(studies)
    else:
        options = fam.family_process_options(studies[0], sets)
        if not options:
            raise ProblemError(files[0].source, "process", "no process can be packaged on its own")
    stage("solving each family option", len(options))
    result = fam.compare_families(options, time_limit=time_limit, progress=progress)
    echo = {
        "problems": [pf.source for pf in files],
        "family": True,
        "processes": echoed,
        "time_limit": time_limit,
    }
    return CompareResult(files, result, result.table, None, echo)
