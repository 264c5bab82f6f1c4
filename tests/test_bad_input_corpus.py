"""A corpus of bad problem files: each ends in one clean line, exit code 2.

The outside truth is the command-line contract of the README: a bad file ends in exactly
one line ``dieplan: FILE: FIELD: what is wrong; what to do`` on stderr, exit code 2, no
traceback and no warning. Each case edits one thing of the tiny fixture problem (or
writes raw bytes) and names the text the line must contain, normally the field at fault.
Many cases come from a hostile-input sweep: files that used to crash, hang or be
silently accepted with absurd numbers.
"""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from tests.conftest import TINY_PROBLEM

runner = CliRunner()

T = TINY_PROBLEM
NO_DESIGNS = T[: T.index("[[design]]")]  # the tiny problem without its explicit designs
MARKET = "volume = 100000\n"
CONSTRAINTS = 'max_die_area = "800 mm^2"\n'
FAST = "fault_coverage = 0.99\n"  # last line of process 'fast'
MULTI = "design_cost = 1.0e6\n"  # last line of packaging 'multi'
COMPUTE = "spare_choices = [0, 1]\n"  # last line of block 'compute'
IO_BLOCK = 'kind = "io"\narea = "40 mm^2"\n'
MEMORY_IO = 'kind = "memory"\narea = "40 mm^2"\n'
REPAIR = (
    "[block.repair]\nrepairable_fraction = 0.5\nrepair_choices = [0, 4]\n"
    'area_per_repair = "0.01 mm^2"\n'
)
SALVAGE = (
    '[[market.salvage_bin]]\nname = "lo"\nblock = "compute"\nmin_good = 1\n'
    "unit_price = 300.0\ndemand = 1000.0\n"
)
UNCERTAIN = (
    '\n[[uncertain]]\npath = "market.volume"\ndistribution = "normal"\nmean = 1e5\nstd = 1e4\n'
)
CURVE = 'defect_reduction = { form = "log_ratio", floor = "0.05 /cm^2" }\n'
MARGIN = "margin = { sigma = [3.0, 4.0], area_overhead = [0.0, 0.02] }\n"
THIRD_BLOCK = '\n[[block]]\nname = "cache"\nkind = "memory"\narea = "20 mm^2"\n'


def edit(*pairs: tuple[str, str], base: str = T) -> str:
    text = base
    for old, new in pairs:
        assert old in text, f"corpus edit target not found: {old!r}"
        text = text.replace(old, new, 1)
    return text


def after(anchor: str, added: str, base: str = T) -> str:
    return edit((anchor, anchor + added), base=base)


def field(key: str, value: str, anchor: str = FAST) -> str:
    """Add ``key = value`` to the table ending at ``anchor`` (a key not set there yet)."""
    return after(anchor, f"{key} = {value}\n")


def deep_arrays(depth: int) -> str:
    return T + "\njunk = " + "[" * depth + "]" * depth + "\n"


def deep_tables(depth: int) -> str:
    return T + "\njunk = " + "{ a = " * depth + "1" + " }" * depth + "\n"


