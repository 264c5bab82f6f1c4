"""Paths to the numbers of a product-family file, and families with some of them changed.

A family file holds shared tables and two or more ``[[product]]`` tables (see
``optimizer/family.py``). Its shared numbers are named as in a problem file
(``process.fine.defect_density``, ``block.compute_tile.area``, ``link.0.bandwidth``);
a product's own numbers under the product's name::

    product.NAME.market.volume               product.NAME.market.unit_price
    product.NAME.market.salvage_bin.BIN.unit_price
    product.NAME.requirements.min_die_yield
    product.NAME.blocks.BLOCK                (instances of a block, a whole number)
    product.NAME.max_dies                    (the product's own die limit)

A changed value is written into a copy of the decoded family document and the whole
family is validated again, as for a single-product file. ``[[uncertain]]`` entries of a
family sit at the top level of the file and use these paths.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from optimizer.explore.paths import (
    FieldPath,
    PathError,
    Step,
    apply_values,
    parse_path,
    parse_value,
    read_uncertain_entries,
    read_value,
)
from optimizer.family import Family, family_from_data
from optimizer.problem import (
    Problem,
    ProblemError,
    UncertainInput,
    parse_problem,
    read_problem_data,
)

# a product's own numbers, besides the tables it states like a problem file does
_PRODUCT_TABLES = ("market", "requirements")
_PRODUCT_KEYS_TEXT = "market.FIELD, requirements.FIELD, blocks.BLOCK or max_dies"
# stand-in path with the same kind of number (whole, no unit) when an [[uncertain]] entry
# on a block count or die limit is checked by the single-product schema
_WHOLE_STAND_IN = "constraints.max_dies"


@dataclass(frozen=True)
class FamilyPath:
    """A resolved family path: a shared number, or one of a product's own numbers.

    ``inner`` is the single-product path of the number (shared, or inside the product's
    market/requirements); ``special`` is ``"blocks"`` or ``"max_dies"`` for the keys a
    product has and a problem file has not.
    """

    text: str
    product: str | None
    inner: FieldPath | None
    special: str | None = None
    block: str | None = None

    @property
    def steps(self) -> tuple[Step, ...]:
        """Keys to the number, the product first (what figure labels are made of)."""
        own = () if self.product is None else (Step("product", "product", item=self.product),)
        if self.inner is not None:
            return own + self.inner.steps
        last = self.block if self.special == "blocks" else "max_dies"
        return (*own, Step(last, last))

    @property
    def unit(self):
        return self.inner.unit if self.inner is not None else None

    @property
    def unit_text(self) -> str:
        return self.inner.unit_text if self.inner is not None else ""

    @property
    def integer(self) -> bool:
        return True if self.inner is None else self.inner.integer

    @property
    def label(self) -> str:
        return f"{self.text} [{self.unit_text}]" if self.unit_text else self.text

    @property
    def market_scalar(self) -> bool:
        # the single-product shortcuts (shared candidate dies, market-only pricing,
        # the envelope) are not used on families
        return False

    def encode(self, value: float) -> object:
        if self.inner is not None:
            return self.inner.encode(value)
        whole = round(float(value))
        if abs(float(value) - whole) > 1e-9 * max(1.0, abs(float(value))):
            raise PathError(f"takes whole numbers only (got {value:g}); use an integer")
        return int(whole)


def parse_family_path(text: str) -> FamilyPath:
    """Resolve a path of a family file (product and item names are checked later).

    Raises
    ------
    PathError
        When the path names no number of a family file.
    """
    if not isinstance(text, str) or not text.strip():
        raise PathError("is empty; write a path such as product.NAME.market.volume")
    parts = text.strip().split(".")
    if any(not part for part in parts):
        raise PathError("has an empty key (two dots in a row, or a dot at an end); remove it")
    head = parts[0]
    if head in _PRODUCT_TABLES:
        raise PathError(
            f"a family states [{head}] per product; write product.NAME.{'.'.join(parts)}"
        )
    if head != "product":
        inner = parse_path(text)
        return FamilyPath(inner.text, None, inner)
    if len(parts) < 3:
        raise PathError(
            f"name the product and one of its numbers, e.g. product.NAME.market.volume "
            f"(a product has {_PRODUCT_KEYS_TEXT})"
        )
    name, key, rest = parts[1], parts[2], parts[3:]
    if key in _PRODUCT_TABLES:
        inner = parse_path(".".join(parts[2:]))
        return FamilyPath(f"product.{name}.{inner.text}", name, inner)
    if key == "blocks":
        if len(rest) != 1:
            raise PathError(
                f"write product.{name}.blocks.BLOCK, one block's instance count of the product"
            )
        return FamilyPath(f"product.{name}.blocks.{rest[0]}", name, None, "blocks", rest[0])
    if key == "max_dies":
        if rest:
            raise PathError("'max_dies' is a number; nothing can follow it in the path")
        return FamilyPath(f"product.{name}.max_dies", name, None, "max_dies")
    if key == "design":
        raise PathError("explicit designs are not explored; vary the inputs they use instead")
    raise PathError(f"'{key}' is not a number of a product; use {_PRODUCT_KEYS_TEXT}")


def resolve_family(text: str, where: str) -> FamilyPath:
    """:func:`parse_family_path` raising ProblemError(where, path, message) for the CLI."""
    try:
        return parse_family_path(text)
    except PathError as exc:
        raise ProblemError(where, str(text), str(exc)) from None


def _product_index(data: dict, name: str) -> int:
    products = data.get("product") or []
    names = [p.get("name") for p in products if isinstance(p, dict)]
    if name in names:
        return names.index(name)
    raise PathError(f"no product named '{name}'; use one of {names}")


def apply_family_values(data: dict, assignments: Sequence[tuple[FamilyPath, float]]) -> dict:
    """A deep copy of the decoded family document with each path set to its value.

    Raises
    ------
    PathError
        When a product or item does not exist or a value does not suit the field.
    """
    out = copy.deepcopy(data)
    for path, value in assignments:
        if path.product is None:
            if path.inner.steps[0].key == "block" and path.inner.steps[-1].key == "count":
                own = [p.get("name") for p in out.get("product", []) if "blocks" in p]
                if own:
                    raise PathError(
                        f"products {own} give their own block counts; vary "
                        f"product.NAME.blocks.{path.inner.steps[0].item} instead"
                    )
            out = apply_values(out, [(path.inner, value)])
            continue
        i = _product_index(out, path.product)
        product = out["product"][i]
        if path.inner is not None:
            out["product"][i] = apply_values(product, [(path.inner, value)])
        elif path.special == "max_dies":
            product["max_dies"] = path.encode(value)
        else:
            blocks = product.get("blocks")
            if not isinstance(blocks, dict):
                raise PathError(
                    f"product '{path.product}' has no blocks table (it takes every block at "
                    "its [[block]] count); give it one, or vary block.NAME.count"
                )
            known = [b.get("name") for b in out.get("block", []) if isinstance(b, dict)]
            if path.block not in known:
                raise PathError(f"no block named '{path.block}'; use one of {known}")
            blocks[path.block] = path.encode(value)
    return out


def family_with(data: dict, assignments: Sequence[tuple[FamilyPath, float]], source: str) -> Family:
    """Validate the family document with the assignments applied (raises ProblemError).

    Like :func:`optimizer.explore.paths.problem_with`, a changed family need not admit a
    design; a product without one is a finding of the solve.
    """
    try:
        changed = apply_family_values(data, assignments)
    except PathError as exc:
        field = ", ".join(p.text for p, _ in assignments)
        raise ProblemError(source, field, str(exc)) from None
    return family_from_data(changed, source, feasible=False)


def shared_problem(data: dict, source: str) -> Problem:
    """The shared tables as one problem (every block present, a stand-in market), to read
    shared numbers by the file's own names and positions."""
    shared = {k: v for k, v in data.items() if k not in ("product", "uncertain")}
    shared["market"] = {"unit_price": 1.0, "volume": 1.0}
    return parse_problem(shared, source)


