"""Paths into a file's ``[life]`` plan, and life plans with some numbers changed.

A problem file with a ``[life]`` table (see ``optimizer/life.py``) is explored with its
net present value as the objective. Besides the ordinary paths (``process.fine.wafer_cost``,
``block.core.area``: the file's values at the start of the life), the plan's own numbers
are named under ``life``::

    life.discount_rate                              per year, 0 to 1
    life.one_time_period                            a whole period number, from 1
    life.volumes.K                                  the volume of period K (from 0)
    life.market.unit_price.PARAMETER
    life.process.NAME.FIELD.PARAMETER               FIELD: defect_density, wafer_cost
    life.packaging.NAME.FIELD.PARAMETER             FIELD: bond_cost_per_die, carrier_cost,
                                                    package_cost, final_test_cost

PARAMETER is a number of the field's curve: ``per_year`` (erosion), ``mature`` and
``time_constant`` (learn_by_time; a time, base unit year), ``mature``, ``wafer_scale``
and ``started_before`` (learn_by_wafers), or one entry of a list, ``values.K`` (one value
per period, also for a curve written as a bare list) and ``wafer_starts.K``. The
curve's form must take the parameter: a ``learn_by_time`` density has no ``per_year``.

``market.volume`` is refused on a life file: the periods take their volumes from
``life.volumes``, so the number would change nothing.

A changed value is written into a copy of the decoded document and the whole file,
plan included, is read again by :func:`optimizer.life.life_plan`, so a changed plan obeys
every rule of a hand-edited one. ``[[uncertain]]`` entries of a life file may name either
kind of path; they are checked here, with the plan's units.
"""

from __future__ import annotations

import copy
from collections.abc import Sequence
from dataclasses import dataclass

from optimizer.explore.paths import (
    FieldPath,
    PathError,
    Step,
    apply_values,
    encode_number,
    parse_path,
    read_uncertain_entries,
    read_value,
)
from optimizer.life import FORM_KEYS, SPECS, TIME, LifePlan, life_plan
from optimizer.problem import (
    _DISTRIBUTION_PARAMETERS,
    Problem,
    ProblemError,
    UncertainInput,
)
from optimizer.units import DEFECT_DENSITY, QuantityKind, UnitError, to_base

# numbers of a curve that stand alone, and those that are lists (picked by position)
_SCALAR_PARAMETERS = ("per_year", "mature", "time_constant", "wafer_scale", "started_before")
_LIST_PARAMETERS = ("values", "wafer_starts")
_TEXT_KEYS = {
    "period": "text ('year' or 'quarter')",
    "read_curves_at": "text ('start', 'middle' or 'end')",
}
_LIFE_NUMBERS = ("discount_rate", "one_time_period", "volumes.K", "market", "process", "packaging")
# a stand-in of the same kind of number, to check an [[uncertain]] entry on a life path
# with the ordinary schema (its units are converted here first)
_PLAIN_STAND_IN = "market.unit_price"
_WHOLE_STAND_IN = "constraints.max_dies"


@dataclass(frozen=True)
class LifePath:
    """A resolved path into the ``[life]`` table.

    ``keys`` lead from ``data["life"]`` to the number (list positions as ints, except
    that the curve's own position is ``curve``); ``track`` is (section, item, field)
    for a curve parameter, as :class:`optimizer.life.Track` names it.
    """

    text: str
    keys: tuple[str | int, ...]
    unit: QuantityKind | None
    unit_text: str
    integer: bool
    track: tuple[str, str | None, str] | None = None
    parameter: str | None = None
    position: int | None = None  # of ``values`` / ``wafer_starts`` / ``volumes``

    @property
    def steps(self) -> tuple[Step, ...]:
        """Keys for axis labels: the curve's owner as the item, its field and parameter."""
        if self.track is None:
            last = self.keys[0] if self.position is None else f"{self.keys[0]}[{self.position}]"
            return (Step("life", "life"), Step(str(last), str(last)))
        section, item, field = self.track
        tail = self.parameter if self.position is None else f"{self.parameter}[{self.position}]"
        return (
            Step("life", "life"),
            Step(section, section, item=item),
            Step(f"{field}_{tail}", f"{field}_{tail}"),
        )

    @property
    def label(self) -> str:
        return f"{self.text} [{self.unit_text}]" if self.unit_text else self.text

    @property
    def market_scalar(self) -> bool:
        # the single-period shortcuts (shared candidate dies, the envelope) do not apply
        return False

    def encode(self, value: float) -> object:
        """The value as the file writes it: with its unit, as an integer, or a float."""
        return encode_number(self, value)


