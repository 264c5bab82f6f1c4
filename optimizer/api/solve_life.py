"""A life plan solved: :class:`LifeSolveResult` and its run folder."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from optimizer.api.files import ProblemFile
from optimizer.api.frames import _csv_frame, _frame, _RunFolder
from optimizer.api.solve_options import _left
from optimizer.outputs import Writer, figure_writer, json_text, text_writer

if TYPE_CHECKING:
    import pandas as pd


@dataclass
class LifeSolveResult(_RunFolder):
    """The design with the most NPV over a life plan, proven: ``solution`` (the
    library's life solution), ``values`` (the designs drawn over the life, by label),
    ``periods`` (periods.csv) and ``decision`` (the decision table over the life)."""

    problem_file: ProblemFile
    solution: Any
    options: dict
    command = "solve"

    @property
    def values(self) -> dict:
        from optimizer import life_report

        return life_report.curves(self.solution, self.problem_file.parsed.labels[0])

    def to_dict(self) -> dict:
        """The ``dieplan solve --json`` object of a life file, without ``run_folder``."""
        from optimizer import life_report

        solution, plan = self.solution, self.problem_file.parsed
        return {
            "problem": plan.base.title,
            "options": self.options,
            "npv": solution.best.npv,
            "proven": solution.proven,
            "npv_bound": solution.npv_bound,
            "gap": solution.gap,
            "seconds": solution.seconds,
            "targets": plan.targets,
            "design": solution.best.periods[0].result.to_dict(),
            "life": {name: life_report.life_dict(v) for name, v in self.values.items()},
            "architectures": [life_report.row_dict(r) for r in solution.rows],
        }

    @property
    def periods(self) -> pd.DataFrame:
        """Per design drawn and period: cash flow and cumulative discounted value."""
        from optimizer import life_report

        return _csv_frame(life_report.periods_csv(self.values))

    @property
    def decision(self) -> pd.DataFrame:
        """The best design of every architecture over the life, best first."""
        from optimizer import life_report

        return _frame([life_report.row_dict(r) for r in self.solution.rows])

    def files(self) -> dict[str, Writer]:
        from optimizer import life_report

        plan = self.problem_file.parsed
        values = self.values
        figure = life_report.cumulative_figure(values, plan.base.market.currency, plan.base.title)
        return {
            "life.json": text_writer(json_text(self.to_dict()) + "\n"),
            "periods.csv": text_writer(life_report.periods_csv(values)),
            "cumulative_value.png": figure_writer(figure, dpi=130),
            "cumulative_value.svg": figure_writer(figure),
            "problem.toml": self.problem_file.problem_writer(),
        }


def _solve_life(pf, deadline, time_limit, table_time) -> LifeSolveResult:
    from optimizer.solver.life import solve_life

    solution = solve_life(
        pf.parsed,
        time_limit=_left(deadline),
        source=pf.source,
        table=table_time > 0,
        table_time=table_time,
    )
    return LifeSolveResult(pf, solution, {"time_limit": time_limit, "table_time": table_time})
