"""Paths to numeric inputs of a problem file, and problems with some of them changed.

A path names one number of the problem file by its TOML keys, with list items picked by
name::

    market.volume                        market.unit_price
    process.leading.defect_density       process.leading.wafer_cost
    process.leading.area_scale.logic     packaging.interposer.bond_yield
    block.compute_cluster.area           block.cache_slice.repair.repairable_fraction
    design_cost.per_die_design           link.compute_cluster:cache_slice.bandwidth
    market.salvage_bin.NAME.unit_price   constraints.max_dies

Items of a list without names (links) are picked by position from 0 (``link.0``) or, for
links, by their two block names joined with a colon in either order.

Values are numbers in the field's base unit: mm, mm^2, defects per cm^2, GB/s and
GB/s per mm^2 (see ``optimizer/units.py``); money and plain numbers as in the file. A
changed value is written back into a copy of the decoded TOML document, with its unit
for quantity fields (``"0.15 /cm^2"``), and the whole problem is validated again, so a
changed input obeys every rule a hand-edited file would. Integer fields (counts, die
limits) take whole numbers only.

The grammar is derived from the schema classes in ``optimizer/problem.py``, so fields
added there are addressable without a change here.
"""

from __future__ import annotations

import copy
import math
import types
import typing
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from pydantic import BaseModel, ValidationError

from optimizer.problem import (
    Problem,
    ProblemError,
    _first_error,
    check_feasible,
    parse_problem,
    read_problem_data,
)
from optimizer.units import (
    AREA,
    BANDWIDTH,
    DEFECT_DENSITY,
    INTERFACE_DENSITY,
    LENGTH,
    QuantityKind,
    UnitError,
    to_base,
)

# Attribute-name suffix -> quantity kind and the unit written back to the file. The
# schema's glossary rule (file key + unit suffix = attribute name) makes this exhaustive;
# longer suffixes first so "_gbps_per_mm2" is not read as "_mm2".
_UNIT_SUFFIXES: tuple[tuple[str, QuantityKind, str], ...] = (
    ("_gbps_per_mm2", INTERFACE_DENSITY, "GB/s/mm^2"),
    ("_per_cm2", DEFECT_DENSITY, "/cm^2"),
    ("_mm2", AREA, "mm^2"),
    ("_mm", LENGTH, "mm"),
    ("_gbps", BANDWIDTH, "GB/s"),
)

# Sections that hold no inputs to explore.
_CLOSED_SECTIONS = {
    "design": "explicit designs are not explored; vary the inputs they use instead",
    "uncertain": "the [[uncertain]] entries describe inputs; they are not inputs themselves",
}


class PathError(ValueError):
    """A path that names no numeric field of the schema (message says what to do)."""


@dataclass(frozen=True)
class Step:
    """One key of a path: a table, a list of tables (with the item picked) or the number."""

    key: str  # key in the file (the alias when the schema has one)
    attribute: str  # attribute on the validated model
    item: str | None = None  # selector of the list item, for lists of tables
    optional: bool = False  # a table absent unless written in the file
    named: bool = False  # items carry a ``name`` field
    pair: bool = False  # items are picked by a pair of block names (links)


@dataclass(frozen=True)
class FieldPath:
    """A resolved path: the keys to follow and what kind of number sits at the end."""

    text: str
    steps: tuple[Step, ...]
    unit: QuantityKind | None
    unit_text: str
    integer: bool

    @property
    def label(self) -> str:
        """The path with its unit, for table columns and plot axes."""
        return f"{self.text} [{self.unit_text}]" if self.unit_text else self.text

    @property
    def market_scalar(self) -> bool:
        """A number directly in [market] (price, volume): candidate dies do not depend on it."""
        return len(self.steps) == 2 and self.steps[0].key == "market" and self.steps[1].item is None

    def encode(self, value: float) -> object:
        """The value as the file writes it: with its unit, as an integer, or a float."""
        return encode_number(self, value)


