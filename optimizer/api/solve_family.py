"""A product family solved: :class:`FamilySolveResult` and its run folder."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from optimizer.api.files import ProblemFile
from optimizer.api.frames import _csv_frame, _RunFolder
from optimizer.api.solve_options import _left
from optimizer.outputs import Writer, json_text, text_writer

if TYPE_CHECKING:
    import pandas as pd


@dataclass
class FamilySolveResult(_RunFolder):
    """The most profitable product family, proven: ``solution`` (the library's
    :class:`~optimizer.solver.family.FamilySolution`), ``tables`` (each product's
    architecture table) and the ``library``, ``products`` and ``architectures`` tables."""

    problem_file: ProblemFile
    solution: Any
    tables: dict
    options: dict
    command = "solve"

    def to_dict(self) -> dict:
        """The ``dieplan solve --json`` object of a family file, without ``run_folder``."""
        from optimizer import family_report

        payload = family_report.family_dict(self.solution, self.problem_file.title)
        payload = {"family": payload["family"], "options": self.options, **payload}
        payload["architectures"] = family_report.tables_dict(self.tables)
        return payload

    @property
    def library(self) -> pd.DataFrame:
        """The die library (library.csv)."""
        from optimizer import family_report

        return _csv_frame(family_report.library_csv(self.solution))

    @property
    def products(self) -> pd.DataFrame:
        """Each product's design and its own optimum (products.csv)."""
        from optimizer import family_report

        return _csv_frame(family_report.products_csv(self.solution))

    @property
    def architectures(self) -> pd.DataFrame:
        """Each product's architecture table (architectures.csv; empty without tables)."""
        from optimizer import family_report

        return _csv_frame(family_report.tables_csv(self.tables))

    def files(self) -> dict[str, Writer]:
        from optimizer import family_report

        family = self.problem_file.parsed
        files = {
            "family.json": text_writer(json_text(self.to_dict()) + "\n"),
            "library.csv": text_writer(family_report.library_csv(self.solution)),
            "products.csv": text_writer(family_report.products_csv(self.solution)),
            "solver.log": text_writer("\n".join(self.solution.log) + "\n"),
            "problem.toml": self.problem_file.problem_writer(),
            # each product's design as [[product.design]], for `evaluate` to re-price
            "designs.toml": text_writer(
                family_report.designs_toml(family, self.solution.designs, "family_optimum")
            ),
        }
        if self.tables:
            files["architectures.csv"] = text_writer(family_report.tables_csv(self.tables))
        return files


def _solve_family(pf, deadline, method, time_limit, table_time) -> FamilySolveResult:
    import inspect

    from optimizer.solver.family import solve_family
    from optimizer.solver.family_table import family_tables

    family = pf.parsed
    chosen = {} if method is None else {"method": method}
    solution = solve_family(family, time_limit=_left(deadline), source=pf.source, **chosen)
    tables = {}
    if table_time > 0:
        left = table_time
        if deadline is not None:
            left = min(left, _left(deadline))
        problems = [m.problem for m in family.members]
        tables = family_tables(solution, problems, pf.source, time_limit=left)
    # the method the search used: the one asked for, else its own default
    default = inspect.signature(solve_family).parameters.get("method")
    options = {
        "method": method if method is not None or default is None else default.default,
        "time_limit": time_limit,
        "table_time": table_time,
    }
    return FamilySolveResult(pf, solution, tables, options)