def read_family_value(study: FamilyStudy, path: FamilyPath) -> float | None:
    """The value at ``path`` in the study, in base units (None if unset).

    A product's block count is 0 for a block it does not hold; its die limit is the one
    that applies (the smaller of its own and the shared one).
    """
    if path.product is None:
        return read_value(study.shared, path.inner)
    try:
        member = study.family.member(path.product)
    except KeyError:
        raise PathError(
            f"no product named '{path.product}'; use one of {study.family.names}"
        ) from None
    if path.inner is not None:
        return read_value(member.problem, path.inner)
    if path.special == "max_dies":
        return float(member.problem.constraints.max_dies)
    known = [b.name for b in study.shared.block]
    if path.block not in known:
        raise PathError(f"no block named '{path.block}'; use one of {known}")
    for block in member.problem.block:
        if block.name == path.block:
            return float(block.count)
    return 0.0


# ---------------------------------------------------------------- a loaded family
@dataclass(frozen=True)
class FamilyStudy:
    """A family file for exploration: the decoded document (without its [[uncertain]]
    entries), the validated family, the shared tables, and the uncertain inputs."""

    source: str
    data: dict
    family: Family
    shared: Problem
    uncertain: tuple[UncertainInput, ...]
    uncertain_paths: tuple[FamilyPath, ...]

    @property
    def title(self) -> str:
        return self.family.title

    @property
    def currency(self) -> str:
        return self.family.members[0].problem.market.currency


