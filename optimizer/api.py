"""The Python API of dieplan: what the command line does, as functions returning objects.

Load a problem file once, then evaluate, solve or explore it; each call returns an
object holding the library's own results, the tables the command line prints as pandas
DataFrames, ``to_dict()`` (the command's ``--json`` output) and ``write(results_dir)``
(the command's run folder, report.html included)::

    >>> import optimizer
    >>> study = optimizer.load("problems/edge_accelerator.toml")
    >>> result = optimizer.solve(study, table_time=2)
    >>> result.best.profit                                  # doctest: +SKIP
    >>> result.architectures[["architecture", "profit"]]   # doctest: +SKIP
    >>> folder = result.write("results")                   # doctest: +SKIP

Bad input raises :class:`optimizer.errors.ProblemError` with the one line the command
line prints (``error.line()``); option names in those lines are the command's
(``--design``, ``--top``), which name the keyword arguments here too.

Figures are estimates for comparing options early in a design, like everything dieplan
prints. This module imports nothing heavy at import time (``import optimizer`` stays
light): numpy, pandas, the solver and matplotlib load inside the calls that use them.
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import re
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from optimizer.errors import ProblemError
from optimizer.outputs import (
    Writer,
    clean,
    copy_writer,
    figure_writer,
    json_text,
    json_writer,
    short,
    text_writer,
    write_run_folder,
)

if TYPE_CHECKING:
    import pandas as pd

    from optimizer.designs import DesignResult

KINDS = ("problem", "family", "life")


# ---------------------------------------------------------------- loading
@dataclass(eq=False)
class ProblemFile:
    """A problem file read and validated: its kind, the parsed object and the document.

    Attributes
    ----------
    kind
        ``"problem"`` (one product), ``"family"`` (``[[product]]`` tables) or ``"life"``
        (a ``[life]`` plan).
    parsed
        The :class:`~optimizer.problem.Problem`, :class:`~optimizer.family.Family` or
        :class:`~optimizer.life.LifePlan`.
    data
        The decoded document, as ``tomllib`` gives it.
    source
        The name every message uses: the path as given, or ``name`` for a dict.
    path
        The file, or None when loaded from a dict.

    Example::

        >>> pf = load("problems/edge_accelerator.toml")
        >>> pf.kind, pf.title                                   # doctest: +SKIP
        ('problem', 'Edge inference accelerator (invented demo)')
    """

    kind: str
    parsed: Any
    data: dict
    source: str
    path: Path | None = None
    # the exploration reading of the same document (its [[uncertain]] entries checked)
    _study: Any = field(default=None, repr=False)

    @property
    def problem(self):
        """The one product's Problem (for a life, its values at the start); None for a
        family."""
        if self.kind == "life":
            return self.parsed.base
        return self.parsed if self.kind == "problem" else None

    @property
    def title(self) -> str:
        if self.kind == "family":
            return self.parsed.title
        return self.problem.title

    @property
    def currency(self) -> str:
        if self.kind == "family":
            return self.parsed.members[0].problem.market.currency
        return self.problem.market.currency

    @property
    def stem(self) -> str:
        """The label of run folders: the file name without its suffix."""
        return Path(self.source).stem

    def problem_writer(self) -> Writer:
        """Writes the run folder's problem.toml: a copy of the file, or for a document
        given as a dict, that document as TOML (checked to read back the same)."""
        if self.path is not None:
            return copy_writer(self.path)
        return text_writer(toml_document(self.data, self.source))

    @property
    def study(self):
        """The document read as compare/sweep/sensitivity/uncertainty read it."""
        if self._study is None:
            self._study = _exploration_study(self.data, self.source)
        return self._study


def load(source: str | os.PathLike | dict, *, name: str | None = None, exploring: bool = False):
    """Read and validate a problem file, or a decoded document, into a :class:`ProblemFile`.

    ``source`` is a path, or a dict holding the document as ``tomllib`` decodes it
    (``name`` then names it in messages; default ``"<problem>"``). The checks are those
    of ``dieplan check``/``solve``/``evaluate``; with ``exploring`` those of the
    exploration commands instead (``[[uncertain]]`` entries checked too, and a life
    file's entries may name ``life.*`` paths). Raises ProblemError.

    Example::

        >>> pf = load("problems/accelerator_family.toml")
        >>> pf.kind, len(pf.parsed.members)                     # doctest: +SKIP
        ('family', 3)
    """
    from optimizer.problem import _check_nesting, read_problem_data

    if isinstance(source, dict):
        label = name or "<problem>"
        # iterative depth check first: copying a too-deep document would overflow
        _check_nesting(source, label)
        data, path = _plain(source), None
    elif isinstance(source, str | os.PathLike):
        data, label = read_problem_data(source)
        path = Path(source)
    else:
        raise ProblemError(
            short(repr(source)),
            "",
            "is neither a path nor a dict; give the path of a problem file or its decoded "
            "TOML as a dict",
        )
    if exploring:
        study = _exploration_study(data, label)
        kind = _kind_of(data)
        if kind == "family":
            parsed = study.family
        elif kind == "life":
            parsed = study.plan
        else:
            parsed = study.problem
        return ProblemFile(kind, parsed, data, label, path, study)
    return _checked(data, label, path)


def _kind_of(data: dict) -> str:
    from optimizer.family import is_family

    if is_family(data):
        return "family"
    return "life" if "life" in data else "problem"


def _checked(data: dict, source: str, path: Path | None) -> ProblemFile:
    """The reading of check/solve/evaluate: a life plan, a family, or one problem."""
    from optimizer.family import family_from_data, is_family
    from optimizer.life import has_life, life_plan
    from optimizer.problem import check_feasible, parse_problem

    if not isinstance(data, dict):
        raise ProblemError(source, "", "is not a table of sections; start from a demo file")
    if has_life(data) and not is_family(data):
        plan = life_plan(data, source)
        check_feasible(plan.base, source)
        return ProblemFile("life", plan, data, source, path)
    if is_family(data):
        if "uncertain" in data:
            # a family's [[uncertain]] entries sit at the top level (exploration reads them)
            from optimizer.explore.family_paths import family_study_from_data

            study = family_study_from_data(data, source)
            return ProblemFile("family", study.family, data, source, path, study)
        return ProblemFile("family", family_from_data(data, source), data, source, path)
    problem = parse_problem(data, source)
    check_feasible(problem, source)
    return ProblemFile("problem", problem, data, source, path)


def _exploration_study(data: dict, source: str):
    """The document as the exploration commands read it (see ``load_study``)."""
    from optimizer.explore.paths import study_from_data
    from optimizer.problem import check_feasible

    if not isinstance(data, dict):
        raise ProblemError(source, "", "is not a table of sections; start from a demo file")
    kind = _kind_of(data)
    if kind == "family":
        from optimizer.explore.family_paths import family_study_from_data

        return family_study_from_data(data, source)
    if kind == "life":
        from optimizer.explore.life_paths import life_study_from_data

        study = life_study_from_data(data, source)
    else:
        study = study_from_data(data, source)
    check_feasible(study.problem, source)
    return study


def _as_file(problem_file, exploring: bool = False) -> ProblemFile:
    if isinstance(problem_file, ProblemFile):
        return problem_file
    return load(problem_file, exploring=exploring)


def _plain(value: object) -> object:
    """A document as tomllib gives it: lists for tuples, plain numbers for numpy's."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and hasattr(value, "dtype"):
        return value.item()
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return value


# ---------------------------------------------------------------- a document as TOML
def _toml_string(text: str) -> str:
    escaped = []
    for ch in text:
        if ch in '"\\':
            escaped.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            escaped.append(f"\\u{ord(ch):04X}")
        else:
            escaped.append(ch)
    return '"' + "".join(escaped) + '"'


def _toml_key(key: object) -> str:
    text = str(key)
    return text if re.fullmatch(r"[A-Za-z0-9_-]+", text) else _toml_string(text)


def _toml_value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(float(value))
    if isinstance(value, str):
        return _toml_string(value)
    if isinstance(value, _dt.date | _dt.time):
        return value.isoformat()
    if isinstance(value, dict):
        items = ", ".join(f"{_toml_key(k)} = {_toml_value(v)}" for k, v in value.items())
        return "{ " + items + " }" if items else "{}"
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(type(value).__name__)


def _is_table_list(value: object) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, dict) for v in value)


