"""Malformed product family files: one line naming file, field and fix; exit code 2.

The outside truth is the command-line contract of README: a bad input ends in exactly
one line ``dieplan: FILE: FIELD: what is wrong; what to do`` on stderr, exit code 2, no
traceback, nothing on stdout and no run folder. Each case edits the invented family file
of tests/test_family_cli.py in one place; the field named is the one edited, as the file
states it (the file's own [[block]], [[link]] and keep-group positions, not those of a
product's copy, which leaves out the blocks the product lacks).
"""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from tests.test_family_cli import (
    FAMILY,
    FAMILY_WITH_DESIGNS,
    LARGE,
    LARGE_DESIGNS,
    SHARED,
    SMALL,
    SMALL_DESIGNS,
)

runner = CliRunner()

BLOCKS_SMALL = "blocks = { core = 2, hub = 1 }"
BLOCKS_LARGE = "blocks = { core = 4, hub = 2 }"
LARGE_NAME = 'name = "large"'
HUB_BLOCK = '[[block]]\nname = "hub"\nkind = "io"\narea = "30 mm^2"\ncount = 2\n'
DSP = '\n[[block]]\nname = "dsp"\nkind = "logic"\narea = "10 mm^2"\n'


def _edit(text: str, old: str, new: str, count: int = 1) -> str:
    assert text.count(old) >= count, f"edit target not found: {old!r}"
    return text.replace(old, new, count)


def _in_large(old: str, new: str) -> str:
    """The family with one edit inside the [[product]] 'large'."""
    return SHARED + SMALL + _edit(LARGE, old, new)


# (id, file text, the field the line names, words of the message)
CASES = [
    ("one_product_only", SHARED + SMALL, "product", "at least 2 [[product]] tables (found 1)"),
    ("no_products", "product = []\n" + SHARED, "product", "found 0"),
    ("product_not_a_list", SHARED + '[product]\nname = "x"\n', "product", "must be a list"),
    (
        "life_plan_in_a_family",
        SHARED
        + SMALL
        + LARGE
        + '\n[life]\nperiod = "year"\nvolumes = [1, 2]\ndiscount_rate = 0.1\n',
        "life",
        "does not yet take a [life] plan",
    ),
    (
        "duplicate_product_names",
        _in_large(LARGE_NAME, 'name = "small"'),
        "product 'small'.name",
        "two products share this name; rename one",
    ),
    ("product_without_name", _in_large(LARGE_NAME, ""), "product[1].name", "needs a name"),
    (
        "product_name_too_long",
        _in_large(LARGE_NAME, f'name = "{"x" * 80}"'),
        "product[1].name",
        "at most 64 characters",
    ),
    (
        "unknown_product_key",
        _in_large(LARGE_NAME, LARGE_NAME + '\ncolour = "red"'),
        "product 'large'.colour",
        "unknown key; a product takes blocks, design",
    ),
    (
        "product_without_market",
        SHARED + SMALL + LARGE.split("[product.market]")[0],
        "product 'large'.market",
        "needs its own [product.market]",
    ),
    (
        "top_level_market",
        SHARED + "\n[market]\nunit_price = 1.0\nvolume = 10\n" + SMALL + LARGE,
        "market",
        "move it into each [[product]] (as [product.market])",
    ),
    (
        "top_level_design",
        FAMILY + '\n[[design]]\nname = "d"\npackaging = "mono"\n',
        "design",
        "as [product.design]",
    ),
    (
        "unknown_block",
        _in_large(BLOCKS_LARGE, "blocks = { core = 4, hubb = 1 }"),
        "product 'large'.blocks.hubb",
        "no [[block]] is named 'hubb'; use one of core, hub",
    ),
    (
        "negative_count",
        _in_large(BLOCKS_LARGE, "blocks = { core = -1, hub = 1 }"),
        "product 'large'.blocks.core",
        "whole number from 0 to 4096",
    ),
    (
        "fractional_count",
        _in_large(BLOCKS_LARGE, "blocks = { core = 1.5, hub = 1 }"),
        "product 'large'.blocks.core",
        "whole number",
    ),
    (
        "all_counts_zero",
        _in_large(BLOCKS_LARGE, "blocks = { core = 0, hub = 0 }"),
        "product 'large'.blocks",
        "holds no block instance; give one",
    ),
    (
        "blocks_not_a_table",
        _in_large(BLOCKS_LARGE, 'blocks = ["core"]'),
        "product 'large'.blocks",
        "must be a table of block name = instance count",
    ),
    (
        "unknown_packaging",
        _in_large(LARGE_NAME, LARGE_NAME + '\npackaging = ["tile"]'),
        "product 'large'.packaging",
        "no [[packaging]] is named 'tile'; use some of mono, tiles",
    ),
    (
        "max_dies_zero",
        _in_large(LARGE_NAME, LARGE_NAME + "\nmax_dies = 0"),
        "product 'large'.max_dies",
        "whole number from 1 to 4096",
    ),
    (
        "max_dies_text",
        _in_large(LARGE_NAME, LARGE_NAME + '\nmax_dies = "four"'),
        "product 'large'.max_dies",
        "whole number from 1 to 4096",
    ),
    (
        "bad_market_value",
        _in_large("volume = 150000", "volume = -5"),
        "product 'large'.market.volume",
        "(in product 'large')",
    ),
    (
        "currencies_differ",
        _in_large('currency = "USD"', 'currency = "EUR"'),
        "product 'large'.market.currency",
        "one currency",
    ),
    (
        # 12 cores of 60 mm^2 need 2 dies of at most 600 mm^2; the product allows one
        "product_admits_no_design",
        _in_large(BLOCKS_LARGE, "blocks = { core = 12, hub = 1 }\nmax_dies = 1"),
        "product 'large'.max_dies",
        "allow more dies",
    ),
    (
        # a shared-table fault on an entry no product holds is still the file's fault,
        # named by its place in the file
        "unnamed_block_in_no_product",
        _edit(FAMILY, HUB_BLOCK, HUB_BLOCK + '\n[[block]]\nkind = "io"\narea = "5 mm^2"\n'),
        "block[2].name",
        "is required but missing",
    ),
    (
        "bad_link_after_links_a_product_drops",
        FAMILY.replace(SMALL, "")
        + DSP
        + '\n[[link]]\nblocks = ["dsp", "hub"]\nbandwidth = "10 GB/s"\n'
        + '\n[[link]]\nblocks = ["core", "cpu"]\nbandwidth = "10 GB/s"\n'
        + SMALL,
        "link[1].blocks",
        "unknown block 'cpu'",
    ),
    (
        # 'small' lacks dsp, so its copy drops keep group 0 and its group 1 comes first;
        # 12 cores and the hub on one die need 750 mm^2, over max_die_area
        "keep_group_numbered_as_in_the_file",
        _edit(
            SHARED,
            "max_dies = 4\n",
            'max_dies = 4\nkeep_together = [["dsp", "hub"], ["core", "hub"]]\n',
        )
        + DSP
        + _edit(SMALL, BLOCKS_SMALL, "blocks = { core = 12, hub = 1 }")
        + _edit(LARGE, BLOCKS_LARGE, "blocks = { core = 4, hub = 1, dsp = 1 }"),
        "product 'small': constraints.keep_together[1]",
        "loosen the group or raise max_die_area",
    ),
    (
        "bad_process_field",
        _edit(FAMILY, 'wafer_diameter = "300 mm"', 'wafer_diameter = "300 mm^2"'),
        "process[node_a].wafer_diameter",
        "",
    ),
    (
        "salvage_bin_on_absent_block",
        SHARED
        + DSP
        + SMALL
        + '\n[[product.market.salvage_bin]]\nname = "b"\nblock = "dsp"\nmin_good = 1\n'
        + "unit_price = 10.0\ndemand = 5\n"
        + LARGE,
        "product 'small'.market.salvage_bin[b].block",
        "unknown block 'dsp'",
    ),
]


