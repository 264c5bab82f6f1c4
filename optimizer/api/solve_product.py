"""One product solved: :class:`SolveResult`, its tables and run folder, and where the
choice flips against the challengers."""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

from optimizer.api.files import ProblemFile
from optimizer.api.frames import _frame, _RunFolder, csv_writer, figure_writers
from optimizer.api.solve_options import _mandate
from optimizer.errors import ProblemError
from optimizer.outputs import Writer, json_text, text_writer

if TYPE_CHECKING:
    import pandas as pd

    from optimizer.designs import DesignResult


@dataclass
class SolveResult(_RunFolder):
    """The most profitable design of one product, proven (``dieplan solve``).

    Attributes
    ----------
    solution
        The solver's :class:`~optimizer.solver.Solution` (under the mandate, if any).
    mandate
        The :class:`~optimizer.targets.RequirementReport` when targets were mandated.
    challengers
        ``[(design, break-even rows)]``: where the choice flips against each challenger.
    options
        The options of the run, as echoed in ``to_dict()["options"]``.

    ``best``, ``ranked``, ``architectures`` and ``flips`` give the winner and the tables
    of ranked.csv, architectures.csv and flips.csv. Example::

        >>> result = solve("problems/edge_accelerator.toml", table_time=2)
        >>> result.best.profit, result.solution.proven_optimal  # doctest: +SKIP
    """

    problem_file: ProblemFile
    solution: Any
    mandate: Any
    challengers: list | None
    options: dict
    command = "solve"

    @property
    def best(self) -> DesignResult:
        return self.solution.best

    def to_dict(self) -> dict:
        """The ``dieplan solve --json`` object, without ``run_folder``."""
        payload = {
            "title": self.problem_file.title,
            "options": self.options,
            **self.solution.to_dict(),
        }
        if self.challengers is not None:
            payload["flips"] = {
                "challengers": [
                    {"challenger": challenger.to_dict(), "inputs": [r.to_dict() for r in rows]}
                    for challenger, rows in self.challengers
                ],
                "note": "each input moved alone with both designs held fixed; sweep re-solves",
            }
        if self.mandate is not None:
            payload["mandate"] = self.mandate.to_dict()
            payload["unconstrained_best"] = self.mandate.free.best.to_dict()
        return payload

    @property
    def ranked(self) -> pd.DataFrame:
        """The ranked designs, best first (ranked.csv)."""
        from optimizer import report

        return _frame(
            [
                {
                    "rank": rank,
                    "design": report.short_design(d),
                    "packaging": d.packaging,
                    "n_dies": d.n_dies,
                    "cost_per_good_unit": d.cost_per_good_unit,
                    "manufacturing_cost_per_good_unit": d.manufacturing_cost_per_good_unit,
                    "package_yield": d.package_yield,
                    "nre": d.nre,
                    "profit": d.profit,
                    "profit_margin": d.profit_margin,
                    **{f"cost_{k}": v for k, v in d.breakdown.items()},
                }
                for rank, d in enumerate(self.solution.designs, start=1)
            ]
        )

    @property
    def architectures(self) -> pd.DataFrame:
        """The decision table: the best design of every architecture, each followed by
        its rows held to one process mix (architectures.csv; empty without a table)."""
        from optimizer import report

        solution = self.solution
        listed = []
        for row in solution.architectures:
            listed.append(row)
            listed.extend(row.mixes)
        rows = []
        for row in listed:
            d = row.design
            rows.append(
                {
                    "architecture": row.label,
                    "held_to_mix": row.mix,
                    "packaging": row.packaging,
                    "n_dies": row.n_dies,
                    "process_mix": row.process_mix,
                    "optimum": row.optimum,
                    "proven": row.proven,
                    "profit": d.profit if d else None,
                    "profit_bound": row.profit_bound,
                    "gap": row.gap if d else None,
                    "behind_optimum": solution.best.profit - d.profit if d else None,
                    "cost_per_good_unit": d.cost_per_good_unit if d else None,
                    "die_yields": report.die_yields(d) if d else "",
                    "package_yield": d.package_yield if d else None,
                    "nre": d.nre if d else None,
                    "salvage_revenue": d.salvage_revenue if d else None,
                    "design": report.short_design(d) if d else "",
                    "reason": row.reason,
                    **{f"gap_{k}": v for k, v in row.gap_components.items()},
                }
            )
        return _frame(rows)

    @property
    def flips(self) -> pd.DataFrame:
        """Break-even value of each main input against each challenger (flips.csv;
        empty when there is no other architecture)."""
        from optimizer import report

        return _frame(
            [
                {"challenger": report.short_design(design), **row.to_dict()}
                for design, found in self.challengers or []
                for row in found
            ]
        )

    def designs_toml(self) -> str:
        """The ranked designs, then each other architecture's best, as [[design]] tables
        that ``dieplan evaluate`` re-prices exactly (designs.toml)."""
        from optimizer.designs import designs_toml

        solution = self.solution
        results = list(solution.designs)
        names = [f"solved_rank{rank}" for rank in range(1, len(results) + 1)]
        for row in solution.architectures:
            if row.design is not None and not row.optimum:
                results.append(row.design)
                names.append(f"best_{row.packaging}_{row.n_dies}_dies")
        return designs_toml(results, problem=self.problem_file.problem, names=names)

    def files(self) -> dict[str, Writer]:
        """The run folder's files, by name."""
        solution = self.solution
        files = {
            "solution.json": text_writer(json_text(self.to_dict()) + "\n"),
            "ranked.csv": csv_writer(self.ranked),
            "solver.log": text_writer("\n".join(solution.log) + "\n"),
            "problem.toml": self.problem_file.problem_writer(),
            "designs.toml": text_writer(self.designs_toml()),
        }
        if solution.architectures:
            files["architectures.csv"] = csv_writer(self.architectures)
            files.update(self._decision_figure())
        if self.challengers is not None:
            files["flips.csv"] = csv_writer(self.flips)
        return files

    def _decision_figure(self) -> dict[str, Writer]:
        from optimizer.explore.plots import decision_figure

        solution = self.solution
        rows = [
            {
                "architecture": f"{row.label}: {row.process_mix}" if row.design else row.label,
                "profit": row.profit if row.design is not None else None,
                "bound": row.profit_bound,
                "proven": row.proven,
                "optimum": row.optimum,
                "reason": row.reason,
            }
            for row in solution.architectures
        ]
        title = self.problem_file.title
        figure = decision_figure(
            rows, f"{title}: best design of each architecture", solution.best.currency
        )
        return figure_writers("architectures", figure, title)