AnyPath = FieldPath | LifePath


def _index(text: str, what: str) -> int:
    if not text.isdigit():
        raise PathError(f"'{text}' is not a position in {what}; pick one by number from 0")
    return int(text)


def _field_unit(section: str, field: str) -> tuple[QuantityKind | None, str]:
    unit = SPECS[section][field].unit
    return (DEFECT_DENSITY, unit) if unit else (None, "")


def parse_life_path(text: str) -> LifePath:
    """Resolve a ``life.*`` path (item names and curve forms are checked on the file).

    Raises
    ------
    PathError
        When the path names no number of a life plan, or names text or a whole curve.
    """
    parts = text.strip().split(".")
    if any(not part for part in parts):
        raise PathError("has an empty key (two dots in a row, or a dot at an end); remove it")
    if parts[0] != "life":
        raise PathError("is not a path into [life]; life paths start with life.")
    if len(parts) == 1:
        raise PathError(
            f"ends at the [life] table; add one of its numbers: {', '.join(_LIFE_NUMBERS)}"
        )
    key, rest = parts[1], parts[2:]
    canonical = ".".join(parts)
    if key in _TEXT_KEYS:
        raise PathError(
            f"'{key}' is {_TEXT_KEYS[key]}, not a number; only numeric fields can be varied"
        )
    if key in ("discount_rate", "one_time_period"):
        if rest:
            raise PathError(f"'{key}' is a number; nothing can follow it in the path")
        return LifePath(canonical, (key,), None, "", key == "one_time_period")
    if key == "volumes":
        if len(rest) != 1:
            raise PathError("name one period's volume by position from 0, e.g. life.volumes.0")
        k = _index(rest[0], "life.volumes")
        return LifePath(canonical, ("volumes", k), None, "", False, position=k)
    if key not in SPECS:
        raise PathError(f"'{key}' is not a number of [life]; use one of {list(_LIFE_NUMBERS)}")
    if key == "market":
        item, rest = None, rest
    else:
        if not rest:
            raise PathError(f"name the {key} next, e.g. life.{key}.NAME.FIELD.PARAMETER")
        item, rest = rest[0], rest[1:]
    where = f"life.{key}" + (f".{item}" if item else "")
    if not rest:
        raise PathError(f"name a field next, one of {list(SPECS[key])}, e.g. {where}.FIELD")
    field, rest = rest[0], rest[1:]
    if field not in SPECS[key]:
        raise PathError(f"'{field}' cannot vary over the life; use one of {list(SPECS[key])}")
    curve = f"{where}.{field}"
    if not rest:
        raise PathError(
            f"{curve} is a curve, not one number; add one of its numbers, e.g. "
            f"{curve}.per_year or {curve}.values.0"
        )
    parameter, rest = rest[0], rest[1:]
    track = (key, item, field)
    keys: tuple = (key,) if item is None else (key, item)
    keys = (*keys, field, parameter)
    if parameter == "form":
        raise PathError("'form' is text (the curve's form), not a number; vary a number of it")
    if parameter in _LIST_PARAMETERS:
        if len(rest) != 1:
            raise PathError(
                f"name one entry of {parameter} by position, e.g. {curve}.{parameter}.0"
            )
        k = _index(rest[0], f"{curve}.{parameter}")
        unit, unit_text = _field_unit(key, field) if parameter == "values" else (None, "")
        return LifePath(canonical, (*keys, k), unit, unit_text, False, track, parameter, k)
    if parameter not in _SCALAR_PARAMETERS:
        raise PathError(
            f"'{parameter}' is not a number of a life curve; use one of "
            f"{[*_SCALAR_PARAMETERS, *(p + '.K' for p in _LIST_PARAMETERS)]}"
        )
    if rest:
        raise PathError(f"'{parameter}' is a number; nothing can follow it in the path")
    if parameter == "time_constant":
        unit, unit_text = TIME, TIME.base_text
    elif parameter == "mature":
        unit, unit_text = _field_unit(key, field)
    else:
        unit, unit_text = None, ""
    return LifePath(canonical, keys, unit, unit_text, False, track, parameter)