def toml_document(data: dict, source: str = "<problem>") -> str:
    """A decoded document written back as TOML: sections as tables, ``[[x]]`` lists as
    arrays of tables, anything deeper inline. Raises ProblemError if the text would not
    read back as ``data`` (a value TOML cannot hold)."""
    import tomllib

    lines = ["# written by dieplan from a document given as a dict"]
    try:
        for key, value in data.items():
            if not isinstance(value, dict) and not _is_table_list(value):
                lines.append(f"{_toml_key(key)} = {_toml_value(value)}")
        for key, value in data.items():
            tables = [value] if isinstance(value, dict) else value if _is_table_list(value) else []
            head = f"[{_toml_key(key)}]" if isinstance(value, dict) else f"[[{_toml_key(key)}]]"
            for table in tables:
                lines += ["", head]
                lines += [f"{_toml_key(k)} = {_toml_value(v)}" for k, v in table.items()]
        text = "\n".join(lines) + "\n"
        same = tomllib.loads(text) == data
    except (TypeError, ValueError):
        same = False
    if not same:
        raise ProblemError(
            source,
            "",
            "holds values TOML cannot write (only tables, lists, strings, numbers, booleans "
            "and dates), so the run folder's problem.toml cannot be made; give those values "
            "as TOML has them",
        )
    return text


