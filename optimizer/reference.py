"""A reference table of every problem-file key, generated from the schema.

The types, units, ranges and defaults are read from the pydantic models in
``optimizer/problem.py`` (ranges from the closures of its ``_number``/``_quantity``
validators), so the README's reference cannot drift from what the loader accepts. Only
the one-line meanings are written here, in :data:`MEANINGS`.

``python -m optimizer.reference`` prints the markdown that the README holds.
"""

from __future__ import annotations

import math
import types
import typing
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Annotated, Any, Literal, Union

from annotated_types import MaxLen, MinLen
from pydantic import BaseModel
from pydantic.fields import FieldInfo
from pydantic_core import PydanticUndefined

from optimizer import problem as schema
from optimizer.units import QuantityKind

TOP = "(top level)"

# (section, key) -> meaning. A test fails when a schema field has no entry here.
MEANINGS: dict[tuple[str, str], str] = {
    (TOP, "title"): "name of the study, shown in reports",
    (TOP, "note"): "free text carried into the run folder",
    (TOP, "market"): "what the product sells for and how many units",
    (TOP, "constraints"): "limits every design must respect",
    (TOP, "process"): "the process options, one table each",
    (TOP, "packaging"): "the packaging options, one table each",
    (TOP, "design_cost"): "one-time cost of each distinct die design",
    (TOP, "critical_area_reduction"): "design-side yield options (absent: none)",
    (TOP, "requirements"): "mandated targets, solved under and priced",
    (TOP, "block"): "the functional blocks of the product",
    (TOP, "link"): "bandwidth between pairs of blocks",
    (TOP, "design"): "explicit designs for `evaluate`",
    (TOP, "uncertain"): "inputs known only as distributions (exploration)",
    ("market", "currency"): "label of the one currency all money is in",
    ("market", "unit_price"): "price of one good packaged unit",
    ("market", "volume"): "good units the market takes over the product's life",
    ("market", "salvage_bin"): "lower bins for one-die products that miss full spec",
    ("market.salvage_bin", "name"): "label of the bin",
    ("market.salvage_bin", "block"): "the block whose good instances decide the bin",
    ("market.salvage_bin", "min_good"): "fewest good instances a binned die needs (below the "
    "block's count)",
    ("market.salvage_bin", "unit_price"): "price of one unit sold in this bin",
    ("market.salvage_bin", "demand"): "units the bin can sell",
    ("constraints", "min_die_area"): "smallest allowed die",
    ("constraints", "max_die_area"): "largest allowed die",
    (
        "constraints",
        "max_dies",
    ): "most dies in one package; the smaller of this and the packaging's own max_dies applies",
    (
        "constraints",
        "keep_together",
    ): (
        "groups of blocks kept in the same share: a die holding any of them holds the "
        "same fraction of each block's count"
    ),
    ("constraints", "keep_apart"): "groups of block names never on one die",
    ("process", "name"): "unique name of the process option",
    ("process", "wafer_diameter"): "wafer diameter",
    ("process", "edge_exclusion"): "unusable ring at the wafer edge",
    ("process", "scribe_width"): "saw lane between dies",
    ("process", "wafer_cost"): "cost of one processed wafer",
    ("process", "defect_density"): "random defect density (per layer for bose_einstein)",
    ("process", "yield_model"): "how defect density turns into die yield",
    ("process", "clustering_alpha"): "defect clustering; required by negative_binomial",
    ("process", "critical_layers"): "layers counted; required by bose_einstein",
    ("process", "systematic_yield"): "wafer-level / systematic yield factor Y0",
    ("process", "reticle_width"): "exposure field width; a die must fit the field",
    ("process", "reticle_height"): "exposure field height",
    ("process", "mask_set_cost"): "one-time mask cost per die design on this process",
    ("process", "sort_cost_per_die"): "wafer-sort test cost per die",
    ("process", "fault_coverage"): "share of faults wafer sort catches (T)",
    ("process", "die_aspect_ratio"): "long side / short side of a die (absent: square, "
    "stretched to fit the field)",
    ("process", "area_scale"): "block area on this process relative to the reference area",
    ("process", "die_count"): "gross dies per wafer: whole sites (exact), the classic "
    "formula, or usable area / site area",
    ("process", "defect_reduction"): "what a lower defect density costs (absent: none bought)",
    ("process", "margin"): "design margin against the area it costs (absent: none modelled)",
    ("process.area_scale", "logic"): "scale for logic blocks",
    ("process.area_scale", "memory"): "scale for memory blocks",
    ("process.area_scale", "analog"): "scale for analog blocks",
    ("process.area_scale", "io"): "scale for io blocks",
    ("process.defect_reduction", "form"): "a continuous log-ratio curve or a table of targets",
    ("process.defect_reduction", "floor"): "lowest reachable density; required by log_ratio",
    ("process.defect_reduction", "one_time_per_log"): "one-time cost per unit of ln(D_base / D)",
    ("process.defect_reduction", "per_wafer_per_log"): "per-wafer adder per unit of ln(D_base / D)",
    ("process.defect_reduction", "levels"): "targets tried on a log_ratio curve before refining",
    ("process.defect_reduction", "points"): "table targets: [density, one-time cost, "
    "per-wafer adder]; required by table",
    ("process.margin", "two_sided"): "soft yield 2 Phi(k) - 1 if true, Phi(k) if false",
    ("process.margin", "sigma"): "margin choices k, increasing",
    ("process.margin", "area_overhead"): "block-area fraction each sigma costs (same length)",
    ("packaging", "name"): "unique name of the packaging option",
    ("packaging", "kind"): "how the dies are joined (single_die holds one die)",
    (
        "packaging",
        "max_dies",
    ): (
        "most dies it holds (1 for single_die); the smaller of this and "
        "constraints.max_dies applies"
    ),
    ("packaging", "bond_cost_per_die"): "cost to bond one die",
    ("packaging", "bond_yield"): "yield of bonding one die",
    ("packaging", "carrier_cost"): "substrate cost (under the interposer, if any)",
    ("packaging", "carrier_yield"): "yield of the substrate",
    ("packaging", "package_cost"): "cost of the package",
    ("packaging", "package_yield"): "yield of packaging",
    ("packaging", "final_test_cost"): "final test cost per package",
    ("packaging", "interface_density"): "die-to-die bandwidth per mm^2 of interface; "
    "required unless single_die",
    ("packaging", "port_area"): "fixed area per cut link and die",
    ("packaging", "design_cost"): "one-time package design cost",
    ("packaging", "interposer_process"): "process the interposer is made on; required by "
    "silicon_interposer",
    ("packaging", "interposer_area_factor"): "interposer area = factor x die area + extra",
    ("packaging", "interposer_extra_area"): "area added to the interposer",
    ("packaging", "interposer_max_area"): "largest interposer",
    ("packaging", "interposer_defect_sensitivity"): "critical-area fraction of the interposer",
    ("design_cost", "per_die_design"): "one-time cost per distinct die design",
    (
        "design_cost",
        "per_mm2",
    ): (
        "one-time design cost per mm^2 of die area, per distinct die design (paid once "
        "however many copies or products use it)"
    ),
    ("critical_area_reduction", "sensitivity_factor"): "defect-sensitivity multipliers on offer",
    ("critical_area_reduction", "area_overhead"): "area fraction each factor costs (same length)",
    (
        "requirements",
        "min_die_yield",
    ): (
        "lowest die yield allowed for every die (absent: none); die yield = systematic x "
        "defect-limited yield (spares and repair counted) x soft yield of its sigma "
        "margin"
    ),
    ("requirements", "min_sigma_margin"): "lowest sigma margin allowed (absent: none)",
    ("requirements", "max_defect_level"): "highest share of bad parts shipped, below 1 "
    "(absent: none)",
    ("block", "name"): "unique name of the block",
    ("block", "kind"): "block kind; picks the process's area_scale",
    (
        "block",
        "area",
    ): (
        "area of one instance at area_scale 1 (the reference); each process scales it by "
        "its area_scale of the block's kind"
    ),
    ("block", "count"): "identical instances; they may spread over several dies",
    ("block", "defect_sensitivity"): "critical-area fraction",
    ("block", "spare_choices"): "spare instances a die may add (0 is always offered)",
    ("block", "repair"): "array repair with spare rows/columns (memory blocks only)",
    ("block.repair", "repairable_fraction"): "share of defects a repair element can fix",
    ("block.repair", "repair_choices"): "repair elements per instance on offer",
    ("block.repair", "area_per_repair"): "area of one repair element",
    ("block.repair", "test_cost_per_die"): "extra test cost per die using repair",
    ("link", "blocks"): "the two blocks joined",
    (
        "link",
        "bandwidth",
    ): (
        "one figure for the link (directions not told apart); a die that splits it pays "
        "the bandwidth it cuts / interface_density of PHY area, plus port_area"
    ),
    ("design", "name"): "unique name `evaluate --design` and reports use",
    ("design", "packaging"): "the packaging option all dies go on",
    ("design", "die"): "the dies of the design",
    ("design", "defect_targets"): "process name -> defect-density target bought (absent: "
    "the base density)",
    ("design.die", "name"): "label in reports (absent: die1, die2, ... by position)",
    ("design.die", "process"): "the process the die is made on",
    ("design.die", "copies"): "copies of this die in the package",
    ("design.die", "blocks"): "block name -> instances on one copy",
    ("design.die", "spares"): "block name -> spare units on this die",
    ("design.die", "repair"): "block name -> repair elements per instance",
    ("design.die", "sigma_margin"): "design margin k (absent: none modelled)",
    ("design.die", "critical_area_option"): "0 for none, then the "
    "[critical_area_reduction] pairs in order",
    ("uncertain", "path"): 'the input it varies, e.g. "process.leading.defect_density"',
    ("uncertain", "distribution"): "the distribution's shape",
    ("uncertain", "mean"): "normal: mean, in the path's unit",
    ("uncertain", "std"): "normal: standard deviation",
    ("uncertain", "median"): "lognormal: median",
    ("uncertain", "sigma_log"): "lognormal: sigma of the log",
    ("uncertain", "mode"): "triangular: most likely value",
    ("uncertain", "low"): "low end (uniform, triangular; else the sensitivity range)",
    ("uncertain", "high"): "high end (uniform, triangular; else the sensitivity range)",
}