def parse_life_file_path(text: str) -> AnyPath:
    """A path of a life file: a ``life.*`` path or an ordinary one (not market.volume)."""
    if not isinstance(text, str) or not text.strip():
        raise PathError("is empty; write a path such as life.discount_rate")
    if text.strip().split(".")[0] == "life":
        return parse_life_path(text)
    path = parse_path(text)
    if path.text == "market.volume":
        raise PathError(
            "a life plan takes each period's volume from life.volumes, so market.volume "
            "changes nothing; vary life.volumes.K (K from 0) instead"
        )
    return path


def resolve_life(text: str, where: str) -> AnyPath:
    """:func:`parse_life_file_path` raising ProblemError(where, path, message)."""
    try:
        return parse_life_file_path(text)
    except PathError as exc:
        raise ProblemError(where, str(text), str(exc)) from None


# ---------------------------------------------------------------- the document
def _curve_node(life: dict, path: LifePath) -> tuple[dict, str]:
    """The table holding the curve of ``path`` and the curve's key in it."""
    section, item, field = path.track
    table = life.get(section)
    name = f"[life.{section}" + (f".{item}]" if item else "]")
    if not isinstance(table, dict):
        raise PathError(f"the file has no {name} table; add the curve before varying it")
    if item is not None:
        table = table.get(item)
        if not isinstance(table, dict):
            raise PathError(f"the file has no {name} table; add the curve before varying it")
    if field not in table:
        raise PathError(f"the file's {name} has no {field} curve; add one before varying it")
    return table, field


def _checked_position(items: object, k: int, where: str) -> None:
    if not isinstance(items, list):
        raise PathError(f"{where} is not a list in the file; write one value per period")
    if k >= len(items):
        raise PathError(f"{where} has {len(items)} entries; pick one from 0 to {len(items) - 1}")


def _set_life(life: dict, path: LifePath, value: float) -> None:
    """Write ``value`` at ``path`` into the decoded [life] table (in place)."""
    key = path.keys[0]
    if path.track is None:
        if key == "volumes":
            _checked_position(life.get("volumes"), path.position, "life.volumes")
            life["volumes"][path.position] = path.encode(value)
        else:
            life[key] = path.encode(value)
        return
    table, field = _curve_node(life, path)
    curve = table[field]
    where = path.text.rsplit(f".{path.parameter}", 1)[0]
    if isinstance(curve, list):  # a bare list is a per_period curve
        if path.parameter != "values":
            raise PathError(
                f"{where} is a list of one value per period; vary {where}.values.K instead"
            )
        _checked_position(curve, path.position, where)
        curve[path.position] = path.encode(value)
        return
    if not isinstance(curve, dict):
        raise PathError(f"{where} is neither a list nor a curve table in the file; fix it first")
    form = curve.get("form")
    required, optional = FORM_KEYS.get(form, ((), ()))
    if path.parameter not in required + optional:
        raise PathError(
            f"{where} is {'an' if str(form)[:1] in 'aeiou' else 'a'} '{form}' curve, which "
            f"takes {', '.join(required + optional)}; "
            "vary one of those"
        )
    if path.position is None:
        curve[path.parameter] = path.encode(value)
        return
    _checked_position(curve.get(path.parameter), path.position, f"{where}.{path.parameter}")
    curve[path.parameter][path.position] = path.encode(value)


def apply_life_values(data: dict, assignments: Sequence[tuple[AnyPath, float]]) -> dict:
    """A deep copy of the decoded life file with each path set to its value.

    Raises
    ------
    PathError
        When an item, curve or list entry does not exist, the curve's form does not take
        the parameter, or a value does not suit the field.
    """
    out = copy.deepcopy(data)
    for path, value in assignments:
        if isinstance(path, LifePath):
            life = out.get("life")
            if not isinstance(life, dict):
                raise PathError("the file has no [life] table; add one before varying it")
            _set_life(life, path, value)
        else:
            out = apply_values(out, [(path, value)])
    return out