def _challengers(solution) -> list:
    """The best design of the next architecture and, when its die count is the optimum's,
    the best design with another die count: the choices an architect weighs."""
    rows = [row for row in solution.architectures if row.design is not None and not row.optimum]
    if not rows:
        return []
    picked = [rows[0].design]
    if rows[0].n_dies == solution.best.n_dies:
        other = next((r for r in rows if r.n_dies != solution.best.n_dies), None)
        if other is not None:
            picked.append(other.design)
    return picked


def _flips(pf: ProblemFile, solution) -> list | None:
    """Break-even of each main input between the optimum and each challenger."""
    challengers = _challengers(solution)
    if not challengers:
        return None
    from optimizer.explore.breakeven import break_even, main_inputs
    from optimizer.explore.fixed import FixedDesign

    problem = pf.problem
    # the exploration reading: break-even moves inputs the way sweep does
    data = pf.study.data
    optimum = FixedDesign.from_result(solution.best, problem)
    out = []
    for design in challengers:
        challenger = FixedDesign.from_result(design, problem)
        paths = main_inputs(problem, [optimum, challenger])
        out.append((design, break_even(data, pf.source, optimum, challenger, paths)))
    return out


def _solve_problem(
    pf, top, method, deadline, time_limit, table_time, mixes, by_architecture, given
) -> SolveResult:
    from optimizer.solver import progress
    from optimizer.solver import solve as run_solver
    from optimizer.targets import price_requirements

    problem = pf.problem
    mandate = _mandate(problem, given)
    table = dict(architectures=table_time > 0, table_time=table_time, split_mixes=mixes)
    if mandate is not None and mandate.any():
        priced = price_requirements(
            problem,
            mandate,
            top=top,
            source=pf.source,
            method=method,
            deadline=deadline,
            **table,
        )
        solution = priced.mandated
    else:
        solution = run_solver(
            problem, top=top, method=method, deadline=deadline, source=pf.source, **table
        )
        priced = None
    if by_architecture:
        if not solution.architectures:
            raise ProblemError(
                "--by-architecture", "", "needs the architecture table; set --table-time above 0"
            )
        solution = replace(solution, designs=solution.distinct_architectures(top))
    progress.stage("where the choice flips: break-even of each main input")
    challengers = _flips(pf, solution)
    options = {
        "top": top,
        "method": method,
        "time_limit": time_limit,
        "table_time": table_time,
        "mixes": mixes,
        "by_architecture": by_architecture,
        "requirements": given,
    }
    return SolveResult(pf, solution, priced, challengers, options)