def encode_number(path, value: float) -> object:
    """``value`` as the file writes the number ``path`` names (a path with ``integer``,
    ``unit`` and ``unit_text``): with its unit, as an integer, or a float."""
    value = float(value)
    if not math.isfinite(value):
        raise PathError(f"{value} is not a finite number; use a finite value")
    if path.integer:
        whole = round(value)
        if abs(value - whole) > 1e-9 * max(1.0, abs(value)):
            raise PathError(f"takes whole numbers only (got {value:g}); use an integer")
        return int(whole)
    if path.unit is not None:
        # said before the schema's range check: a negative draw is the usual slip
        if value < 0:
            raise PathError(f"a {path.unit.name} cannot be negative (got {value:g})")
        return f"{value!r} {path.unit_text}"
    return value


def _unwrap(annotation: object) -> tuple[object, bool]:
    """Strip Annotated and ``| None``: (inner type, whether None is allowed)."""
    optional = False
    while True:
        origin = typing.get_origin(annotation)
        if origin is typing.Annotated:
            annotation = typing.get_args(annotation)[0]
        elif origin in (typing.Union, types.UnionType):
            args = [a for a in typing.get_args(annotation) if a is not type(None)]
            optional = optional or len(args) < len(typing.get_args(annotation))
            if len(args) != 1:
                return annotation, optional
            annotation = args[0]
        else:
            return annotation, optional


def _leads_to_number(info: object) -> bool:
    """Whether a field is a number, a table or a list of tables (worth suggesting)."""
    inner, _ = _unwrap(info.annotation)
    if typing.get_origin(inner) is list:
        inner, _ = _unwrap(typing.get_args(inner)[0])
    return inner in (int, float) or _is_model(inner)


def _is_model(annotation: object) -> bool:
    return isinstance(annotation, type) and issubclass(annotation, BaseModel)


def _field(model: type[BaseModel], key: str, where: str) -> tuple[str, object]:
    """Attribute name and field info for a file key (or attribute name) of ``model``."""
    fields = model.model_fields
    for name, info in fields.items():
        if key in (info.alias, name):
            return name, info
    known = sorted(
        info.alias or name
        for name, info in fields.items()
        if _leads_to_number(info) and (info.alias or name) not in _CLOSED_SECTIONS
    )
    raise PathError(f"'{key}' is not a field of {where}; use one of {known}")


def _kind_of(attribute: str) -> tuple[QuantityKind | None, str]:
    if attribute.startswith("per_"):
        return None, ""  # money per unit of something (per_mm2): a plain number
    for suffix, kind, text in _UNIT_SUFFIXES:
        if attribute.endswith(suffix):
            return kind, text
    return None, ""


def parse_path(text: str) -> FieldPath:
    """Resolve ``text`` against the schema (item names are checked later, on a problem).

    Raises
    ------
    PathError
        When a key is unknown, a list item is not named, or the field is not a number.
    """
    if not isinstance(text, str) or not text.strip():
        raise PathError("is empty; write a path such as market.volume")
    parts = text.strip().split(".")
    if any(not part for part in parts):
        raise PathError("has an empty key (two dots in a row, or a dot at an end); remove it")
    model: type[BaseModel] = Problem
    where = "the problem file"
    steps: list[Step] = []
    i = 0
    while i < len(parts):
        key = parts[i]
        if not steps and key in _CLOSED_SECTIONS:
            raise PathError(_CLOSED_SECTIONS[key])
        attribute, info = _field(model, key, where)
        file_key = info.alias or attribute
        inner, optional = _unwrap(info.annotation)
        if _is_model(inner):
            steps.append(Step(file_key, attribute, optional=optional))
            model, where = inner, f"[{'.'.join(parts[: i + 1])}]"
            i += 1
            continue
        if typing.get_origin(inner) is list:
            element, _ = _unwrap(typing.get_args(inner)[0])
            if not _is_model(element):
                raise PathError(
                    f"'{key}' is a list of values, not one number; vary a single number"
                )
            if i + 1 >= len(parts):
                raise PathError(
                    f"'{key}' is a list; name the item next, e.g. {'.'.join(parts)}.NAME.FIELD"
                )
            named = "name" in element.model_fields
            pair = not named and "blocks" in element.model_fields
            steps.append(Step(file_key, attribute, item=parts[i + 1], named=named, pair=pair))
            model, where = element, f"[[{'.'.join(parts[: i + 1])}]]"
            i += 2
            continue
        if inner in (int, float):
            if i != len(parts) - 1:
                raise PathError(f"'{key}' is a number; nothing can follow it in the path")
            steps.append(Step(file_key, attribute))
            unit, unit_text = _kind_of(attribute)
            canonical = ".".join(
                f"{s.key}.{s.item}" if s.item is not None else s.key for s in steps
            )
            return FieldPath(canonical, tuple(steps), unit, unit_text, inner is int)
        raise PathError(
            f"'{key}' is not a number (it is {_describe_type(inner)}); only numeric fields "
            "can be varied"
        )
    raise PathError(
        f"ends at the table {where}; add one of its fields, e.g. "
        f"{text.strip()}.{next(iter(_numeric_fields(model)), 'FIELD')}"
    )