# ---------------------------------------------------------------- shared pieces
def records(frame: pd.DataFrame) -> list[dict]:
    """A table as JSON-ready rows (NaN as null)."""
    return clean(frame.to_dict(orient="records"))


def named(frame: pd.DataFrame, objective: str) -> pd.DataFrame:
    """The frame with its objective columns named for the objective: the library keeps
    ``profit`` in every frame; a life's are ``npv`` (``profit_low`` -> ``npv_low``)."""
    if objective == "profit":
        return frame
    return frame.rename(columns=lambda c: c.replace("profit", objective))


def csv_writer(frame: pd.DataFrame) -> Writer:
    return text_writer(frame.to_csv(index=False))


def figure_writers(stem: str, figure, title: str = "") -> dict[str, Writer]:
    """PNG and SVG writers of a figure, marked as invented data when the title says so."""
    from optimizer.explore.plots import mark_invented

    if "invented" in title.lower():
        mark_invented(figure)
    return {
        f"{stem}.png": figure_writer(figure, dpi=130),
        f"{stem}.svg": figure_writer(figure),
    }


def _frame(rows: list[dict]) -> pd.DataFrame:
    import pandas as pd

    return pd.DataFrame(rows)


def _csv_frame(text: str) -> pd.DataFrame:
    """A table the reports write as CSV text, read back value for value: numbers through
    ``float``/``int`` (exact for the repr the reports write), blanks as missing."""
    import csv
    import io

    import pandas as pd

    def value(cell: str) -> object:
        if cell == "":
            return None
        if cell in ("True", "False"):
            return cell == "True"
        for kind in (int, float):
            try:
                return kind(cell)
            except ValueError:
                continue
        return cell

    reader = csv.reader(io.StringIO(text))
    header = next(reader, None)
    if header is None:
        return pd.DataFrame()
    return pd.DataFrame([[value(c) for c in row] for row in reader], columns=header)


def _deadline(time_limit: float | None, deadline: float | None) -> float | None:
    """A `time.perf_counter` instant: ``time_limit`` from now, or an earlier ``deadline``."""
    if time_limit is None:
        return deadline
    limit = time.perf_counter() + time_limit
    return limit if deadline is None else min(deadline, limit)


def _left(deadline: float | None) -> float | None:
    return None if deadline is None else max(0.0, deadline - time.perf_counter())


