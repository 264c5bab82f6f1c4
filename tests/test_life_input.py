"""Malformed [life] tables: one line naming the file, the field and the fix.

Each case adds a [life] table to the tiny test problem of tests/conftest.py (invented
numbers) with one fault, and the line must name the field written wrong, in the file's
own keys (``life.process.fast.wafer_cost``), and say what to do.
"""

from __future__ import annotations

import pytest

from optimizer.errors import ProblemError
from optimizer.life import MAX_PERIODS, load_life
from tests.conftest import TINY_PROBLEM

HEAD = '[life]\nperiod = "year"\nvolumes = [30000, 50000, 20000]\ndiscount_rate = 0.1\n'


def life(*lines: str, head: str = HEAD) -> str:
    return head + "\n".join(lines) + "\n"


def fast(value: str) -> str:
    return f"[life.process.fast]\n{value}"


# (id, [life] text, the field named, words of the message)
CASES = [
    ("unknown_key", life("colour = 1"), "life.colour", "not a known field; [life] takes period"),
    (
        "missing_period",
        HEAD.replace('period = "year"\n', ""),
        "life.period",
        "required but missing",
    ),
    (
        "missing_rate",
        HEAD.replace("discount_rate = 0.1\n", ""),
        "life.discount_rate",
        "0 for none",
    ),
    (
        "missing_volumes",
        HEAD.replace("volumes = [30000, 50000, 20000]\n", ""),
        "life.volumes",
        "required but missing",
    ),
    ("unknown_period", HEAD.replace('"year"', '"month"'), "life.period", "use one of 'year'"),
    ("period_as_list", HEAD.replace('"year"', '["year"]'), "life.period", "use one of 'year'"),
    ("read_point_as_table", life("read_curves_at = { a = 1 }"), "life.read_curves_at", "'end'"),
    ("volumes_not_a_list", HEAD.replace("[30000, 50000, 20000]", "30000"), "life.volumes", "list"),
    ("no_periods", HEAD.replace("[30000, 50000, 20000]", "[]"), "life.volumes", "list"),
    (
        "negative_volume",
        HEAD.replace("50000", "-50000"),
        "life.volumes[1]",
        "greater than or equal to 1 (got -50000)",
    ),
    ("zero_volume", HEAD.replace("20000]", "0]"), "life.volumes[2]", "use a value from 1"),
    ("volume_as_text", HEAD.replace("50000", '"50000"'), "life.volumes[1]", "remove the quotes"),
    (
        "too_many_periods",
        HEAD.replace("[30000, 50000, 20000]", str([1000] * (MAX_PERIODS + 1))),
        "life.volumes",
        f"at most {MAX_PERIODS}",
    ),
    ("rate_above_one", HEAD.replace("0.1", "1.5"), "life.discount_rate", "from 0 to 1"),
    ("negative_rate", HEAD.replace("0.1", "-0.05"), "life.discount_rate", "from 0 to 1"),
    ("one_time_late", life("one_time_period = 4"), "life.one_time_period", "from 1 to 3"),
    ("one_time_zero", life("one_time_period = 0"), "life.one_time_period", "from 1 to 3"),
    ("one_time_fraction", life("one_time_period = 1.5"), "life.one_time_period", "whole number"),
    ("read_point", life('read_curves_at = "late"'), "life.read_curves_at", "'middle'"),
    ("targets_unknown", life('targets = "sometimes"'), "life.targets", "'per_period'"),
    ("targets_as_number", life("targets = 5"), "life.targets", "'once'"),
    (
        "unknown_process",
        life("[life.process.slow]\nwafer_cost = [1.0, 1.0, 1.0]"),
        "life.process.slow",
        "no [[process]] is named 'slow'; use one of 'fast', 'cheap'",
    ),
    (
        "unknown_packaging",
        life("[life.packaging.bridge]\npackage_cost = [1.0, 1.0, 1.0]"),
        "life.packaging.bridge",
        "use one of 'single', 'multi'",
    ),
    ("process_not_a_table", life("process = 3"), "life.process", "must be a table"),
    ("named_process_not_a_table", life("process = { fast = 3 }"), "life.process.fast", "table"),
    (
        "field_not_varied",
        life(fast("mask_set_cost = [1.0, 1.0, 1.0]")),
        "life.process.fast.mask_set_cost",
        "cannot vary over the life; a process takes defect_density, wafer_cost",
    ),
    (
        "market_volume",
        life("[life.market]\nvolume = [1, 2, 3]"),
        "life.market.volume",
        "life.volumes",
    ),
    (
        "short_list",
        life(fast("wafer_cost = [9000.0, 8000.0]")),
        "life.process.fast.wafer_cost",
        "has 2 values but life.volumes has 3 periods; give one value per period",
    ),
    (
        "long_values",
        life(fast('wafer_cost = { form = "per_period", values = [1.0, 1.0, 1.0, 1.0] }')),
        "life.process.fast.wafer_cost.values",
        "has 4 values",
    ),
    (
        "density_without_unit",
        life(fast('defect_density = ["0.1 /cm^2", "0.09", "0.08 /cm^2"]')),
        "life.process.fast.defect_density[1]",
        "no unit",
    ),
    (
        "density_wrong_dimension",
        life(fast('defect_density = ["0.1 /cm^2", "0.09 /mm", "0.08 /cm^2"]')),
        "life.process.fast.defect_density[1]",
        "wrong dimension",
    ),
    (
        "negative_cost",
        life("[life.packaging.multi]\ncarrier_cost = [15.0, -1.0, 14.0]"),
        "life.packaging.multi.carrier_cost[1]",
        "greater than or equal to 0",
    ),
    (
        "zero_wafer_cost",
        life(fast("wafer_cost = [9000.0, 0.0, 8000.0]")),
        "life.process.fast.wafer_cost[1]",
        "greater than 0",
    ),
    (
        "neither_list_nor_curve",
        life(fast("wafer_cost = 9000.0")),
        "life.process.fast.wafer_cost",
        "a list of one value per period or a curve table",
    ),
    (
        "unknown_form",
        life(fast('wafer_cost = { form = "sigmoid" }')),
        "life.process.fast.wafer_cost.form",
        "got 'sigmoid'; use one of 'per_period', 'erosion'",
    ),
    (
        "missing_form",
        life(fast("wafer_cost = { per_year = 0.1 }")),
        "life.process.fast.wafer_cost.form",
        "required but missing",
    ),
    (
        "key_of_another_form",
        life(fast('wafer_cost = { form = "erosion", per_year = 0.1, mature = 5.0 }')),
        "life.process.fast.wafer_cost.mature",
        "does not belong to a 'erosion' curve (it takes per_year)",
    ),
    (
        "missing_time_constant",
        life(fast('defect_density = { form = "learn_by_time", mature = "0.05 /cm^2" }')),
        "life.process.fast.defect_density.time_constant",
        "required but missing for a 'learn_by_time' curve",
    ),
    (
        "mature_above_base",
        life(
            fast(
                'defect_density = { form = "learn_by_time", mature = "0.2 /cm^2", '
                'time_constant = "1 year" }'
            )
        ),
        "life.process.fast.defect_density.mature",
        "0.2 /cm^2 is above the file's base value 0.1 /cm^2",
    ),
    (
        "mature_in_mm2",
        life(
            fast(
                'defect_density = { form = "learn_by_time", mature = "5 mm^2", '
                'time_constant = "1 year" }'
            )
        ),
        "life.process.fast.defect_density.mature",
        "wrong dimension",
    ),
    (
        "time_constant_as_length",
        life(
            fast(
                'defect_density = { form = "learn_by_time", mature = "0.05 /cm^2", '
                'time_constant = "1 mm" }'
            )
        ),
        "life.process.fast.defect_density.time_constant",
        "wrong dimension for a time",
    ),
    (
        "time_constant_zero",
        life(
            fast(
                'defect_density = { form = "learn_by_time", mature = "0.05 /cm^2", '
                'time_constant = "0 year" }'
            )
        ),
        "life.process.fast.defect_density.time_constant",
        "greater than 0 year",
    ),
    (
        "erosion_of_one",
        life(fast('wafer_cost = { form = "erosion", per_year = 1 }')),
        "life.process.fast.wafer_cost.per_year",
        "must be below 1",
    ),
    (
        "erosion_above_one",
        life(fast('wafer_cost = { form = "erosion", per_year = 1.5 }')),
        "life.process.fast.wafer_cost.per_year",
        "less than or equal to 1",
    ),
    (
        "price_eroded_below_minimum",
        life('[life.market]\nunit_price = { form = "erosion", per_year = 0.999999 }'),
        "life.market.unit_price",
        "in period Y2, outside unit_price's range",
    ),
    (
        "wafer_starts_short",
        life(
            fast(
                'defect_density = { form = "learn_by_wafers", mature = "0.05 /cm^2", '
                "wafer_scale = 100, wafer_starts = [10, 10] }"
            )
        ),
        "life.process.fast.defect_density.wafer_starts",
        "has 2 values but life.volumes has 3 periods",
    ),
    (
        "negative_wafer_starts",
        life(
            fast(
                'defect_density = { form = "learn_by_wafers", mature = "0.05 /cm^2", '
                "wafer_scale = 100, wafer_starts = [10, -10, 10] }"
            )
        ),
        "life.process.fast.defect_density.wafer_starts[1]",
        "greater than or equal to 0",
    ),
    (
        "zero_wafer_scale",
        life(
            fast(
                'defect_density = { form = "learn_by_wafers", mature = "0.05 /cm^2", '
                "wafer_scale = 0, wafer_starts = [10, 10, 10] }"
            )
        ),
        "life.process.fast.defect_density.wafer_scale",
        "greater than 0",
    ),
]