@pytest.mark.parametrize(("case_id", "text", "field", "words"), CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("command", ["check", "solve"])
def test_bad_family_file_is_one_line_and_exit_2(tmp_path, case_id, text, field, words, command):
    path = tmp_path / "family.toml"
    path.write_text(text, encoding="utf-8")
    results = tmp_path / "results"
    argv = [command, str(path)] + (["--results", str(results)] if command == "solve" else [])
    out = runner.invoke(app, argv)
    assert out.exit_code == 2, (out.exit_code, out.output)
    assert "Traceback" not in out.output
    line = out.stderr
    assert line.count("\n") == 1 and line.endswith("\n"), line
    assert line.startswith(f"dieplan: {path}: {field}: "), line
    assert words in line, line
    assert out.stdout == ""
    assert not results.exists()


def test_evaluate_names_the_product_missing_a_family_design(tmp_path):
    # 'own_dies' is written for 'small' only: the line names 'large' and the fix
    text = (
        SHARED
        + SMALL
        + SMALL_DESIGNS
        + LARGE
        + LARGE_DESIGNS.split('[[product.design]]\nname = "own_dies"')[0]
    )
    path = tmp_path / "family.toml"
    path.write_text(text, encoding="utf-8")
    out = runner.invoke(app, ["evaluate", str(path)])
    assert out.exit_code == 2 and "Traceback" not in out.output
    assert out.stderr == (
        f"dieplan: {path}: product 'large'.design: has no design named 'own_dies' (product "
        "'small' has one); a family design needs one per product, so add a "
        "[[product.design]] named 'own_dies' under product 'large'\n"
    )
    assert out.stdout == ""


def test_evaluate_family_without_designs(tmp_path):
    path = tmp_path / "family.toml"
    path.write_text(FAMILY, encoding="utf-8")
    out = runner.invoke(app, ["evaluate", str(path)])
    assert out.exit_code == 2 and out.stdout == ""
    assert out.stderr.startswith(f"dieplan: {path}: product.design: no product has a ")


def test_evaluate_unknown_family_design(tmp_path):
    path = tmp_path / "family.toml"
    path.write_text(FAMILY_WITH_DESIGNS, encoding="utf-8")
    out = runner.invoke(app, ["evaluate", str(path), "--design", "nope"])
    assert out.exit_code == 2 and out.stdout == ""
    assert out.stderr.startswith("dieplan: --design: no family design named 'nope'")


def test_bad_product_design_is_named_under_its_product(tmp_path):
    # a die on a process the file lacks, in the design of product 'large'
    text = _edit(
        FAMILY_WITH_DESIGNS,
        "copies = 2\nblocks = { core = 2 }",
        "copies = 2\nblocks = { core = 3 }",
    )
    path = tmp_path / "family.toml"
    path.write_text(text, encoding="utf-8")
    out = runner.invoke(app, ["check", str(path)])
    assert out.exit_code == 2 and out.stdout == "" and "Traceback" not in out.output
    assert out.stderr.startswith(
        f"dieplan: {path}: product 'large'.design[shared_tile].die: block 'core' is placed 6 times"
    ), out.stderr


def test_profit_curve_refuses_a_family(tmp_path):
    path = tmp_path / "family.toml"
    path.write_text(FAMILY, encoding="utf-8")
    results = tmp_path / "results"
    out = runner.invoke(app, ["profit-curve", str(path), "--results", str(results)])
    assert out.exit_code == 2 and out.stdout == ""
    assert out.stderr.startswith(f"dieplan: {path}: product: profit-curve follows one product")
    assert not results.exists()