class _RunFolder:
    """``files()`` (name -> writer) and ``write(results_dir)`` for a result object."""

    command = ""

    def files(self) -> dict[str, Writer]:  # pragma: no cover - every result defines it
        raise NotImplementedError

    @property
    def label(self) -> str:
        return self.problem_file.stem

    def write(self, results_dir: str | os.PathLike = "results") -> Path:
        """Write the command's run folder under ``results_dir`` in one atomic step (report
        included) and return its path; raises ProblemError if it cannot be written."""
        return write_run_folder(Path(results_dir), self.command, self.label, self.files())


# ---------------------------------------------------------------- evaluate
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


# ---------------------------------------------------------------- solve: options
REQUIRE_OPTIONS = {
    "--require-die-yield": ("min_die_yield", "a die yield above 0 and at most 1, e.g. 0.9"),
    "--require-sigma": ("min_sigma_margin", "a design margin above 0 sigma, e.g. 3"),
    "--require-defect-level": (
        "max_defect_level",
        "a defect level from 0 to below 1, e.g. 1e-4 (100 ppm)",
    ),
}

# solve options a family solve does not take: (option, why, the value that means "not given")
FAMILY_REFUSES = {
    "top": ("--top", "a family solve gives one design per product", 3),
    "mixes": ("--mixes", "process mixes are split for one product's architecture table", 1),
    "by_architecture": ("--by-architecture", "the ranked list is made for one product", False),
    "require_die_yield": ("--require-die-yield", "mandates are stated per product", None),
    "require_sigma": ("--require-sigma", "mandates are stated per product", None),
    "require_defect_level": ("--require-defect-level", "mandates are stated per product", None),
}


def check_method(method: str | None) -> None:
    """Raise the one-line error for a solve method that does not exist."""
    from optimizer.solver import METHODS

    if method is not None and method not in METHODS:
        raise ProblemError(
            "--method", short(method), f"unknown method; use one of {', '.join(METHODS)}"
        )


def requirement_options(die_yield=None, sigma=None, defect_level=None) -> dict[str, float]:
    """The mandates given as options, as [requirements] keys; each checked on its own."""
    from pydantic import ValidationError

    from optimizer.problem import Requirements

    chosen = {}
    given = zip(REQUIRE_OPTIONS.items(), (die_yield, sigma, defect_level), strict=True)
    for (option, (key, wanted)), value in given:
        if value is None:
            continue
        try:
            Requirements(**{key: value})
        except ValidationError:
            raise ProblemError(option, f"{value:g}", f"out of range; give {wanted}") from None
        chosen[key] = value
    return chosen


# solve options a life solve does not take: (option, why, default)
LIFE_REFUSES = {
    "top": ("--top", "a life solve gives the optimum and each architecture's best", 3),
    "method": ("--method", "the life is searched by its own bound and listing", None),
    "mixes": ("--mixes", "the life's decision table is by packaging and die count", 1),
    "by_architecture": ("--by-architecture", "the decision table lists every architecture", False),
    "require_die_yield": ("--require-die-yield", "mandates of a life are read from the file", None),
    "require_sigma": ("--require-sigma", "mandates of a life are read from the file", None),
    "require_defect_level": (
        "--require-defect-level",
        "mandates of a life are read from the file",
        None,
    ),
}


def life_refusal(name: str, source: str) -> ProblemError:
    """The error for a solve option a life plan's solve does not take."""
    option, why, _ = LIFE_REFUSES[name]
    if option.startswith("--require"):
        key = REQUIRE_OPTIONS[option][0]
        fix = f"drop it and state {key} in [requirements]: every period must then meet it"
    else:
        fix = "drop it"
    return ProblemError(option, "", f"does not apply to the life plan in {source} ({why}); {fix}")


def family_refusal(name: str, source: str) -> ProblemError:
    """The error for a single-product solve option given on a family file."""
    option, why, _ = FAMILY_REFUSES[name]
    if option.startswith("--require"):
        key = REQUIRE_OPTIONS[option][0]
        fix = f"drop it and state {key} in [product.requirements] of each product that must meet it"
    else:
        fix = "drop it, or write one product as its own problem file and solve that"
    return ProblemError(
        option, "", f"does not apply to the product family in {source} ({why}); {fix}"
    )