@dataclass
class Shape:
    """What a schema type says about a key: its type words, unit and range."""

    type: str
    unit: str = ""
    range: str = ""
    model: type[BaseModel] | None = None  # a nested section
    many: bool = False  # a list of tables ([[...]])


def _closure(func: Any) -> dict[str, Any]:
    names, cells = func.__code__.co_freevars, func.__closure__ or ()
    return {name: cell.cell_contents for name, cell in zip(names, cells, strict=True)}


def _num(value: float) -> str:
    return f"{value:g}".replace("e+", "e").replace("e-0", "e-")


def _span(lo: float, hi: float, low_open: bool) -> str:
    return f"above {_num(lo)} to {_num(hi)}" if low_open else f"{_num(lo)} to {_num(hi)}"


def _checks(metadata: list) -> tuple[str, str]:
    """(unit, range) from validators and length limits in ``metadata``."""
    unit, limits, chars = "", [], []
    for item in metadata:
        func = getattr(item, "func", None)
        names = _closure(func) if func is not None else {}
        if "inner" in names:  # an _optional wrapper: the check it wraps
            names = _closure(names["inner"])
        if {"lo", "hi", "low_open"} <= names.keys():
            limits.append(_span(names["lo"], names["hi"], names["low_open"]))
            if isinstance(names.get("kind"), QuantityKind):
                unit = names["kind"].base_text
            elif id(item) in _MONEY:
                unit = "currency"
        elif "limit" in names:
            chars.append(names["limit"])
        elif func is schema._name:
            chars.append(schema.MAX_NAME_CHARS)
    if chars:  # text passes every check, so the shortest limit is the one that counts
        limits.append(f"at most {min(chars)} characters")
    lo = next((m.min_length for m in metadata if isinstance(m, MinLen)), 0)
    hi = next((m.max_length for m in metadata if isinstance(m, MaxLen)), None)
    if hi is not None:
        limits.append(f"exactly {hi} entries" if lo == hi else f"{lo} to {hi} entries")
    elif lo:
        limits.append(f"at least {lo} {'entry' if lo == 1 else 'entries'}")
    return unit, "; ".join(dict.fromkeys(limits))


