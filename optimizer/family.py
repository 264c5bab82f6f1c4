"""Product families: several products sharing one die library, read from one file.

A family file holds the shared tables of a problem file ([constraints], [[process]],
[[packaging]], [design_cost], [critical_area_reduction], [[block]], [[link]]) and two
or more [[product]] tables, each with its own name, [product.market], block instance
counts (``blocks``), allowed packaging options, die-count limit, [product.requirements]
and hand-written [[product.design]] entries. Each product is expanded into an ordinary
single-product :class:`~optimizer.problem.Problem` (its blocks at its counts, blocks it
does not hold left out with their links and keep rules), so everything that prices one
product prices a member of the family unchanged; what the products share is priced by
:mod:`optimizer.solver.family`.
"""

from __future__ import annotations

import copy
import re
from dataclasses import dataclass, field
from pathlib import Path

from pydantic import ValidationError

from optimizer.errors import ProblemError
from optimizer.problem import (
    MAX_COUNT,
    MAX_ITEMS,
    Problem,
    _first_error,
    _name,
    check_feasible,
    parse_problem,
    read_problem_data,
    validate_references,
)

PRODUCT_KEYS = {"name", "market", "blocks", "packaging", "max_dies", "requirements", "design"}
# tables a product states for itself and a family file therefore does not hold at the top
PER_PRODUCT = ("market", "design")


@dataclass(frozen=True)
class Member:
    """One product of a family, as the single-product problem it is priced as."""

    name: str
    problem: Problem
    # list -> file index of each entry the product kept (links and keep groups of absent
    # blocks are dropped), so messages name entries as the file numbers them
    file_index: dict = field(default_factory=dict, compare=False, repr=False)


@dataclass(frozen=True)
class Family:
    title: str
    note: str
    members: tuple[Member, ...]

    @property
    def names(self) -> list[str]:
        return [m.name for m in self.members]

    def member(self, name: str) -> Member:
        for m in self.members:
            if m.name == name:
                return m
        raise KeyError(name)


def is_family(data: dict) -> bool:
    """Whether a decoded problem file declares a family (it has [[product]] tables)."""
    return isinstance(data, dict) and "product" in data


def parse_family(data: dict, source: str = "<problem>") -> Family:
    """Validate a family document (raises ProblemError naming the file and field)."""
    products = data.get("product")
    if not isinstance(products, list) or not all(isinstance(p, dict) for p in products):
        raise ProblemError(
            source, "product", "must be a list of [[product]] tables, one per product"
        )
    if len(products) < 2:
        raise ProblemError(
            source,
            "product",
            f"a family needs at least 2 [[product]] tables (found {len(products)}); for one "
            "product write an ordinary problem file with a [market] table",
        )
    if len(products) > MAX_ITEMS:
        raise ProblemError(source, "product", f"at most {MAX_ITEMS} products")
    for key in PER_PRODUCT:
        if key in data:
            raise ProblemError(
                source,
                key,
                f"a family file states [{key}] per product; move it into each [[product]] "
                f"(as [product.{key}])",
            )
    if "life" in data:
        raise ProblemError(
            source,
            "life",
            "a family file does not yet take a [life] plan; remove it to solve the family "
            "for one set of numbers, or give each product's life in a problem file of its own",
        )
    # [[uncertain]] is the family's own (its paths name products); exploration reads it
    shared = {k: v for k, v in data.items() if k not in ("product", "uncertain")}
    blocks = shared.get("block")
    if not isinstance(blocks, list) or not all(isinstance(b, dict) for b in blocks):
        raise ProblemError(source, "block", "needs [[block]] tables shared by the products")
    _check_shared(shared, source)
    block_names = [b.get("name") for b in blocks]
    members: list[Member] = []
    seen: set[str] = set()
    for i, product in enumerate(products):
        where = f"product[{i}]"
        name = product.get("name")
        if not isinstance(name, str) or not name.strip():
            raise ProblemError(source, f"{where}.name", "each product needs a name (text)")
        try:
            _name(name)
        except ValueError as exc:
            raise ProblemError(source, f"{where}.name", str(exc)) from None
        where = f"product '{name}'"
        if name in seen:
            raise ProblemError(source, f"{where}.name", "two products share this name; rename one")
        seen.add(name)
        unknown = sorted(set(product) - PRODUCT_KEYS)
        if unknown:
            raise ProblemError(
                source,
                f"{where}.{unknown[0]}",
                f"unknown key; a product takes {', '.join(sorted(PRODUCT_KEYS))}",
            )
        if "market" not in product:
            raise ProblemError(
                source, f"{where}.market", "each product needs its own [product.market] table"
            )
        expanded, file_index = _expand(shared, product, block_names, source, where)
        problem = _parse_member(expanded, source, where, file_index)
        members.append(Member(name, problem, file_index))
    first = members[0]
    for member in members[1:]:
        # the family total adds the products' money: one currency for all
        if member.problem.market.currency != first.problem.market.currency:
            raise ProblemError(
                source,
                f"product '{member.name}'.market.currency",
                f"is {member.problem.market.currency} but product '{first.name}' sells in "
                f"{first.problem.market.currency}; state every product's market in one currency",
            )
    return Family(
        title=str(data.get("title", "untitled family")),
        note=str(data.get("note", "")),
        members=tuple(members),
    )