def family_uncertain(entries: object, source: str) -> tuple[list[UncertainInput], list[FamilyPath]]:
    """Validate a family's top-level ``[[uncertain]]`` entries (names checked later).

    Each entry is checked by the single-product schema against the number its path
    names (units, distribution parameters); the entry keeps its family path.
    """

    def check(entry: dict, path: FamilyPath) -> UncertainInput:
        stand_in = path.inner.text if path.inner is not None else _WHOLE_STAND_IN
        return UncertainInput.model_validate({**entry, "path": stand_in})

    return read_uncertain_entries(entries, source, parse_family_path, check)


def family_study_from_data(data: dict, source: str, feasible: bool = True) -> FamilyStudy:
    """Validate a decoded family document (and its [[uncertain]] entries)."""
    core = {k: v for k, v in data.items() if k != "uncertain"}
    # the family parser refuses top-level [[uncertain]]; exploration reads them here
    family = family_from_data(core, source, feasible)
    inputs, paths = family_uncertain(data.get("uncertain"), source)
    study = FamilyStudy(source, core, family, shared_problem(core, source), (), ())
    seen: dict[str, int] = {}
    for i, path in enumerate(paths):
        try:
            read_family_value(study, path)
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
    return FamilyStudy(source, core, family, study.shared, tuple(inputs), tuple(paths))


def load_family_study(path: str | Path) -> FamilyStudy:
    """Read a family file for exploration (raises ProblemError with file, field, fix)."""
    data, source = read_problem_data(path)
    return family_study_from_data(data, source)


def family_value(path: FamilyPath, text: object) -> float:
    """A value typed by a user for a family path (number in base units or quantity)."""
    if path.inner is not None:
        return parse_value(path.inner, text)
    if isinstance(text, bool):
        raise PathError(f"expected a number, got {text!r}")
    try:
        value = float(text)
    except (TypeError, ValueError):
        raise PathError(f"cannot read {text!r} as a number; write a whole number") from None
    if not math.isfinite(value):
        raise PathError(f"{text!r} is not a finite number; use a finite value")
    return value


__all__ = [
    "FamilyPath",
    "FamilyStudy",
    "apply_family_values",
    "family_study_from_data",
    "family_uncertain",
    "family_value",
    "family_with",
    "load_family_study",
    "parse_family_path",
    "read_family_value",
    "resolve_family",
    "shared_problem",
]