def _mandate(problem, options: dict[str, float]):
    """The file's [requirements] with the option mandates on top (None if none)."""
    from optimizer.problem import Requirements

    merged = Requirements(**{**problem.requirements.model_dump(), **options})
    return merged if merged.any() else None


# ---------------------------------------------------------------- solve: one product
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


def solve(
    problem_file,
    top: int = 3,
    method: str | None = None,
    time_limit: float | None = None,
    table_time: float = 20.0,
    mixes: int = 1,
    by_architecture: bool = False,
    require_die_yield: float | None = None,
    require_sigma: float | None = None,
    require_defect_level: float | None = None,
    *,
    deadline: float | None = None,
):
    """Find the most profitable design, proven (``dieplan solve``), with the same options.

    ``method`` None is ``"auto"`` for one product (a family's search picks its own);
    ``time_limit`` bounds the whole call in seconds (``deadline``: a `time.perf_counter`
    instant, for callers that started the clock earlier). Returns a :class:`SolveResult`;
    a family file gives a :class:`FamilySolveResult` and a life file a
    :class:`LifeSolveResult` (which take ``time_limit``, ``table_time`` and, for a
    family, ``method``). Raises ProblemError. Example::

        >>> result = solve(load("problems/edge_accelerator.toml"), table_time=2)
        >>> result.architectures[["architecture", "profit", "proven"]]  # doctest: +SKIP
    """
    deadline = _deadline(time_limit, deadline)
    check_method(method)
    given = requirement_options(require_die_yield, require_sigma, require_defect_level)
    pf = _as_file(problem_file)
    if pf.kind == "life":
        values = dict(
            top=top,
            method=method,
            mixes=mixes,
            by_architecture=by_architecture,
            require_die_yield=require_die_yield,
            require_sigma=require_sigma,
            require_defect_level=require_defect_level,
        )
        for name, value in values.items():
            if value != LIFE_REFUSES[name][2]:
                raise life_refusal(name, pf.source)
        return _solve_life(pf, deadline, time_limit, table_time)
    if pf.kind == "family":
        values = dict(
            top=top,
            mixes=mixes,
            by_architecture=by_architecture,
            require_die_yield=require_die_yield,
            require_sigma=require_sigma,
            require_defect_level=require_defect_level,
        )
        for name, value in values.items():
            if value != FAMILY_REFUSES[name][2]:
                raise family_refusal(name, pf.source)
        return _solve_family(pf, deadline, method, time_limit, table_time)
    return _solve_problem(
        pf, top, method or "auto", deadline, time_limit, table_time, mixes, by_architecture, given
    )


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


# ---------------------------------------------------------------- solve: family and life
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


# ---------------------------------------------------------------- exploration: shared
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


# ---------------------------------------------------------------- compare
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


# ---------------------------------------------------------------- sweep
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


# ---------------------------------------------------------------- sensitivity
@dataclass
class SensitivityOutcome(_RunFolder):
    """How the winner's objective moves with each input (``dieplan sensitivity``):
    ``table`` (sensitivity.csv, largest swing first), ``result`` (the library's),
    ``objective`` (None for families) and ``options``."""

    problem_file: ProblemFile
    result: Any
    objective: Any
    options: dict
    command = "sensitivity"

    @property
    def family(self) -> bool:
        return self.objective is None

    @property
    def table(self) -> pd.DataFrame:
        return self.result.table if self.family else named(self.result.table, self.objective.name)

    def to_dict(self) -> dict:
        """The ``dieplan sensitivity --json`` object, without ``run_folder``."""
        result = self.result
        if self.family:
            winner = {
                "kind": result.design.kind,
                "design": result.design.summary,
                "profit": result.base_profit,
                "objective": "family profit",
            }
        else:
            winner = {
                "kind": result.design.kind,
                "design": result.design.summary,
                self.objective.name: result.base_profit,
                "proven_optimal": result.held.proven,
                "gap": result.held.gap,
            }
        return {
            "command": "sensitivity",
            "options": self.options,
            "winner": winner,
            "sensitivity": records(self.table),
        }

    def files(self) -> dict[str, Writer]:
        from optimizer.explore.plots import tornado_figure

        pf, result = self.problem_file, self.result
        if self.family:
            from optimizer.family_report import family_dict

            held = clean(family_dict(result.solution, pf.title))
            figure = tornado_figure(result, pf.currency)
        else:
            held = result.held.record
            figure = tornado_figure(result, pf.currency, self.objective.words)
        return {
            "sensitivity.csv": csv_writer(self.table),
            "winner.json": json_writer(held),
            "options.json": json_writer(self.options),
            **figure_writers("tornado", figure, pf.title),
            "problem.toml": pf.problem_writer(),
        }


