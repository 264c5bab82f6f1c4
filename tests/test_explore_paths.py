"""Paths to numeric inputs, values written back with units, and [[uncertain]] entries."""

from __future__ import annotations

import math
import tomllib

import pytest

from optimizer.explore.paths import (
    PathError,
    apply_values,
    check_uncertain,
    parse_path,
    parse_value,
    problem_with,
    read_value,
    study_from_data,
)
from optimizer.problem import ProblemError, parse_problem
from tests.conftest import TINY_PROBLEM


@pytest.fixture
def tiny() -> dict:
    return tomllib.loads(TINY_PROBLEM)


@pytest.mark.parametrize(
    ("text", "unit", "integer"),
    [
        ("market.volume", "", False),
        ("market.unit_price", "", False),
        ("process.fast.defect_density", "/cm^2", False),
        ("process.fast.wafer_cost", "", False),
        ("process.fast.scribe_width", "mm", False),
        ("process.cheap.area_scale.logic", "", False),
        ("packaging.multi.bond_yield", "", False),
        ("packaging.multi.interface_density", "GB/s/mm^2", False),
        ("block.compute.area", "mm^2", False),
        ("link.compute:io.bandwidth", "GB/s", False),
        ("design_cost.per_die_design", "", False),
        ("constraints.max_dies", "", True),
    ],
)
def test_schema_paths_resolve_with_their_units(text, unit, integer):
    # source: the unit suffix glossary of DEVELOPERS.md (area -> area_mm2, ...)
    path = parse_path(text)
    assert path.text == text
    assert path.unit_text == unit
    assert path.integer is integer


@pytest.mark.parametrize(
    ("text", "value", "attribute"),
    [
        ("process.fast.defect_density", 0.15, lambda p: p.process[0].defect_density_per_cm2),
        ("block.compute.area", 123.4, lambda p: p.block[0].area_mm2),
        ("process.fast.scribe_width", 0.08, lambda p: p.process[0].scribe_width_mm),
        ("link.io:compute.bandwidth", 512.0, lambda p: p.link[0].bandwidth_gbps),
        ("link.0.bandwidth", 64.0, lambda p: p.link[0].bandwidth_gbps),
        ("process.cheap.area_scale.memory", 2.5, lambda p: p.process[1].area_scale.memory),
        ("market.volume", 3.0e5, lambda p: p.market.volume),
        ("constraints.max_dies", 3.0, lambda p: p.constraints.max_dies),
    ],
)
def test_values_round_trip_in_base_units(tiny, text, value, attribute):
    # source: identity — a value written in the field's base unit reads back unchanged
    problem = problem_with(tiny, [(parse_path(text), value)], "t")
    assert attribute(problem) == pytest.approx(value, rel=1e-15)
    assert read_value(problem, parse_path(text)) == pytest.approx(value, rel=1e-15)


def test_unit_fields_are_written_as_quantity_strings(tiny):
    changed = apply_values(tiny, [(parse_path("process.fast.defect_density"), 0.15)])
    assert changed["process"][0]["defect_density"] == "0.15 /cm^2"
    # the original document is left alone
    assert tiny["process"][0]["defect_density"] == "0.1 /cm^2"


def test_missing_default_table_is_created(tiny):
    # "fast" has no area_scale table in the file; the default AreaScale applies
    problem = problem_with(tiny, [(parse_path("process.fast.area_scale.logic"), 1.3)], "t")
    assert problem.process[0].area_scale.logic == 1.3
    assert problem.process[0].area_scale.memory == 1.0


def test_user_values_accept_units():
    # source: unit arithmetic, 50 um = 0.05 mm and 1 cm^2 = 100 mm^2
    assert parse_value(parse_path("process.fast.scribe_width"), "50 um") == pytest.approx(0.05)
    assert parse_value(parse_path("block.compute.area"), "1 cm^2") == pytest.approx(100.0)
    assert parse_value(parse_path("market.volume"), "1e5") == 1e5
    with pytest.raises(PathError, match="defect density"):
        parse_value(parse_path("process.fast.defect_density"), "3 mm")
    with pytest.raises(PathError, match="plain number"):
        parse_value(parse_path("market.volume"), "lots")


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("market.volum", "'volum' is not a field of [market]"),
        ("proces.fast.wafer_cost", "'proces' is not a field"),
        ("process.fast.yield_model", "is not a number"),
        ("process.fast", "ends at the table"),
        ("process", "name the item next"),
        ("block.compute.spare_choices", "list of values"),
        ("market.volume.x", "nothing can follow"),
        ("design.mono.packaging", "explicit designs are not explored"),
        ("market..volume", "empty key"),
        ("", "is empty"),
    ],
)
def test_bad_paths_say_what_to_do(text, words):
    with pytest.raises(PathError, match=words.replace("[", r"\[").replace("]", r"\]")):
        parse_path(text)