def _numeric_fields(model: type[BaseModel]) -> list[str]:
    out = []
    for name, info in model.model_fields.items():
        inner, _ = _unwrap(info.annotation)
        if inner in (int, float):
            out.append(info.alias or name)
    return out


def _describe_type(annotation: object) -> str:
    if annotation is str:
        return "text"
    if annotation is bool:
        return "true or false"
    if typing.get_origin(annotation) is typing.Literal:
        return f"a choice among {list(typing.get_args(annotation))}"
    if typing.get_origin(annotation) in (list, tuple, dict):
        return "a list or table of values"
    return "not a plain number"


def resolve(text: str, where: str) -> FieldPath:
    """:func:`parse_path` raising ProblemError(where, path, message) for the CLI."""
    try:
        return parse_path(text)
    except PathError as exc:
        raise ProblemError(where, str(text), str(exc)) from None


# ---------------------------------------------------------------- items in data and models
def _pick(items: object, step: Step, container: str) -> int:
    """Index of the item ``step.item`` in a list of tables (dicts or models)."""
    if not isinstance(items, list):
        raise PathError(f"the file has no [[{container}]] entries; add them first")

    def get(item: object, name: str) -> object:
        return item.get(name) if isinstance(item, dict) else getattr(item, name, None)

    if step.named:
        names = [get(item, "name") for item in items]
        if step.item in names:
            return names.index(step.item)
        raise PathError(f"no {container} named '{step.item}'; use one of {names}")
    if step.item.isdigit() and int(step.item) < len(items):
        return int(step.item)
    if step.pair and ":" in step.item:
        wanted = sorted(step.item.split(":", 1))
        for index, item in enumerate(items):
            if sorted(get(item, "blocks") or []) == wanted:
                return index
        raise PathError(f"no {container} joins blocks {wanted}; check the two names")
    raise PathError(
        f"no {container} item '{step.item}'; pick one by position 0 to {len(items) - 1}"
        + (" or by its two block names, a:b" if step.pair else "")
    )


def apply_values(data: dict, assignments: Sequence[tuple[FieldPath, float]]) -> dict:
    """A deep copy of the decoded TOML ``data`` with each path set to its value.

    Raises
    ------
    PathError
        When an item does not exist, an optional table is absent, or a value does not
        suit the field (not whole for an integer field, not finite).
    """
    out = copy.deepcopy(data)
    for path, value in assignments:
        node: dict = out
        trail = []
        for step in path.steps[:-1]:
            trail.append(step.key)
            if step.item is not None:
                items = node.get(step.key)
                node = items[_pick(items, step, ".".join(trail))]
                trail.append(step.item)
                continue
            sub = node.get(step.key)
            if sub is None:
                if step.optional:
                    raise PathError(
                        f"the file has no [{'.'.join(trail)}] table; add one before varying it"
                    )
                sub = node[step.key] = {}
            node = sub
        node[path.steps[-1].key] = path.encode(value)
    return out


def problem_with(
    data: dict, assignments: Sequence[tuple[FieldPath, float]], source: str
) -> Problem:
    """Validate ``data`` with the assignments applied (raises ProblemError)."""
    try:
        changed = apply_values(data, assignments)
    except PathError as exc:
        field = ", ".join(p.text for p, _ in assignments)
        raise ProblemError(source, field, str(exc)) from None
    return parse_problem(changed, source)


def read_value(problem: Problem, path: FieldPath) -> float | None:
    """The value at ``path`` in a validated problem, in base units (None if unset).

    Raises
    ------
    PathError
        When a named item does not exist.
    """
    node: object = problem
    trail: list[str] = []
    for step in path.steps:
        trail.append(step.key)
        node = getattr(node, step.attribute)
        if step.item is not None:
            node = node[_pick(node, step, ".".join(trail))]
            trail.append(step.item)
        if node is None:
            if step is path.steps[-1]:
                return None
            raise PathError(f"the file has no [{'.'.join(trail)}] table; add one first")
    return float(node)


