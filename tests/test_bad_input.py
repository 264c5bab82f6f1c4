"""Bad input: one clear line naming file, field and fix; exit code 2; no traceback.

Each case edits one field of the tiny fixture problem.
"""

from __future__ import annotations

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from tests.conftest import TINY_PROBLEM

runner = CliRunner()

CASES = [
    # (id, edits, words the message must contain)
    ("malformed_toml", [("unit_price = 500.0", "unit_price = = 500")], ["not valid TOML"]),
    ("missing_field", [("wafer_cost = 10000.0\n", "")], ["process[fast].wafer_cost", "missing"]),
    (
        "wrong_dimension",
        [('defect_density = "0.1 /cm^2"', 'defect_density = "0.1 mm"')],
        ["process[fast].defect_density", "wrong dimension"],
    ),
    ("no_unit", [('area = "40 mm^2"', 'area = "40"')], ["block[io].area", "no unit"]),
    (
        "negative_area",
        [('area = "40 mm^2"', 'area = "-40 mm^2"')],
        ["block[io].area", "must be greater than or equal to 0.0001 mm^2"],
    ),
    (
        "unknown_block_in_design",
        [("blocks = { io = 1 }", "blocks = { io = 1, gpu = 1 }")],
        ["design[split].die[hub].blocks.gpu", "unknown block"],
    ),
    (
        "unknown_process_in_design",
        [('process = "cheap"\nblocks', 'process = "tiny"\nblocks')],
        ["design[split].die[hub].process", "unknown process 'tiny'"],
    ),
    (
        "block_on_no_die",
        [
            ("copies = 2\nblocks = { compute = 1 }", "copies = 1\nblocks = { compute = 1 }"),
            ("blocks = { io = 1 }", "blocks = { compute = 1 }"),
        ],
        ["design[split].die", "block 'io' is placed on no die"],
    ),
    (
        "zero_instances",
        [("blocks = { io = 1 }", "blocks = { io = 0 }")],
        ["design[split].die[hub].blocks.io", "must be greater than or equal to 1"],
    ),
    (
        "block_placed_twice",
        [("copies = 2\nblocks = { compute = 1 }", "copies = 2\nblocks = { compute = 1, io = 1 }")],
        ["design[split].die", "'io' is placed 3 times"],
    ),
    (
        "die_over_reticle",
        [('area = "150 mm^2"', 'area = "500 mm^2"')],
        ["design[mono].die", "reticle field"],
    ),
    (
        "unknown_field",
        [("package_cost = 10.0\nfinal", "package_cost = 10.0\ncolour = 1\nfinal")],
        ["packaging[single].colour", "not a known field"],
    ),
    (
        "unknown_yield_model",
        [('yield_model = "poisson"', 'yield_model = "gaussian"')],
        ["process[cheap].yield_model", "got 'gaussian'; use one of 'poisson'"],
    ),
]


@pytest.mark.parametrize("case_id, edits, words", CASES, ids=[c[0] for c in CASES])
@pytest.mark.parametrize("command", ["check", "evaluate"])
def test_bad_input_one_line_exit_2(write_problem, tmp_path, case_id, edits, words, command):
    path = write_problem(TINY_PROBLEM, *edits)
    result = runner.invoke(app, [command, str(path)])
    assert result.exit_code == 2, result.output
    message = result.stderr.strip()
    assert "\n" not in message, message
    assert "Traceback" not in result.output
    assert message.startswith(f"dieplan: {path}"), message
    for word in words:
        assert word in message, message


def test_missing_file_exit_2(tmp_path):
    result = runner.invoke(app, ["check", str(tmp_path / "nope.toml")])
    assert result.exit_code == 2
    assert "file not found" in result.stderr


def test_solve_writes_nothing_on_bad_input(write_problem, tmp_path):
    path = write_problem(TINY_PROBLEM, ('defect_density = "0.1 /cm^2"', 'defect_density = "x"'))
    out = tmp_path / "results"
    result = runner.invoke(app, ["solve", str(path), "--results", str(out)])
    assert result.exit_code == 2
    assert not out.exists() or not any(out.iterdir())


TARGET_CASES = [
    (
        "salvage_unknown_block",
        [
            (
                "volume = 100000\n",
                'volume = 100000\nsalvage_bin = [{ name = "lo", block = "gpu", '
                "min_good = 1, unit_price = 10.0, demand = 5.0 }]\n",
            )
        ],
        ["market.salvage_bin[lo].block", "unknown block 'gpu'"],
    ),
    (
        "salvage_min_good_too_high",
        [
            (
                "volume = 100000\n",
                'volume = 100000\nsalvage_bin = [{ name = "lo", block = "compute", '
                "min_good = 2, unit_price = 10.0, demand = 5.0 }]\n",
            )
        ],
        ["market.salvage_bin[lo].min_good", "must be below the block's count"],
    ),
    (
        "target_without_curve",
        [
            (
                'name = "split"\npackaging = "multi"\n',
                'name = "split"\npackaging = "multi"\ndefect_targets = { fast = "0.05 /cm^2" }\n',
            )
        ],
        ["design[split].defect_targets.fast", "is not a target process 'fast' offers"],
    ),
    (
        "margin_lists_differ",
        [
            (
                "fault_coverage = 0.99\n",
                "fault_coverage = 0.99\nmargin = { sigma = [3.0, 4.0], area_overhead = [0.0] }\n",
            )
        ],
        ["process[fast].margin", "same number of entries"],
    ),
    (
        "curve_floor_above_base",
        [
            (
                "fault_coverage = 0.99\n",
                "fault_coverage = 0.99\ndefect_reduction = "
                '{ form = "log_ratio", floor = "0.5 /cm^2" }\n',
            )
        ],
        ["process[fast]", "floor must be above 0 and at most defect_density"],
    ),
]


@pytest.mark.parametrize("case_id, edits, words", TARGET_CASES, ids=[c[0] for c in TARGET_CASES])
def test_bad_yield_target_input(write_problem, case_id, edits, words):
    path = write_problem(TINY_PROBLEM, *edits)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2, result.output
    message = result.stderr.strip()
    assert "\n" not in message
    for word in words:
        assert word in message, message


def test_negative_defect_density_rejected(write_problem):
    path = write_problem(
        TINY_PROBLEM, ('defect_density = "0.1 /cm^2"', 'defect_density = "-0.1 /cm^2"')
    )
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 2
    assert "process[fast].defect_density: must be greater than or equal to 0 /cm^2" in result.stderr


def test_check_refuses_a_mandate_no_die_can_meet(write_problem):
    # solve rejects a file whose mandated die yield no die reaches; check must too.
    # Outside truth: the compute block alone (150 mm^2 on 'fast', 0.1 /cm^2, negative
    # binomial alpha 2) yields (1 + 1.5 x 0.1 / 2)^-2 = 0.865, below 0.9999.
    path = write_problem(TINY_PROBLEM + "\n[requirements]\nmin_die_yield = 0.9999\n")
    for command in ("check", "solve"):
        args = [command, str(path)] + (["--no-write"] if command == "solve" else [])
        result = runner.invoke(app, args)
        assert result.exit_code == 2, result.output
        message = result.stderr.strip()
        assert "\n" not in message and "requirements" in message, message