_MONEY = {id(m) for alias in (schema.Money, schema.Price, schema.Cost) for m in alias.__metadata__}


def _each(limits: str) -> str:
    """Item limits of a list or table, said once however deep the nesting."""
    return limits if not limits or limits.startswith("each ") else f"each {limits}"


def _plural(word: str) -> str:
    return {"number": "numbers", "integer": "integers"}.get(word, word.replace("list ", "lists "))


def shape(annotation: Any, metadata: list | None = None) -> Shape:
    """Describe a field's annotation (with its pydantic metadata) in file terms."""
    metadata = list(metadata or [])
    origin = typing.get_origin(annotation)
    if origin is Annotated:
        return shape(annotation.__origin__, list(annotation.__metadata__) + metadata)
    if origin in (Union, types.UnionType):
        inner = [a for a in typing.get_args(annotation) if a is not type(None)]
        return shape(inner[0], metadata)
    unit, span = _checks(metadata)
    if origin is Literal:
        return Shape(" / ".join(f'"{v}"' for v in typing.get_args(annotation)), unit, span)
    if origin is list:
        item = shape(typing.get_args(annotation)[0])
        if item.model is not None:
            return Shape("list of tables", "", span, item.model, many=True)
        parts = [_each(item.range), span]
        return Shape(f"list of {_plural(item.type)}", item.unit, "; ".join(p for p in parts if p))
    if origin is tuple:
        items = [shape(a) for a in typing.get_args(annotation)]
        units = ", ".join(i.unit or "-" for i in items)
        return Shape(f"[{', '.join(i.type for i in items)}]", f"[{units}]", span)
    if origin is dict:
        value = shape(typing.get_args(annotation)[1])
        parts = [_each(value.range), span]
        return Shape(f"table: name -> {value.type}", value.unit, "; ".join(p for p in parts if p))
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return Shape("table", "", span, annotation)
    words = {bool: "true-false", int: "integer", float: "number", str: "text"}
    return Shape(words[annotation], unit, span)