def _parse_range(text: str, make_range):
    path, sep, span = text.partition("=")
    low, sep2, high = span.partition(":")
    if not (sep and sep2 and path.strip() and low.strip() and high.strip()):
        raise ProblemError(
            "--range", short(text), "write PATH=LOW:HIGH, e.g. market.unit_price=1500:2300"
        )
    return make_range(path.strip(), low.strip(), high.strip())


def input_ranges(kind: str, ranges: Sequence[str] | None) -> list:
    """Extra sensitivity ranges, each ``PATH=LOW:HIGH``, checked (raises ProblemError)."""
    if kind == "family":
        from optimizer.explore.family import make_family_range

        return [_parse_range(text, make_family_range) for text in ranges or []]
    from optimizer.explore.sensitivity import make_range

    if kind == "life":
        from optimizer.explore.life_paths import resolve_life as resolver
    else:
        from optimizer.explore.paths import resolve as resolver
    return [
        _parse_range(text, lambda p, lo, hi: make_range(p, lo, hi, resolver=resolver))
        for text in ranges or []
    ]


def sensitivity(
    problem_file,
    ranges: Sequence[str] | None = None,
    time_limit: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    stage: Callable[[str, int], None] | None = None,
) -> SensitivityOutcome:
    """The winner held fixed, re-priced at both ends of each uncertain input and of each
    extra ``PATH=LOW:HIGH`` range (``dieplan sensitivity``). Raises ProblemError."""
    pf = _as_file(problem_file, exploring=True)
    extra = input_ranges(pf.kind, ranges)
    study = pf.study
    stage = stage or _no_stage
    if pf.kind == "family":
        from optimizer.explore.family import family_ranges, run_family_sensitivity

        all_ranges = family_ranges(study) + extra
        stage("re-pricing the family optimum", max(1, len(all_ranges)))
        result = run_family_sensitivity(study, all_ranges, time_limit=time_limit, progress=progress)
        options = {
            "problem": pf.source,
            "family": True,
            "ranges": list(ranges or []),
            "time_limit": time_limit,
        }
        return SensitivityOutcome(pf, result, None, options)
    from optimizer.explore.objective import objective_of
    from optimizer.explore.sensitivity import ranges_from_study, run_sensitivity

    objective = objective_of(study)
    all_ranges = ranges_from_study(study) + extra
    stage("re-pricing the winner", max(1, len(all_ranges)))
    result = run_sensitivity(study, all_ranges, time_limit=time_limit, progress=progress)
    options = {
        "problem": pf.source,
        "ranges": list(ranges or []),
        "time_limit": time_limit,
        "objective": objective.words,
    }
    return SensitivityOutcome(pf, result, objective, options)


# ---------------------------------------------------------------- uncertainty
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


__all__ = [
    "KINDS",
    "CompareResult",
    "Evaluation",
    "FamilyEvaluation",
    "FamilySolveResult",
    "LifeEvaluation",
    "LifeSolveResult",
    "ProblemError",
    "ProblemFile",
    "SensitivityOutcome",
    "SolveResult",
    "SweepOutcome",
    "UncertaintyOutcome",
    "compare",
    "evaluate",
    "load",
    "sensitivity",
    "solve",
    "sweep",
    "uncertainty",
]