# (id, file text or bytes, text the line must contain)
CASES: list[tuple[str, str | bytes, str]] = [
    # ---- the file itself
    ("not_utf8", T.replace("tiny test", "tiny t\xe9st").encode("latin-1"), "not UTF-8"),
    ("utf16", T.encode("utf-16"), "not UTF-8"),
    ("nul_bytes", T + "\x00\x00", "not valid TOML"),
    ("nested_arrays_5000", deep_arrays(5000), "nested"),
    ("nested_tables_5000", deep_tables(5000), "nested"),
    ("nested_arrays_20", deep_arrays(20), "nested more than"),
    ("file_over_10_mb", T + "#" * 10_000_001 + "\n", "MB"),
    ("malformed_toml", edit(("unit_price = 500.0", "unit_price = = 500")), "not valid TOML"),
    ("duplicate_key", after(MARKET, "volume = 5\n"), "not valid TOML"),
    ("integer_5000_digits", edit(("volume = 100000", "volume = " + "9" * 5000)), "not valid"),
    ("empty_file", "", "market"),
    ("market_not_table", "market = 5\n" + T[T.index("[constraints]") :], "market"),
    ("process_not_list", "process = 5\n" + T.replace("[[process]]", "[[spare]]"), "process"),
    ("unknown_section", T + "\n[colour]\nred = 1\n", "colour"),
    ("unknown_field", field("colour", "1"), "process[fast].colour"),
    ("title_too_long", edit(('title = "tiny', 'title = "' + "t" * 300)), "title"),
    # ---- quantity strings: one number and one unit, nothing else
    ("area_nan", edit(('area = "40 mm^2"', 'area = "nan mm^2"')), "block[io].area"),
    ("area_inf", edit(('area = "40 mm^2"', 'area = "inf mm^2"')), "block[io].area"),
    ("area_product", edit(('area = "40 mm^2"', 'area = "1e300*1e300 mm^2"')), "block[io].area"),
    ("area_power", edit(('area = "40 mm^2"', 'area = "10**100000 mm^2"')), "block[io].area"),
    ("area_sum", edit(('area = "40 mm^2"', 'area = "40 mm^2 + 1 mm^2"')), "block[io].area"),
    ("area_brackets", edit(('area = "40 mm^2"', 'area = "(40 mm^2)"')), "block[io].area"),
    ("area_100k_digits", edit(('area = "40 mm^2"', f'area = "{"1" * 100_000} mm^2"')), "area"),
    (
        "area_25_digits",
        edit(('area = "40 mm^2"', 'area = "1234567890123456789012345 mm^2"')),
        "area",
    ),
    ("area_megabyte_unit", edit(('area = "40 mm^2"', f'area = "40 {"mm*" * 300_000}mm"')), "area"),
    ("area_unknown_unit", edit(('area = "40 mm^2"', 'area = "40 zorks^2"')), "block[io].area"),
    ("area_percent", edit(('area = "40 mm^2"', 'area = "40 percent"')), "block[io].area"),
    ("area_pi", edit(('area = "40 mm^2"', 'area = "40 pi mm^2"')), "block[io].area"),
    ("area_no_unit", edit(('area = "40 mm^2"', 'area = "40"')), "block[io].area"),
    ("area_bare_number", edit(('area = "40 mm^2"', "area = 40")), "block[io].area"),
    ("area_boolean", edit(('area = "40 mm^2"', "area = true")), "block[io].area"),
    ("area_list", edit(('area = "40 mm^2"', 'area = ["40 mm^2"]')), "block[io].area"),
    ("area_table", edit(('area = "40 mm^2"', "area = { a = 1 }")), "block[io].area"),
    ("area_empty", edit(('area = "40 mm^2"', 'area = ""')), "block[io].area"),
    ("area_length", edit(('area = "40 mm^2"', 'area = "40 mm"')), "block[io].area"),
    ("area_power_9", edit(('area = "40 mm^2"', 'area = "40 mm^9"')), "block[io].area"),
    (
        "wafer_overflows",
        edit(('wafer_diameter = "300 mm"', 'wafer_diameter = "1e308 km"')),
        "wafer",
    ),
    ("bandwidth_per_second", edit(('"200 GB/s"', '"200 /s"')), "link[0].bandwidth"),
    ("bandwidth_bytes", edit(('"200 GB/s"', '"200 GB"')), "link[0].bandwidth"),
    ("interface_density_bandwidth", edit(('"100 GB/s/mm^2"', '"100 GB/s"')), "interface_density"),
    ("defect_density_area", edit(('"0.1 /cm^2"', '"0.1 cm^2"')), "process[fast].defect_density"),
    # ---- lengths
    ("wafer_kilometre", edit(('wafer_diameter = "300 mm"', 'wafer_diameter = "1 km"')), "wafer"),
    ("wafer_10_mm", edit(('wafer_diameter = "300 mm"', 'wafer_diameter = "10 mm"')), "wafer"),
    ("wafer_negative", edit(('wafer_diameter = "300 mm"', 'wafer_diameter = "-300 mm"')), "wafer"),
    ("edge_60_mm", edit(('edge_exclusion = "3 mm"', 'edge_exclusion = "60 mm"')), "edge"),
    (
        "edge_eats_wafer",
        edit(
            ('wafer_diameter = "300 mm"', 'wafer_diameter = "60 mm"'),
            ('edge_exclusion = "3 mm"', 'edge_exclusion = "30 mm"'),
        ),
        "process[fast]",
    ),
    ("scribe_5_mm", edit(('scribe_width = "100 um"', 'scribe_width = "5 mm"')), "scribe_width"),
    ("scribe_negative", edit(('scribe_width = "100 um"', 'scribe_width = "-1 um"')), "scribe"),
    ("reticle_zero", field("reticle_width", '"0 mm"'), "process[fast].reticle_width"),
    ("reticle_2_m", field("reticle_height", '"2 m"'), "process[fast].reticle_height"),
    # ---- process numbers
    ("defect_density_1e9", edit(('"0.1 /cm^2"', '"1e9 /cm^2"')), "process[fast].defect_density"),
    ("defect_density_negative", edit(('"0.1 /cm^2"', '"-0.1 /cm^2"')), "defect_density"),
    ("alpha_zero", edit(("clustering_alpha = 2.0", "clustering_alpha = 0.0")), "clustering_alpha"),
    ("alpha_1e9", edit(("clustering_alpha = 2.0", "clustering_alpha = 1e9")), "clustering_alpha"),
    ("alpha_nan", edit(("clustering_alpha = 2.0", "clustering_alpha = nan")), "clustering_alpha"),
    (
        "layers_not_whole",
        edit(
            ('yield_model = "negative_binomial"', 'yield_model = "bose_einstein"'),
            ("clustering_alpha = 2.0", "critical_layers = 2.5"),
        ),
        "process[fast].critical_layers",
    ),
    ("systematic_yield_zero", field("systematic_yield", "0.0"), "systematic_yield"),
    ("systematic_yield_1_5", field("systematic_yield", "1.5"), "systematic_yield"),
    ("coverage_negative", edit(("fault_coverage = 0.99", "fault_coverage = -0.1")), "coverage"),
    ("aspect_below_1", field("die_aspect_ratio", "0.5"), "process[fast].die_aspect_ratio"),
    ("aspect_1000", field("die_aspect_ratio", "1000.0"), "process[fast].die_aspect_ratio"),
    ("scale_zero", edit(("logic = 2.0", "logic = 0.0")), "process[cheap].area_scale.logic"),
    ("scale_1e6", edit(("memory = 1.8", "memory = 1e6")), "process[cheap].area_scale.memory"),
    ("wafer_cost_zero", edit(("wafer_cost = 10000.0", "wafer_cost = 0.0")), "wafer_cost"),
    ("wafer_cost_inf", edit(("wafer_cost = 10000.0", "wafer_cost = inf")), "wafer_cost"),
    ("wafer_cost_text", edit(("wafer_cost = 10000.0", 'wafer_cost = "10000"')), "wafer_cost"),
    ("mask_negative", edit(("mask_set_cost = 5.0e6", "mask_set_cost = -1.0")), "mask_set_cost"),
    ("mask_1e308", edit(("mask_set_cost = 5.0e6", "mask_set_cost = 1e308")), "mask_set_cost"),
    ("sort_cost_nan", edit(("sort_cost_per_die = 1.0", "sort_cost_per_die = nan")), "sort_cost"),
    ("yield_model_unknown", edit(('"poisson"', '"gaussian"')), "process[cheap].yield_model"),
    ("die_count_unknown", field("die_count", '"guess"'), "process[fast].die_count"),
    (
        "two_sided_text",
        after(FAST, 'margin = { two_sided = "yes", sigma = [3.0], area_overhead = [0.0] }\n'),
        "two_sided",
    ),
    # ---- market and money
    ("price_zero", edit(("unit_price = 500.0", "unit_price = 0.0")), "market.unit_price"),
    ("price_1e308", edit(("unit_price = 500.0", "unit_price = 1e308")), "market.unit_price"),
    ("price_boolean", edit(("unit_price = 500.0", "unit_price = true")), "market.unit_price"),
    ("price_text_inf", edit(("unit_price = 500.0", 'unit_price = "inf"')), "market.unit_price"),
    ("volume_inf", edit(("volume = 100000", "volume = inf")), "market.volume"),
    ("volume_1e13", edit(("volume = 100000", "volume = 1e13")), "market.volume"),
    ("volume_negative", edit(("volume = 100000", "volume = -1")), "market.volume"),
    ("volume_text", edit(("volume = 100000", 'volume = "1e5"')), "market.volume"),
    ("volume_half_unit", edit(("volume = 100000", "volume = 0.5")), "market.volume"),
    ("price_1e_300", edit(("unit_price = 500.0", "unit_price = 1e-300")), "market.unit_price"),
    ("currency_long", edit(('currency = "USD"', f'currency = "{"U" * 100}"')), "currency"),
    ("currency_empty", edit(('currency = "USD"', 'currency = ""')), "market.currency"),
    ("design_cost_per_mm2_inf", edit(("per_mm2 = 10000.0", "per_mm2 = inf")), "per_mm2"),
    ("design_cost_negative", edit(("per_die_design = 2.0e6", "per_die_design = -1.0")), "per_die"),
    # ---- packaging
    ("pack_max_dies_zero", edit(("max_dies = 4\nbond", "max_dies = 0\nbond")), "packaging[multi]"),
    ("pack_max_dies_1e6", edit(("max_dies = 4\nbond", "max_dies = 1000000\nbond")), "max_dies"),
    ("pack_max_dies_2_5", edit(("max_dies = 4\nbond", "max_dies = 2.5\nbond")), "max_dies"),
    ("bond_yield_zero", edit(("bond_yield = 0.995", "bond_yield = 0.0")), "bond_yield"),
    ("carrier_yield_two", after(MULTI, "carrier_yield = 2.0\n"), "packaging[multi].carrier_yield"),
    ("interface_negative", edit(('"100 GB/s/mm^2"', '"-100 GB/s/mm^2"')), "interface_density"),
    ("interface_zero", edit(('"100 GB/s/mm^2"', '"0 GB/s/mm^2"')), "interface_density"),
    ("interface_1e9", edit(('"100 GB/s/mm^2"', '"1e9 GB/s/mm^2"')), "interface_density"),
    ("port_negative", edit(('"0.5 mm^2"', '"-0.5 mm^2"')), "packaging[multi].port_area"),
    ("port_1e4", edit(('"0.5 mm^2"', '"1e4 mm^2"')), "packaging[multi].port_area"),
    ("interposer_factor", after(MULTI, "interposer_area_factor = 0.5\n"), "interposer_area"),
    ("interposer_max_zero", after(MULTI, 'interposer_max_area = "0 mm^2"\n'), "interposer_max"),
    ("pack_kind_unknown", edit(('kind = "organic_substrate"', 'kind = "glue"')), "kind"),
    (
        "single_die_two",
        edit(('kind = "single_die"\n', 'kind = "single_die"\nmax_dies = 2\n')),
        "single",
    ),
    # ---- blocks and links
    ("block_area_negative", edit(('area = "40 mm^2"', 'area = "-40 mm^2"')), "block[io].area"),
    ("block_area_zero", edit(('area = "40 mm^2"', 'area = "0 mm^2"')), "block[io].area"),
    ("block_area_1e6", edit(('area = "40 mm^2"', 'area = "1e6 mm^2"')), "block[io].area"),
    ("count_zero", edit(("count = 2\n", "count = 0\n")), "block[compute].count"),
    ("count_2_5", edit(("count = 2\n", "count = 2.5\n")), "block[compute].count"),
    ("count_boolean", edit(("count = 2\n", "count = true\n")), "block[compute].count"),
    ("count_5000", edit(("count = 2\n", "count = 5000\n")), "block[compute].count"),
    ("count_text", edit(("count = 2\n", 'count = "2"\n')), "block[compute].count"),
    ("sensitivity_1_5", after(COMPUTE, "defect_sensitivity = 1.5\n"), "defect_sensitivity"),
    ("spares_negative", edit((COMPUTE, "spare_choices = [-1]\n")), "spare_choices"),
    ("spares_1000", edit((COMPUTE, "spare_choices = [1000]\n")), "spare_choices"),
    ("spares_not_list", edit((COMPUTE, 'spare_choices = "1"\n')), "spare_choices"),
    ("spares_too_many", edit((COMPUTE, f"spare_choices = {list(range(100))}\n")), "spare_choices"),
    ("block_kind_unknown", edit(('kind = "io"', 'kind = "glue"')), "block[io].kind"),
    ("bandwidth_negative", edit(('"200 GB/s"', '"-200 GB/s"')), "link[0].bandwidth"),
    ("bandwidth_zero", edit(('"200 GB/s"', '"0 GB/s"')), "link[0].bandwidth"),
    ("bandwidth_1e12", edit(('"200 GB/s"', '"1e12 GB/s"')), "link[0].bandwidth"),
    ("link_one_block", edit(('blocks = ["compute", "io"]', 'blocks = ["compute"]')), "link[0]"),
    ("link_same_block", edit(('blocks = ["compute", "io"]', 'blocks = ["io", "io"]')), "link[0]"),
    ("link_unknown", edit(('blocks = ["compute", "io"]', 'blocks = ["gpu", "io"]')), "link[0]"),
    # ---- salvage bins
    (
        "salvage_min_good_zero",
        after(MARKET, SALVAGE.replace("min_good = 1", "min_good = 0")),
        "min_good",
    ),
    (
        "salvage_min_good_full",
        after(MARKET, SALVAGE.replace("min_good = 1", "min_good = 2")),
        "min_good",
    ),
    (
        "salvage_price_zero",
        after(MARKET, SALVAGE.replace("unit_price = 300.0", "unit_price = 0.0")),
        "salvage_bin[lo].unit_price",
    ),
    (
        "salvage_demand_negative",
        after(MARKET, SALVAGE.replace("demand = 1000.0", "demand = -5.0")),
        "salvage_bin[lo].demand",
    ),
    (
        "salvage_unknown_block",
        after(MARKET, SALVAGE.replace('block = "compute"', 'block = "gpu"')),
        "salvage_bin[lo].block",
    ),
    # ---- constraints
    ("max_dies_zero", edit(("max_dies = 4\n", "max_dies = 0\n")), "constraints.max_dies"),
    ("max_die_area_zero", edit((CONSTRAINTS, 'max_die_area = "0 mm^2"\n')), "max_die_area"),
    ("min_above_max", after(CONSTRAINTS, 'min_die_area = "900 mm^2"\n'), "constraints"),
    # ---- array repair, margins, curves, critical area, requirements
    (
        "repair_fraction_2",
        edit((IO_BLOCK, MEMORY_IO + REPAIR.replace("0.5", "2.0"))),
        "repairable_fraction",
    ),
    (
        "repair_choice_negative",
        edit((IO_BLOCK, MEMORY_IO + REPAIR.replace("[0, 4]", "[-4]"))),
        "repair_choices",
    ),
    (
        "repair_choices_empty",
        edit((IO_BLOCK, MEMORY_IO + REPAIR.replace("[0, 4]", "[]"))),
        "repair_choices",
    ),
    (
        "repair_area_huge",
        edit((IO_BLOCK, MEMORY_IO + REPAIR.replace('"0.01 mm^2"', '"1e3 mm^2"'))),
        "area_per_repair",
    ),
    ("repair_on_logic", edit((IO_BLOCK, IO_BLOCK + REPAIR)), "block[io].repair"),
    ("margin_sigma_zero", after(FAST, MARGIN.replace("[3.0, 4.0]", "[0.0, 4.0]")), "margin.sigma"),
    ("margin_sigma_falls", after(FAST, MARGIN.replace("[3.0, 4.0]", "[4.0, 3.0]")), "margin"),
    (
        "margin_overhead_2",
        after(FAST, MARGIN.replace("[0.0, 0.02]", "[0.0, 2.0]")),
        "area_overhead",
    ),
    ("margin_lengths", after(FAST, MARGIN.replace("[0.0, 0.02]", "[0.0]")), "margin"),
    ("curve_floor_high", after(FAST, CURVE.replace("0.05", "0.5")), "process[fast]"),
    ("curve_floor_zero", after(FAST, CURVE.replace("0.05", "0")), "floor"),
    ("curve_levels_1", after(FAST, CURVE.replace(" }", ", levels = 1 }")), "levels"),
    ("curve_levels_1000", after(FAST, CURVE.replace(" }", ", levels = 1000 }")), "levels"),
    (
        "curve_table_empty",
        after(FAST, 'defect_reduction = { form = "table" }\n'),
        "defect_reduction",
    ),
    (
        "curve_point_text",
        after(FAST, 'defect_reduction = { form = "table", points = [["x", 1.0, 1.0]] }\n'),
        "points",
    ),
    (
        "curve_point_cost",
        after(
            FAST, 'defect_reduction = { form = "table", points = [["0.05 /cm^2", -1.0, 1.0]] }\n'
        ),
        "points",
    ),
    (
        "curve_point_short",
        after(FAST, 'defect_reduction = { form = "table", points = [["0.05 /cm^2", 1.0]] }\n'),
        "points",
    ),
    (
        "critical_factor_zero",
        T + "\n[critical_area_reduction]\nsensitivity_factor = [0.0]\narea_overhead = [0.01]\n",
        "sensitivity_factor",
    ),
    (
        "critical_lengths",
        T
        + "\n[critical_area_reduction]\nsensitivity_factor = [0.9, 0.8]\narea_overhead = [0.01]\n",
        "critical_area_reduction",
    ),
    (
        "requirement_yield_zero",
        T + "\n[requirements]\nmin_die_yield = 0.0\n",
        "requirements.min_die_yield",
    ),
    (
        "requirement_level_one",
        T + "\n[requirements]\nmax_defect_level = 1.0\n",
        "requirements.max_defect_level",
    ),
    (
        "requirement_sigma_negative",
        T + "\n[requirements]\nmin_sigma_margin = -1.0\n",
        "min_sigma_margin",
    ),
    # ---- names
    ("name_15000_chars", edit(('name = "io"\nkind', f'name = "{"x" * 15_000}"\nkind')), "name"),
    ("name_line_break", edit(('name = "io"\nkind', 'name = "i\\no"\nkind')), "name"),
    ("name_empty", edit(('name = "io"\nkind', 'name = ""\nkind')), "name"),
    ("name_number", edit(('name = "io"\nkind', "name = 5\nkind")), "name"),
    ("process_twice", edit(('name = "cheap"', 'name = "fast"')), "process[fast].name"),
    ("block_twice", edit(('name = "io"\nkind', 'name = "compute"\nkind')), "block[compute].name"),
    (
        "no_process",
        edit(("[[process]]", "[[processes]]"), ("[[process]]", "[[processes]]")),
        "process",
    ),
    # ---- explicit designs
    ("copies_zero", edit(("copies = 2", "copies = 0")), "design[split].die[cpu].copies"),
    (
        "die_blocks_empty",
        edit(("blocks = { io = 1 }", "blocks = {}")),
        "design[split].die[hub].blocks",
    ),
    ("die_blocks_zero", edit(("blocks = { io = 1 }", "blocks = { io = 0 }")), "die[hub].blocks.io"),
    (
        "die_option_5",
        after("blocks = { io = 1 }\n", "critical_area_option = 5\n"),
        "critical_area_option",
    ),
    (
        "die_sigma_nan",
        after("blocks = { io = 1 }\n", "sigma_margin = nan\n"),
        "die[hub].sigma_margin",
    ),
    (
        "die_unknown_block",
        edit(("blocks = { io = 1 }", "blocks = { io = 1, gpu = 1 }")),
        "blocks.gpu",
    ),
    (
        "die_unknown_process",
        edit(('process = "cheap"\nblocks', 'process = "tiny"\nblocks')),
        "die[hub].process",
    ),
    (
        "die_spares_elsewhere",
        after("blocks = { io = 1 }\n", "spares = { compute = 1 }\n"),
        "spares.compute",
    ),
    (
        "die_repair_without_section",
        after("blocks = { io = 1 }\n", "repair = { io = 1 }\n"),
        "repair.io",
    ),
    (
        "design_unknown_packaging",
        edit(('packaging = "multi"', 'packaging = "glue"')),
        "design[split].packaging",
    ),
    (
        "design_twice_placed",
        edit(("blocks = { compute = 1 }", "blocks = { compute = 1, io = 1 }")),
        "design[split].die",
    ),
    (
        "design_over_packaging",
        edit(("max_dies = 4\nbond", "max_dies = 2\nbond")),
        "design[split].die",
    ),
    (
        "design_target_unknown",
        after('packaging = "multi"\n', 'defect_targets = { nope = "0.05 /cm^2" }\n'),
        "defect_targets",
    ),
    (
        "design_target_text",
        after('packaging = "multi"\n', 'defect_targets = { fast = "x" }\n'),
        "defect_targets",
    ),
    (
        "design_die_over_reticle",
        edit(('area = "150 mm^2"', 'area = "500 mm^2"')),
        "design[mono].die",
    ),
    # ---- contradictions and impossible constraints, known before solving
    ("block_over_reticle", edit(('area = "150 mm^2"', 'area = "900 mm^2"')), "block[compute].area"),
    (
        "block_over_max_die_area",
        edit((CONSTRAINTS, 'max_die_area = "100 mm^2"\n')),
        "block[compute].area",
    ),
    (
        "keep_both_ways",
        after(
            CONSTRAINTS, 'keep_together = [["compute", "io"]]\nkeep_apart = [["io", "compute"]]\n'
        ),
        "constraints.keep_apart[0]",
    ),
    (
        "keep_chained",
        after(
            CONSTRAINTS,
            'keep_together = [["compute", "cache"], ["cache", "io"]]\n'
            'keep_apart = [["compute", "io"]]\n',
            NO_DESIGNS + THIRD_BLOCK,
        ),
        "constraints.keep_apart[0]",
    ),
    (
        "keep_group_too_big",
        edit((CONSTRAINTS, 'max_die_area = "300 mm^2"\nkeep_together = [["compute", "io"]]\n')),
        "constraints.keep_together[0]",
    ),
    (
        "keep_duplicate_name",
        after(CONSTRAINTS, 'keep_apart = [["io", "io"]]\n'),
        "constraints.keep_apart[0]",
    ),
    (
        "keep_single_name",
        after(CONSTRAINTS, 'keep_together = [["io"]]\n'),
        "constraints.keep_together[0]",
    ),
    (
        "keep_unknown_block",
        after(CONSTRAINTS, 'keep_apart = [["io", "gpu"]]\n'),
        "constraints.keep_apart[0]",
    ),
    (
        "min_die_area_above_field",
        edit((CONSTRAINTS, 'max_die_area = "2000 mm^2"\nmin_die_area = "1000 mm^2"\n')),
        "constraints.min_die_area",
    ),
    (
        "min_die_area_above_content",
        edit(
            (CONSTRAINTS, CONSTRAINTS + 'min_die_area = "400 mm^2"\n'),
            ('area = "150 mm^2"', 'area = "50 mm^2"'),
        ),
        "constraints.min_die_area",
    ),
    (
        "keep_apart_over_max_dies",
        edit(
            (CONSTRAINTS, CONSTRAINTS + 'keep_apart = [["compute", "io"]]\n'),
            ("max_dies = 4\n", "max_dies = 1\n"),
        ),
        "constraints.keep_apart[0]",
    ),
    (
        "too_much_silicon",
        edit((CONSTRAINTS, 'max_die_area = "300 mm^2"\n'), ("max_dies = 4\n", "max_dies = 1\n")),
        "constraints.max_dies",
    ),
    (
        "only_single_die_packaging",
        edit(
            (CONSTRAINTS, 'max_die_area = "300 mm^2"\n'),
            base=NO_DESIGNS[: NO_DESIGNS.index('[[packaging]]\nname = "multi"')]
            + NO_DESIGNS[NO_DESIGNS.index("[design_cost]") :],
        ),
        "constraints.max_dies",
    ),
    (
        "interposer_too_small",
        edit(
            (
                'kind = "organic_substrate"',
                'kind = "silicon_interposer"\ninterposer_process = "cheap"\n'
                'interposer_max_area = "100 mm^2"',
            ),
            base=NO_DESIGNS[: NO_DESIGNS.index('[[packaging]]\nname = "single"')]
            + NO_DESIGNS[NO_DESIGNS.index('[[packaging]]\nname = "multi"') :],
        ),
        "packaging[multi].interposer_max_area",
    ),
    (
        "interposer_extra_over_wafer",
        edit(
            (
                'kind = "organic_substrate"',
                'kind = "silicon_interposer"\ninterposer_process = "cheap"\n'
                'interposer_extra_area = "50000 mm^2"',
            )
        ),
        "packaging[multi].interposer_extra_area",
    ),
    (
        "interposer_over_wafer",
        edit(
            (
                'kind = "organic_substrate"',
                'kind = "silicon_interposer"\ninterposer_process = "cheap"\n'
                'interposer_area_factor = 10.0\ninterposer_extra_area = "40000 mm^2"',
            ),
            base=NO_DESIGNS[: NO_DESIGNS.index('[[packaging]]\nname = "single"')]
            + NO_DESIGNS[NO_DESIGNS.index('[[packaging]]\nname = "multi"') :],
        ),
        "packaging[multi].interposer_process",
    ),
    (
        "interposer_over_wafer_beside_others",
        edit(
            (
                'kind = "organic_substrate"',
                'kind = "silicon_interposer"\ninterposer_process = "cheap"\n'
                'interposer_area_factor = 10.0\ninterposer_extra_area = "40000 mm^2"',
            ),
            base=NO_DESIGNS,
        ),
        "packaging[multi].interposer_process",
    ),
    ("dies_too_small_to_count", edit(('area = "40 mm^2"', 'area = "0.0001 mm^2"')), "die_count"),
    # ---- uncertain inputs
    (
        "uncertain_path_unknown",
        T + UNCERTAIN.replace("market.volume", "market.colour"),
        "uncertain[0].path",
    ),
    ("uncertain_path_long", T + UNCERTAIN.replace("market.volume", "x" * 500), "uncertain[0].path"),
    (
        "uncertain_distribution",
        T + UNCERTAIN.replace('"normal"', '"gamma"'),
        "uncertain[0].distribution",
    ),
    (
        "uncertain_mean_text",
        T + UNCERTAIN.replace("mean = 1e5", 'mean = "1e5"'),
        "uncertain[0].mean",
    ),
    (
        "uncertain_std_negative",
        T + UNCERTAIN.replace("std = 1e4", "std = -1.0"),
        "uncertain[0].std",
    ),
    ("uncertain_mean_nan", T + UNCERTAIN.replace("mean = 1e5", "mean = nan"), "uncertain[0].mean"),
]