def _key(name: str, info: FieldInfo) -> str:
    return info.alias or name


def _default(info: FieldInfo, unit: str) -> str:
    if info.default_factory is not None:
        value = info.default_factory()
        if isinstance(value, BaseModel):
            return "all defaults"
    elif info.default is PydanticUndefined:
        return "required"
    else:
        value = info.default
    if value is None:
        return "absent"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, str):
        return f'"{value}"' if value else '""'
    if isinstance(value, float) and math.isinf(value):
        return "no limit"
    if isinstance(value, int | float):
        # quantities are stored in base units; write them as a file would
        return f'"{value:g} {unit}"' if unit and unit != "currency" else f"{value:g}"
    return str(value).replace("'", '"')


def sections() -> Iterator[tuple[str, str, type[BaseModel]]]:
    """(section path, heading, model) for every table, depth first from Problem."""

    def walk(path: str, heading: str, model: type[BaseModel]):
        yield path, heading, model
        for name, info in model.model_fields.items():
            got = shape(info.annotation, info.metadata)
            if got.model is None:
                continue
            key = _key(name, info)
            sub = key if path == TOP else f"{path}.{key}"
            yield from walk(sub, f"[[{sub}]]" if got.many else f"[{sub}]", got.model)

    yield from walk(TOP, TOP, schema.Problem)


def rows(path: str, model: type[BaseModel]) -> Iterator[tuple[str, ...]]:
    """(key, type, unit, range, default, meaning) for each field of ``model``."""
    for name, info in model.model_fields.items():
        key = _key(name, info)
        got = shape(info.annotation, info.metadata)
        meaning = info.description or MEANINGS.get((path, key), "")
        yield (f"`{key}`", got.type, got.unit, got.range, _default(info, got.unit), meaning)


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def reference_markdown() -> str:
    """The README's reference: one markdown table per section of a problem file."""
    out: list[str] = []
    for path, heading, model in sections():
        out.append(f"#### `{heading}`" if path != TOP else f"#### {heading}")
        out.append("")
        out.append("| key | type | unit | range | default | meaning |")
        out.append("|---|---|---|---|---|---|")
        for row in rows(path, model):
            out.append("| " + " | ".join(_cell(c) for c in row) + " |")
        out.append("")
    return "\n".join(out).rstrip("\n") + "\n"


if __name__ == "__main__":
    print(reference_markdown(), end="")