def test_unknown_item_names_the_choices(tiny):
    with pytest.raises(ProblemError) as info:
        problem_with(tiny, [(parse_path("process.nope.wafer_cost"), 1.0)], "t.toml")
    assert "no process named 'nope'" in info.value.message
    assert "fast" in info.value.message and "cheap" in info.value.message


def test_integer_fields_take_whole_numbers(tiny):
    with pytest.raises(ProblemError, match="whole numbers"):
        problem_with(tiny, [(parse_path("constraints.max_dies"), 2.5)], "t")


# ---------------------------------------------------------------- [[uncertain]] entries
def _with_uncertain(tiny: dict, *entries: dict) -> dict:
    return {**tiny, "uncertain": list(entries)}


def test_uncertain_default_ranges(tiny):
    # source: the stated defaults, mean -/+ 2 std and median x exp(-/+ 2 sigma_log)
    problem = parse_problem(
        _with_uncertain(
            tiny,
            {"path": "market.volume", "distribution": "normal", "mean": 1e5, "std": 1e4},
            {
                "path": "process.fast.defect_density",
                "distribution": "lognormal",
                "median": "0.1 /cm^2",
                "sigma_log": 0.25,
            },
            {
                "path": "market.unit_price",
                "distribution": "triangular",
                "low": 400,
                "mode": 500,
                "high": 650,
            },
        ),
        "t",
    )
    assert problem.uncertain[0].range() == (8e4, 1.2e5)
    low, high = problem.uncertain[1].range()
    assert low == pytest.approx(0.1 * math.exp(-0.5)) and high == pytest.approx(0.1 * math.exp(0.5))
    assert problem.uncertain[2].range() == (400, 650)


@pytest.mark.parametrize(
    ("entry", "field", "words"),
    [
        (
            {"path": "market.volme", "distribution": "normal", "mean": 1, "std": 1},
            "uncertain[0].path",
            "'volme' is not a field",
        ),
        (
            {"path": "market.volume", "distribution": "lognormal", "median": 1e5},
            "uncertain[0]",
            "needs ['sigma_log']",
        ),
        (
            {"path": "market.volume", "distribution": "normal", "mean": 1e5, "std": 1, "median": 3},
            "uncertain[0]",
            "do not belong",
        ),
        (
            {"path": "market.volume", "distribution": "uniform", "low": 5, "high": 1},
            "uncertain[0]",
            "must be below high",
        ),
        (
            {"path": "market.volume", "distribution": "gamma", "mean": 1, "std": 1},
            "uncertain[0].distribution",
            "use one of",
        ),
    ],
)
def test_bad_uncertain_entries_name_the_entry(tiny, entry, field, words):
    with pytest.raises(ProblemError) as info:
        parse_problem(_with_uncertain(tiny, entry), "t.toml")
    assert info.value.field == field
    assert words in info.value.message


def test_uncertain_item_names_are_checked_on_the_problem(tiny):
    entry = {
        "path": "process.nope.defect_density",
        "distribution": "lognormal",
        "median": 0.1,
        "sigma_log": 0.2,
    }
    problem = parse_problem(_with_uncertain(tiny, entry), "t.toml")
    with pytest.raises(ProblemError) as info:
        check_uncertain(problem, "t.toml")
    assert info.value.line().startswith("t.toml: uncertain[0].path: no process named 'nope'")
    with pytest.raises(ProblemError, match="already described"):
        study_from_data(
            _with_uncertain(
                tiny,
                {"path": "market.volume", "distribution": "uniform", "low": 1, "high": 2},
                {"path": "market.volume", "distribution": "uniform", "low": 1, "high": 3},
            )
        )