@pytest.mark.parametrize("case_id, text, field, words", CASES, ids=[c[0] for c in CASES])
def test_bad_life_one_line(write_problem, case_id, text, field, words):
    path = write_problem(TINY_PROBLEM + "\n" + text)
    with pytest.raises(ProblemError) as caught:
        load_life(path)
    error = caught.value
    line = str(error)
    assert "\n" not in line
    assert error.source == str(path)
    assert error.field == field, line
    assert words in error.message, line
    assert ";" in error.message, line  # what is wrong; what to do


def test_a_cost_that_rises_out_of_range(write_problem):
    # doubling every year (per_year = -1): 10,000 x 2^36.5 = 9.7e14 at the middle of Y37,
    # 10,000 x 2^37.5 = 1.9e15 at the middle of Y38, over the 1e15 money limit
    volumes = str([1000] * 40)
    text = life(
        fast('wafer_cost = { form = "erosion", per_year = -1 }'),
        head=HEAD.replace("[30000, 50000, 20000]", volumes),
    )
    with pytest.raises(ProblemError) as caught:
        load_life(write_problem(TINY_PROBLEM + "\n" + text))
    assert caught.value.field == "life.process.fast.wafer_cost"
    assert "gives 1.94368e+15 in period Y38" in caught.value.message