# Cases also run through `solve`, `evaluate` and `sweep` (exploration loads files its
# own way).
SAMPLE = {
    "not_utf8",
    "nested_arrays_5000",
    "area_product",
    "area_power",
    "wafer_kilometre",
    "volume_inf",
    "price_1e308",
    "bandwidth_negative",
    "port_negative",
    "defect_density_1e9",
    "salvage_min_good_zero",
    "name_15000_chars",
    "keep_chained",
    "keep_group_too_big",
    "block_over_reticle",
    "dies_too_small_to_count",
}


def test_corpus_is_large_and_distinct():
    ids = [case[0] for case in CASES]
    assert len(ids) == len(set(ids))
    assert len({case[1] for case in CASES}) == len(CASES)  # no two files alike
    assert len(CASES) >= 100
    assert SAMPLE <= set(ids)


def _run(tmp_path, content: str | bytes, args: list[str]):
    path = tmp_path / "bad.toml"
    if isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_text(content, encoding="utf-8")
    return path, runner.invoke(app, [args[0], str(path), *args[1:]])


def _assert_one_clean_line(path, result, named: str) -> None:
    assert result.exit_code == 2, (result.exit_code, result.output[-500:])
    assert "Traceback" not in result.output
    lines = result.stderr.splitlines()
    assert len(lines) == 1, lines[:5]
    line = lines[0]
    assert line.startswith(f"dieplan: {path}: "), line
    assert named in line, line
    # short: under 300 characters for any file path up to 80 characters
    assert len(line) - len(f"dieplan: {path}: ") <= 210, line
    assert "; " in line, line  # what is wrong; what to do


@pytest.mark.parametrize(("case_id", "content", "named"), CASES, ids=[c[0] for c in CASES])
def test_bad_file_is_one_line_exit_2(tmp_path, case_id, content, named):
    path, result = _run(tmp_path, content, ["check"])
    _assert_one_clean_line(path, result, named)


@pytest.mark.parametrize(
    ("case_id", "content", "named"),
    [c for c in CASES if c[0] in SAMPLE],
    ids=[c[0] for c in CASES if c[0] in SAMPLE],
)
@pytest.mark.parametrize(
    "command",
    [
        ["solve", "--no-write"],
        ["evaluate"],
        ["sweep", "--vary", "market.volume", "1e4", "1e5", "--no-write"],
    ],
    ids=["solve", "evaluate", "sweep"],
)
def test_bad_file_fails_alike_in_every_command(tmp_path, case_id, content, named, command):
    path, result = _run(tmp_path, content, command)
    _assert_one_clean_line(path, result, named)