# A starter file for `dieplan new`: every section present, each key explained. The
# numbers are invented, small enough that `check` and `solve` run in a moment.
STARTER = """\
# Starter problem file written by `dieplan new`. EVERY NUMBER HERE IS INVENTED: replace
# them with your own data. Quantities are strings with a unit ("120 mm^2"); money is a
# plain number in [market] currency. The README's "Problem file reference" lists every
# key with its unit, range and default.

title = "New product (invented numbers)"   # shown in reports
note = "Invented starter numbers; not real data."

[market]
currency = "USD"            # the one currency all money below is in
unit_price = 60.0           # price of one good packaged unit
volume = 1000000            # good units the market takes over the product's life

[[market.salvage_bin]]      # a lower bin: one-die products that miss full spec
name = "three_core"
block = "core"              # the block whose good instances decide the bin
min_good = 3                # fewest good instances (below the block's count)
unit_price = 45.0
demand = 100000             # units the bin can sell

[constraints]               # limits every design must respect
min_die_area = "5 mm^2"
max_die_area = "600 mm^2"
max_dies = 4                # dies per package
keep_together = []          # groups of block names that share one die
keep_apart = []             # groups of block names never on one die

[[process]]                 # one table per process option
name = "main"
wafer_diameter = "300 mm"
edge_exclusion = "3 mm"     # unusable ring at the wafer edge
scribe_width = "80 um"      # saw lane between dies
wafer_cost = 6000.0         # one processed wafer
defect_density = "0.1 /cm^2"
yield_model = "negative_binomial"   # or poisson, murphy, exponential, ...
clustering_alpha = 2.0      # defect clustering (negative_binomial only)
systematic_yield = 0.98     # wafer-level / systematic yield factor
reticle_width = "26 mm"     # exposure field; a die must fit it
reticle_height = "33 mm"
mask_set_cost = 2.0e6       # one-time, per die design on this process
sort_cost_per_die = 0.5     # wafer-sort test per die
fault_coverage = 0.99       # share of faults wafer sort catches
die_count = "exact"         # gross dies: whole sites on the wafer
# lower defect densities on offer: [density, one-time cost, per-wafer adder]
defect_reduction = { form = "table", points = [["0.08 /cm^2", 1.0e6, 60.0]] }
# design margin in sigma against the block-area fraction it costs
margin = { two_sided = true, sigma = [3.0, 4.5], area_overhead = [0.0, 0.02] }

[process.area_scale]        # block area on this process vs the reference area
logic = 1.0
memory = 1.0
analog = 1.0
io = 1.0

[[packaging]]               # one table per packaging option
name = "single"
kind = "single_die"         # one die per package
max_dies = 1
package_cost = 3.0
package_yield = 0.995
final_test_cost = 1.0       # per package

[[packaging]]
name = "multichip"
kind = "organic_substrate"  # several dies side by side on a substrate
max_dies = 4
bond_cost_per_die = 0.8     # to bond one die
bond_yield = 0.995          # of bonding one die
carrier_cost = 4.0          # the substrate
carrier_yield = 0.99
package_cost = 3.0
package_yield = 0.995
final_test_cost = 1.5
interface_density = "100 GB/s/mm^2"   # die-to-die bandwidth per mm^2 of interface
port_area = "0.2 mm^2"                # fixed area per cut link and die
design_cost = 0.5e6                   # one-time package design

[design_cost]               # one-time cost of each distinct die design
per_die_design = 3.0e6
per_mm2 = 20000.0

[critical_area_reduction]   # design-side: lower defect sensitivity bought with area
sensitivity_factor = [0.9]
area_overhead = [0.02]

[requirements]              # optional mandates, priced against the optimum
# min_die_yield = 0.8
# min_sigma_margin = 3.0
# max_defect_level = 1.0e-4

[[block]]
name = "core"
kind = "logic"              # logic | memory | analog | io
area = "6 mm^2"             # one instance, at the reference process
count = 4                   # identical instances
defect_sensitivity = 0.8    # critical-area fraction
spare_choices = [0, 1]      # spare instances a die may add

[[block]]
name = "cache"
kind = "memory"
area = "8 mm^2"
count = 1

[block.repair]              # spare rows/columns (memory blocks only)
repairable_fraction = 0.7   # share of defects a repair element fixes
repair_choices = [0, 4]     # repair elements per instance on offer
area_per_repair = "0.01 mm^2"
test_cost_per_die = 0.05

[[block]]
name = "io_ring"
kind = "io"
area = "5 mm^2"
count = 1

[[link]]                    # bandwidth paid as interface area when the blocks are split
blocks = ["core", "cache"]
bandwidth = "200 GB/s"

[[design]]                  # an explicit design for `dieplan evaluate`
name = "one_die"
packaging = "single"

[[design.die]]
process = "main"
copies = 1
blocks = { core = 4, cache = 1, io_ring = 1 }   # instances on one copy

[[uncertain]]               # an input known only as a distribution (exploration)
path = "market.unit_price"
distribution = "triangular"
low = 50.0
mode = 60.0
high = 66.0
"""