def plan_with(data: dict, assignments: Sequence[tuple[AnyPath, float]], source: str) -> LifePlan:
    """The life plan of ``data`` with the assignments applied, the whole file validated
    again (raises ProblemError)."""
    try:
        changed = apply_life_values(data, assignments)
    except PathError as exc:
        field = ", ".join(p.text for p, _ in assignments)
        raise ProblemError(source, field, str(exc)) from None
    return life_plan(changed, source)


def read_life_value(plan: LifePlan, data: dict, path: AnyPath) -> float | None:
    """The value at ``path`` in base units (None if an ordinary field is unset).

    Raises
    ------
    PathError
        When the path names nothing in this file.
    """
    if not isinstance(path, LifePath):
        return read_value(plan.base, path)
    # writing the same number back checks the path against the file (items, form)
    apply_life_values(data, [(path, 1.0)])
    key = path.keys[0]
    if path.track is None:
        if key == "volumes":
            return float(plan.volumes[path.position])
        return float(getattr(plan, key))
    section, item, field = path.track
    curve = plan.track(f"{section}.{item + '.' if item else ''}{field}").curve
    attribute = {"time_constant": "time_constant_years"}.get(path.parameter, path.parameter)
    value = getattr(curve, attribute)
    return float(value if path.position is None else value[path.position])


# ---------------------------------------------------------------- a loaded life file
@dataclass(frozen=True)
class LifeStudy:
    """A life file for exploration: the decoded document (without its [[uncertain]]
    entries, which the ordinary schema cannot check on life paths), its plan, and the
    uncertain inputs."""

    source: str
    data: dict
    plan: LifePlan
    uncertain: tuple[UncertainInput, ...]
    uncertain_paths: tuple[AnyPath, ...]

    @property
    def problem(self) -> Problem:
        """The file's ordinary values: those at the start of the life."""
        return self.plan.base


def _entry_in_base_units(entry: dict, path: LifePath) -> dict:
    """An [[uncertain]] entry on a life path with its quantities in the path's base unit."""
    if path.unit is None:
        return entry
    out = dict(entry)
    for key in _DISTRIBUTION_PARAMETERS:
        if key != "sigma_log" and isinstance(out.get(key), str):
            try:
                out[key] = to_base(out[key], path.unit)
            except UnitError as exc:
                raise ValueError(f"{key}: {exc}") from None
    return out


def life_uncertain(entries: object, source: str) -> tuple[list[UncertainInput], list[AnyPath]]:
    """Validate the ``[[uncertain]]`` entries of a life file (names checked later)."""

    def check(entry: dict, path: AnyPath) -> UncertainInput:
        if not isinstance(path, LifePath):
            return UncertainInput.model_validate(entry)
        stand_in = _WHOLE_STAND_IN if path.integer else _PLAIN_STAND_IN
        return UncertainInput.model_validate(
            {**_entry_in_base_units(entry, path), "path": stand_in}
        )

    return read_uncertain_entries(entries, source, parse_life_file_path, check)


def life_study_from_data(data: dict, source: str = "<problem>") -> LifeStudy:
    """Validate a decoded life file (plan, and [[uncertain]] paths on this file)."""
    core = {k: v for k, v in data.items() if k != "uncertain"}
    plan = life_plan(core, source)
    inputs, paths = life_uncertain(data.get("uncertain"), source)
    seen: dict[str, int] = {}
    for i, path in enumerate(paths):
        try:
            read_life_value(plan, core, path)
        except PathError as exc:
            raise ProblemError(source, f"uncertain[{i}].path", str(exc)) from None
        if path.text in seen:
            raise ProblemError(
                source,
                f"uncertain[{i}].path",
                f"'{path.text}' is already described by uncertain[{seen[path.text]}]; "
                "keep one entry per input",
            )
        seen[path.text] = i
    return LifeStudy(source, core, plan, tuple(inputs), tuple(paths))


__all__ = [
    "AnyPath",
    "LifePath",
    "LifeStudy",
    "apply_life_values",
    "life_study_from_data",
    "life_uncertain",
    "parse_life_file_path",
    "parse_life_path",
    "plan_with",
    "read_life_value",
    "resolve_life",
]