def family_from_data(data: dict, source: str, feasible: bool = True) -> Family:
    """:func:`parse_family`, then (with ``feasible``) every product must admit a design
    as the file states it."""
    family = parse_family(data, source)
    if feasible:
        for member in family.members:
            try:
                check_feasible(member.problem, source)
            except ProblemError as exc:
                if exc.field == "constraints.max_dies" and member.file_index.get("own_max_dies"):
                    # the product's own limit is the one that binds
                    at = f"product '{member.name}'.max_dies"
                else:
                    at = f"product '{member.name}': {_file_field(exc.field, member.file_index)}"
                raise ProblemError(source, at, exc.message) from None
    return family


def load_family(path: str | Path, feasible: bool = True) -> Family:
    """Read and validate a family file; with ``feasible`` every product must admit a
    design as the file states it."""
    data, source = read_problem_data(path)
    return family_from_data(data, source, feasible)


def _check_shared(shared: dict, source: str) -> None:
    """Validate the shared tables once, every block present, so that a fault there is
    named by the file's own entries (each product's copy drops its absent blocks, their
    links and keep groups, which renumbers the lists). The market is a stand-in: markets
    are the products' own and are checked with each product."""
    data = copy.deepcopy(shared)
    data["market"] = {"unit_price": 1.0, "volume": 1.0}
    try:
        problem = Problem.model_validate(data)
    except ValidationError as exc:
        where, message = _first_error(exc, data)
        raise ProblemError(source, where, message) from None
    except RecursionError:
        raise ProblemError(source, "", "is nested too deeply to read; simplify it") from None
    validate_references(problem, source)


def _file_field(name: str, file_index: dict) -> str:
    """A product's field path with list positions turned back into the file's."""
    for table, kept in file_index.items():
        if not isinstance(kept, list):
            continue
        match = re.match(rf"{re.escape(table)}\[(\d+)\]", name)
        if match and int(match[1]) < len(kept):
            return f"{table}[{kept[int(match[1])]}]{name[match.end() :]}"
    return name


