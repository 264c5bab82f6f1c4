"""``evaluate``: explicit designs priced, for one product, a family or a life plan."""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from optimizer.api.files import ProblemFile, _as_file
from optimizer.api.frames import _csv_frame, _frame, _RunFolder
from optimizer.errors import ProblemError
from optimizer.outputs import short

if TYPE_CHECKING:
    import pandas as pd

    from optimizer.designs import DesignResult


@dataclass
class Evaluation(_RunFolder):
    """Explicit designs of one product, priced (``dieplan evaluate``).

    ``designs`` holds the :class:`~optimizer.designs.DesignResult` objects, those that
    keep every rule first, each group by profit. Example::

        >>> ev = evaluate(load("problems/edge_accelerator.toml"))
        >>> ev.overview[["design", "profit"]]                    # doctest: +SKIP
    """

    problem_file: ProblemFile
    designs: list[DesignResult]

    def to_dict(self) -> dict:
        """The ``dieplan evaluate --json`` object."""
        return {"problem": self.problem_file.title, "designs": [r.to_dict() for r in self.designs]}

    @property
    def overview(self) -> pd.DataFrame:
        """One row per design: the overview table the command prints."""
        return _frame(
            [
                {
                    "design": r.design,
                    "packaging": r.packaging,
                    "n_dies": r.n_dies,
                    "cost_per_good_unit": r.cost_per_good_unit,
                    "package_yield": r.package_yield,
                    "nre": r.nre,
                    "profit": r.profit,
                    "profit_margin": r.profit_margin,
                    "violations": "; ".join(r.violations),
                }
                for r in self.designs
            ]
        )

    @property
    def dies(self) -> pd.DataFrame:
        """One row per die of each design."""
        return _frame(
            [
                {
                    "design": r.design,
                    "die": d.name,
                    "process": d.process,
                    "copies": d.copies,
                    "area_mm2": d.area_mm2,
                    "gross_dies_per_wafer": d.gross_dies_per_wafer,
                    "hard_yield": d.hard_yield,
                    "soft_yield": d.soft_yield,
                    "die_yield": d.die_yield,
                    "defect_level": d.defect_level,
                    "cost_per_passed_die": d.cost_per_passed_die,
                }
                for r in self.designs
                for d in r.dies
            ]
        )

    @property
    def costs(self) -> pd.DataFrame:
        """The cost per good unit by component: one row per design and component."""
        return _frame(
            [
                {
                    "design": r.design,
                    "component": name,
                    "per_unit": value,
                    "share": value / r.cost_per_good_unit,
                }
                for r in self.designs
                for name, value in r.breakdown.items()
            ]
        )


@dataclass(frozen=True)
class FamilyDesignPrice:
    """One family design (a ``[[product.design]]`` of that name in every product)."""

    name: str
    results: list[DesignResult]
    total: tuple[float, float, float] | None  # family profit, shared NRE, shared targets
    conflict: str | None

    @property
    def profit(self) -> float | None:
        return self.total[0] if self.total is not None else None

    @property
    def breaks_rules(self) -> bool:
        return any(r.violations for r in self.results)


@dataclass
class FamilyEvaluation:
    """Family designs priced: ``designs`` (:class:`FamilyDesignPrice`, rule keepers
    first, by family profit), ``products`` (names) and ``overview``."""

    problem_file: ProblemFile
    products: list[str]
    designs: list[FamilyDesignPrice]

    def to_dict(self) -> dict:
        """The ``dieplan evaluate --json`` object of a family file."""
        return {
            "family": self.problem_file.title,
            "products": self.products,
            "designs": [
                {
                    "design": p.name,
                    "profit": p.total[0] if p.total is not None else None,
                    "shared_nre": p.total[1] if p.total is not None else None,
                    "shared_targets": p.total[2] if p.total is not None else None,
                    "conflict": p.conflict,
                    "products": [
                        {"product": n, **r.to_dict()}
                        for n, r in zip(self.products, p.results, strict=True)
                    ],
                }
                for p in self.designs
            ],
        }

    @property
    def overview(self) -> pd.DataFrame:
        """One row per family design: family profit and whether it breaks a rule."""
        return _frame(
            [
                {
                    "design": p.name,
                    "profit": p.profit,
                    "shared_nre": p.total[1] if p.total is not None else None,
                    "breaks_rules": p.breaks_rules,
                    "conflict": p.conflict or "",
                }
                for p in self.designs
            ]
        )


@dataclass
class LifeEvaluation:
    """Designs priced over a life plan: ``values`` (one
    :class:`~optimizer.life_value.LifeValue` per design, most NPV first) and ``periods``."""

    problem_file: ProblemFile
    values: list

    @property
    def designs(self) -> list:
        return self.values

    def to_dict(self) -> dict:
        """The ``dieplan evaluate --json`` object of a life file."""
        from optimizer import life_report

        return {
            "problem": self.problem_file.title,
            "life": [life_report.life_dict(v) for v in self.values],
        }

    @property
    def periods(self) -> pd.DataFrame:
        """One row per design and period: volume, price, cash flow, discount, cumulative."""
        from optimizer import life_report

        return _csv_frame(life_report.periods_csv({v.design: v for v in self.values}))