def test_a_zero_density_under_a_reduction_curve(write_problem):
    base = TINY_PROBLEM.replace(
        "fault_coverage = 0.99\n",
        'fault_coverage = 0.99\ndefect_reduction = { form = "log_ratio", floor = "0.05 /cm^2" }\n',
    )
    text = life(fast('defect_density = ["0.1 /cm^2", "0.05 /cm^2", "0 /cm^2"]'))
    with pytest.raises(ProblemError) as caught:
        load_life(write_problem(base + "\n" + text))
    assert caught.value.field == "life.process.fast.defect_density"
    assert "is 0 in period Y3" in caught.value.message


def test_life_not_a_table(write_problem):
    # a top-level key must come before the first table
    path = write_problem("life = 3\n" + TINY_PROBLEM)
    with pytest.raises(ProblemError) as caught:
        load_life(path)
    assert caught.value.field == "life"
    assert "must be a table; write it as [life]" in caught.value.message


def test_an_error_outside_life_is_the_ordinary_one(write_problem):
    text = TINY_PROBLEM.replace("wafer_cost = 10000.0", "wafer_cost = -1.0")
    with pytest.raises(ProblemError) as caught:
        load_life(write_problem(text + "\n" + HEAD))
    assert caught.value.field == "process[fast].wafer_cost"