def _expand(
    shared: dict, product: dict, block_names: list, source: str, where: str
) -> tuple[dict, dict]:
    """The single-product document of one product, and where its shared list entries
    sit in the file (see :attr:`Member.file_index`)."""
    file_index: dict = {}
    data = copy.deepcopy(shared)
    data["market"] = copy.deepcopy(product["market"])
    if "requirements" in product:
        data["requirements"] = copy.deepcopy(product["requirements"])
    if "design" in product:
        data["design"] = copy.deepcopy(product["design"])
    title = shared.get("title", "untitled family")
    # a member's title is shown, not read back: cut to the schema's length
    data["title"] = f"{title}: {product['name']}"[:200]
    counts = product.get("blocks")
    if counts is not None:
        if not isinstance(counts, dict) or not counts:
            raise ProblemError(
                source,
                f"{where}.blocks",
                "must be a table of block name = instance count, e.g. { core = 8, io = 1 }",
            )
        for block, count in counts.items():
            if block not in block_names:
                raise ProblemError(
                    source,
                    f"{where}.blocks.{block}",
                    f"no [[block]] is named '{block}'; use one of "
                    + ", ".join(map(str, block_names)),
                )
            if isinstance(count, bool) or not isinstance(count, int) or not 0 <= count <= MAX_COUNT:
                raise ProblemError(
                    source,
                    f"{where}.blocks.{block}",
                    f"must be a whole number from 0 to {MAX_COUNT} (0: the product lacks it)",
                )
        if not any(counts.values()):
            raise ProblemError(source, f"{where}.blocks", "holds no block instance; give one")
        kept = []
        for block in data["block"]:
            k = counts.get(block.get("name"), 0)
            if k > 0:
                block["count"] = k
                kept.append(block)
        data["block"] = kept
        present = {b["name"] for b in kept}
        if "link" in data and isinstance(data["link"], list):
            kept_links = [
                j
                for j, link in enumerate(data["link"])
                if not isinstance(link, dict)
                or all(b in present for b in (link.get("blocks") or []))
            ]
            data["link"] = [data["link"][j] for j in kept_links]
            file_index["link"] = kept_links
        constraints = data.get("constraints")
        if isinstance(constraints, dict):
            for rule in ("keep_together", "keep_apart"):
                groups = constraints.get(rule)
                if isinstance(groups, list):
                    kept_groups = []
                    positions = []
                    for j, group in enumerate(groups):
                        if isinstance(group, list):
                            group = [b for b in group if b in present]
                            if len(group) < 2:
                                continue
                        kept_groups.append(group)
                        positions.append(j)
                    constraints[rule] = kept_groups
                    file_index[f"constraints.{rule}"] = positions
    packaging = product.get("packaging")
    if packaging is not None:
        offered = [p.get("name") for p in data.get("packaging", []) if isinstance(p, dict)]
        if (
            not isinstance(packaging, list)
            or not packaging
            or not all(isinstance(p, str) for p in packaging)
        ):
            raise ProblemError(
                source, f"{where}.packaging", "must be a list of [[packaging]] names"
            )
        for name in packaging:
            if name not in offered:
                raise ProblemError(
                    source,
                    f"{where}.packaging",
                    f"no [[packaging]] is named '{name}'; use some of "
                    + ", ".join(map(str, offered)),
                )
        data["packaging"] = [p for p in data["packaging"] if p.get("name") in packaging]
    if "max_dies" in product:
        limit = product["max_dies"]
        if isinstance(limit, bool) or not isinstance(limit, int) or not 1 <= limit <= MAX_COUNT:
            raise ProblemError(
                source, f"{where}.max_dies", f"must be a whole number from 1 to {MAX_COUNT}"
            )
        constraints = data.setdefault("constraints", {})
        if isinstance(constraints, dict):
            shared_limit = constraints.get("max_dies", limit)
            if isinstance(shared_limit, int) and not isinstance(shared_limit, bool):
                constraints["max_dies"] = min(shared_limit, limit)
                file_index["own_max_dies"] = limit < shared_limit
    return data, file_index


def _parse_member(data: dict, source: str, where: str, file_index: dict) -> Problem:
    """Validate one product's document; a field of its own tables is named under the
    product (``product 'x'.market.volume``), a shared one as in the file."""
    try:
        return parse_problem(data, source)
    except ProblemError as exc:
        name = exc.field
        if name.split(".")[0].split("[")[0] in ("market", "requirements", "design"):
            name = f"{where}.{name}"
        else:
            name = _file_field(name, file_index)
        raise ProblemError(source, name, f"{exc.message} (in {where})") from None


__all__ = ["Family", "Member", "family_from_data", "is_family", "load_family", "parse_family"]