def evaluate(problem_file, design: str | None = None):
    """Price the file's explicit designs (``dieplan evaluate``).

    ``problem_file`` is a :class:`ProblemFile` or anything :func:`load` takes; ``design``
    names one design. Returns an :class:`Evaluation` (a family file: a
    :class:`FamilyEvaluation`; a life file: a :class:`LifeEvaluation`). Raises
    ProblemError. Example::

        >>> ev = evaluate("problems/edge_accelerator.toml")
        >>> [r.design for r in ev.designs]                       # doctest: +SKIP
    """
    pf = _as_file(problem_file)
    if pf.kind == "family":
        return _evaluate_family(pf, design)
    if pf.kind == "life":
        return _evaluate_life(pf, design)
    from optimizer.designs import evaluate_design
    from optimizer.evaluator import Evaluator
    from optimizer.report import by_rules_then_profit

    problem = pf.problem
    if not problem.design:
        raise ProblemError(pf.source, "design", "the file has no [[design]] to evaluate; add one")
    if design is not None:
        names = [d.name for d in problem.design]
        if design not in names:
            raise ProblemError(
                "--design",
                "",
                f"no design named '{short(design)}' in {pf.source}; use one of {names}",
            )
        chosen = [problem.design_named(design)]
    else:
        chosen = list(problem.design)
    evaluator = Evaluator(problem)
    results = by_rules_then_profit([evaluate_design(evaluator, d, pf.source) for d in chosen])
    return Evaluation(pf, results)


def in_product(error: ProblemError, name: str) -> ProblemError:
    """A single-product error raised on a family member, named under its product."""
    own = error.field.split(".")[0].split("[")[0] in ("market", "requirements", "design")
    where = f"product '{name}'.{error.field}" if own else f"product '{name}': {error.field}"
    return ProblemError(error.source, where, error.message)


def _family_designs(source: str, family, only: str | None) -> list[str]:
    """Names of the family designs to price: each must be a [[product.design]] of every
    product."""
    names: list[str] = []
    for member in family.members:
        for design in member.problem.design:
            if design.name not in names:
                names.append(design.name)
    if not names:
        raise ProblemError(
            source,
            "product.design",
            "no product has a [[product.design]]; add one under each [[product]], all with "
            "the same name, to price them as one family design",
        )
    if only is not None:
        if only not in names:
            raise ProblemError(
                "--design",
                "",
                f"no family design named '{short(only)}' in {source}; use one of {names}",
            )
        names = [only]
    for name in names:
        for member in family.members:
            if name not in [d.name for d in member.problem.design]:
                holder = next(
                    m.name for m in family.members if name in [d.name for d in m.problem.design]
                )
                raise ProblemError(
                    source,
                    f"product '{member.name}'.design",
                    f"has no design named '{short(name)}' (product '{holder}' has one); a "
                    "family design needs one per product, so add a [[product.design]] named "
                    f"'{short(name)}' under product '{member.name}'",
                )
    return names


def _evaluate_family(pf: ProblemFile, only: str | None) -> FamilyEvaluation:
    from optimizer import family_report
    from optimizer.designs import evaluate_design
    from optimizer.evaluator import Evaluator
    from optimizer.solver.family import family_profit

    family = pf.parsed
    wanted = _family_designs(pf.source, family, only)
    names = family.names
    problems = [m.problem for m in family.members]
    evaluators = [Evaluator(p) for p in problems]
    priced = []
    for name in wanted:
        results = []
        for member, evaluator in zip(family.members, evaluators, strict=True):
            try:
                results.append(
                    evaluate_design(evaluator, member.problem.design_named(name), pf.source)
                )
            except ProblemError as error:
                raise in_product(error, member.name) from None
        conflict = family_report.target_conflict(names, results)
        total = family_profit(problems, results) if conflict is None else None
        priced.append(FamilyDesignPrice(name, results, total, conflict))
    # the family designs that keep every rule first, each group by family profit
    priced.sort(
        key=lambda p: (p.breaks_rules, p.total is None, -(p.profit if p.total is not None else 0.0))
    )
    return FamilyEvaluation(pf, list(names), priced)


def _evaluate_life(pf: ProblemFile, only: str | None) -> LifeEvaluation:
    from optimizer.life_value import design_life_value

    plan = pf.parsed
    problem = plan.base
    if not problem.design:
        raise ProblemError(pf.source, "design", "the file has no [[design]] to evaluate; add one")
    names = [d.name for d in problem.design]
    if only is not None and only not in names:
        raise ProblemError(
            "--design", "", f"no design named '{short(only)}' in {pf.source}; use one of {names}"
        )
    chosen = [only] if only is not None else names
    values = sorted(
        (design_life_value(plan, name, pf.source) for name in chosen), key=lambda v: -v.npv
    )
    return LifeEvaluation(pf, values)