def parse_value(path: FieldPath, text: object) -> float:
    """A value typed by a user: a plain number in base units, or a quantity with its unit.

    Raises
    ------
    PathError
        When the text is neither.
    """
    if isinstance(text, bool):
        raise PathError(f"expected a number, got {text!r}")
    if isinstance(text, int | float):
        value = float(text)
    else:
        raw = str(text).strip()
        try:
            value = float(raw)
        except ValueError:
            if path.unit is None:
                raise PathError(f"cannot read {raw!r} as a number; write a plain number") from None
            try:
                value = to_base(raw, path.unit)
            except UnitError as exc:
                raise PathError(str(exc)) from None
    if not math.isfinite(value):
        raise PathError(f"{text!r} is not a finite number; use a finite value")
    return value


def read_uncertain_entries(entries: object, source: str, parse, check) -> tuple[list, list]:
    """Validate the top-level ``[[uncertain]]`` entries of a family or life file.

    ``parse(text)`` reads an entry's path (raising PathError); ``check(entry, path)``
    validates the entry against the number its path names (raising ValueError, a
    pydantic ValidationError among them). Each input keeps its own path text. Names
    are checked later, against the file.
    """
    if entries is None:
        return [], []
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
        raise ProblemError(source, "uncertain", "must be a list of [[uncertain]] tables")
    inputs, paths = [], []
    for i, entry in enumerate(entries):
        where = f"uncertain[{i}]"
        try:
            path = parse(entry.get("path"))
        except PathError as exc:
            raise ProblemError(source, f"{where}.path", str(exc)) from None
        try:
            checked = check(entry, path)
        except ValueError as exc:
            if isinstance(exc, ValidationError):
                field, message = _first_error(exc, entry)
            else:
                field, message = "", str(exc)
            raise ProblemError(source, f"{where}.{field}" if field else where, message) from None
        inputs.append(checked.model_copy(update={"path": path.text}))
        paths.append(path)
    return inputs, paths


def check_uncertain(problem: Problem, source: str) -> list[FieldPath]:
    """Resolve every ``[[uncertain]]`` path on this problem's items (names must exist).

    The schema already checked each path's keys; this checks the item names and that no
    input is listed twice. Raises ProblemError naming ``uncertain[i].path``.
    """
    paths: list[FieldPath] = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(problem.uncertain):
        field = f"uncertain[{i}].path"
        try:
            path = parse_path(entry.path)
            read_value(problem, path)
        except PathError as exc:
            raise ProblemError(source, field, str(exc)) from None
        if path.text in seen:
            raise ProblemError(
                source,
                field,
                f"'{path.text}' is already described by uncertain[{seen[path.text]}]; "
                "keep one entry per input",
            )
        seen[path.text] = i
        paths.append(path)
    return paths


# ---------------------------------------------------------------- a loaded study
@dataclass(frozen=True)
class Study:
    """A problem file as decoded TOML and as a validated problem, for exploration."""

    source: str
    data: dict
    problem: Problem
    uncertain_paths: tuple[FieldPath, ...]

    @property
    def uncertain(self) -> list:
        """The file's [[uncertain]] inputs (as a life study names them too)."""
        return self.problem.uncertain


def study_from_data(data: dict, source: str = "<problem>") -> Study:
    """Validate decoded TOML (and its [[uncertain]] paths) into a :class:`Study`."""
    problem = parse_problem(data, source)
    return Study(source, data, problem, tuple(check_uncertain(problem, source)))


def load_study(path: str | Path):
    """Read a problem file for exploration (raises ProblemError with file, field, fix).

    The file as written must admit a design; scenarios derived from it need not (for them
    "no feasible design" is a finding), so only the file gets ``check_feasible``. A file
    with a [life] plan gives a :class:`optimizer.explore.life_paths.LifeStudy`, explored
    with its net present value as the objective.
    """
    data, source = read_problem_data(path)
    if isinstance(data, dict) and "life" in data:
        from optimizer.explore.life_paths import life_study_from_data

        study = life_study_from_data(data, source)
    else:
        study = study_from_data(data, source)
    check_feasible(study.problem, source)
    return study
