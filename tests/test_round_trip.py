"""Every design the solver reports, written as [[design]] TOML, re-prices to its figures.

Outside truth: a round trip. The solver's own figures (cost per good unit, profit,
package yield and every die's yields and defect level) are the reference; the design is
written with ``design_toml``, read back through the problem-file loader like a hand-made
design and priced by ``evaluate``. Nothing is recomputed on the test's side, so the two
must agree to float precision. The keys of the written text are checked by hand.

Problems: the two demos in problems/ (invented data) and seeded random draws from
``tests/random_problems.py`` that between them use every key of a design (finite and
absent margins, critical-area options, spares, repair, table and log_ratio targets
including a continuously refined one, processes without a curve, salvage bins).
"""

from __future__ import annotations

import copy
import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.designs import design_toml, designs_toml, evaluate_design
from optimizer.evaluator import Evaluator
from optimizer.problem import ProblemError, load_problem, parse_problem
from optimizer.solver import solve
from optimizer.units import DEFECT_DENSITY, to_base
from tests.conftest import TINY_PROBLEM
from tests.random_problems import random_problem

RTOL = 1e-12
PROBLEMS = Path(__file__).resolve().parent.parent / "problems"
# single-product demos for one set of numbers (family files round-trip through
# tests/test_family_cli.py; files with a [life] plan are priced per period elsewhere)
DEMOS = sorted(
    p
    for p in PROBLEMS.glob("*.toml")
    if "[[product]]" not in p.read_text() and "\n[life]" not in p.read_text()
)
# Picked from a scan of seeds 1-200: 5 puts its dies on table curves, 24 and 87 have a
# continuously refined winner, 27 spares, 30 and 15 critical-area options with margins,
# 12 and 64 a process without a curve next to one with, 73 no curve at all.
SEEDS = [5, 12, 13, 15, 24, 27, 30, 64, 73, 87]


def close(a: float, b: float) -> bool:
    return a == b or abs(a - b) <= RTOL * max(abs(a), abs(b))


def assert_same_figures(want, got) -> None:
    pairs = {
        "cost_per_good_unit": (want.cost_per_good_unit, got.cost_per_good_unit),
        "profit": (want.profit, got.profit),
        "package_yield": (want.package_yield, got.package_yield),
        "salvage_revenue": (want.salvage_revenue, got.salvage_revenue),
    }
    assert len(want.dies) == len(got.dies)
    for i, (a, b) in enumerate(zip(want.dies, got.dies, strict=True)):
        for key in ("die_yield", "soft_yield", "hard_yield", "defect_level"):
            pairs[f"die{i}.{key}"] = (getattr(a, key), getattr(b, key))
    wrong = {k: v for k, v in pairs.items() if not close(*v)}
    assert not wrong, wrong


def round_trip(problem, solution, data_or_text):
    """Append every ranked design's snippet, reload, and price each as `evaluate` does."""
    snippets = [
        design_toml(r, f"solved_rank{rank}", problem=problem)
        for rank, r in enumerate(solution.designs, start=1)
    ]
    if isinstance(data_or_text, str):
        reloaded = parse_problem(tomllib.loads(data_or_text + "\n" + "\n".join(snippets)))
    else:
        data = copy.deepcopy(data_or_text)
        data["design"] = list(data.get("design", []))
        for text in snippets:
            data["design"] += tomllib.loads(text)["design"]
        reloaded = parse_problem(data)
    evaluator = Evaluator(reloaded)
    for rank, want in enumerate(solution.designs, start=1):
        got = evaluate_design(evaluator, reloaded.design_named(f"solved_rank{rank}"))
        assert_same_figures(want, got)
    return snippets


@pytest.mark.parametrize("path", DEMOS, ids=[p.stem for p in DEMOS])
def test_demo_designs_round_trip(path):
    problem = load_problem(path)
    solution = solve(problem, top=3, source=str(path))
    snippets = round_trip(problem, solution, path.read_text())
    # hand-checkable: the winner states its margin and option on every die
    text = snippets[0]
    assert text.startswith("# Written by dieplan")
    assert text.count("[[design.die]]") == len(solution.best.dies)
    assert text.count("critical_area_option = ") == len(solution.best.dies)


def test_random_designs_round_trip():
    used = {"refined": False, "margin": False, "no_margin": False, "option": False}
    used |= {"spares": False, "repair": False, "table": False, "no_curve": False}
    for seed in SEEDS:
        data = random_problem(seed)
        problem = parse_problem(data, f"seed {seed}")
        solution = solve(problem, top=3, source=f"seed {seed}")
        snippets = round_trip(problem, solution, data)
        used["refined"] |= solution.targets_refined
        for result, text in zip(solution.designs, snippets, strict=True):
            written = tomllib.loads(text)["design"][0]
            for die in result.dies:
                process = problem.process[problem.process_index(die.process)]
                curve = process.defect_reduction
                used["margin"] |= math.isfinite(die.sigma_margin)
                used["no_margin"] |= not math.isfinite(die.sigma_margin)
                used["option"] |= die.critical_area_option > 0
                used["spares"] |= bool(die.spares)
                used["repair"] |= bool(die.repair)
                used["table"] |= curve is not None and curve.form == "table"
                used["no_curve"] |= curve is None
                # a process without a curve offers only its base density: no key
                assert (die.process in written.get("defect_targets", {})) == (curve is not None)
    assert [k for k, v in used.items() if not v] == []


def test_refined_target_is_written_exactly():
    # seed 24's winner has a target found by a continuous search, not a curve level
    data = random_problem(24)
    problem = parse_problem(data)
    solution = solve(problem, top=1)
    assert solution.targets_refined
    written = tomllib.loads(design_toml(solution.best, problem=problem))["design"][0]
    for die in solution.best.dies:
        text = written["defect_targets"][die.process]
        assert to_base(text, DEFECT_DENSITY) == die.defect_density_per_cm2


def test_quantity_text_parses_back_to_the_same_float():
    # the densities written use repr: shortest exact text, inside the unit grammar's
    # 20 digits each side of the point, with exponents such as 1e-05
    rng = np.random.default_rng(5)
    tricky = [1e-05, 1.2345678901234567e-05, 0.00012345678901234567, 0.1 + 0.2, 999.9999999999999]
    values = tricky + [float(x) for x in 10.0 ** rng.uniform(-6, 3, 2000)]
    for x in values:
        assert to_base(f"{x!r} /cm^2", DEFECT_DENSITY) == x, x


def test_snippet_states_every_key():
    data = random_problem(30)
    problem = parse_problem(data)
    best = solve(problem, top=1).best
    design = tomllib.loads(design_toml(best, "mine", problem=problem))["design"][0]
    assert design["name"] == "mine"
    assert design["packaging"] == best.packaging
    for die, written in zip(best.dies, design["die"], strict=True):
        assert set(written) >= {
            "name",
            "process",
            "copies",
            "blocks",
            "spares",
            "repair",
            "critical_area_option",
        }
        assert written["blocks"] == die.blocks
        assert written["copies"] == die.copies
        assert written.get("sigma_margin", math.inf) == die.sigma_margin


def test_cli_solve_writes_designs_that_evaluate_reprices(tmp_path):
    runner = CliRunner()
    path = PROBLEMS / "edge_accelerator.toml"
    out = runner.invoke(
        app, ["solve", str(path), "--top", "2", "--json", "--results", str(tmp_path / "r")]
    )
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    folder = Path(payload["run_folder"])
    written = (folder / "designs.toml").read_text()
    # the ranked designs, then the best of every other architecture
    others = [r for r in payload["architectures"] if r["design"] and not r["optimum"]]
    assert len(payload["ranked"]) == 2
    assert written.count("[[design]]") == 2 + len(others)
    combined = tmp_path / "with_designs.toml"
    combined.write_text(path.read_text() + "\n" + written)
    expected = {"solved_rank1": payload["best"]} | {
        f"best_{r['packaging']}_{r['n_dies']}_dies": r["design"] for r in others
    }
    for name, result in expected.items():
        out = runner.invoke(app, ["evaluate", str(combined), "--design", name, "--json"])
        assert out.exit_code == 0, out.output
        priced = json.loads(out.stdout)["designs"][0]
        assert priced["design"] == name
        assert close(priced["profit"], result["profit"])
        assert close(priced["cost_per_good_unit"], result["cost_per_good_unit"])


def test_designs_toml_names_ranks_in_order():
    problem = load_problem(PROBLEMS / "edge_accelerator.toml")
    solution = solve(problem, top=2)
    text = designs_toml(solution.designs, problem=problem)
    names = [d["name"] for d in tomllib.loads(text)["design"]]
    assert names == ["solved_rank1", "solved_rank2"]
    assert text.count("# Written by dieplan") == 1


def test_a_process_without_a_curve_accepts_its_base_density_as_target(write_problem):
    # Stating the base density (no reduction bought) changes nothing: same price as
    # leaving the target out. Any other density on such a process is refused.
    plain = load_problem(write_problem(TINY_PROBLEM, name="plain.toml"))
    stated = load_problem(
        write_problem(
            TINY_PROBLEM,
            ('name = "split"\n', 'name = "split"\ndefect_targets = { cheap = "0.08 /cm^2" }\n'),
            name="stated.toml",
        )
    )
    a = evaluate_design(Evaluator(plain), plain.design_named("split"))
    b = evaluate_design(Evaluator(stated), stated.design_named("split"))
    assert a.profit == b.profit and a.cost_per_good_unit == b.cost_per_good_unit
    with pytest.raises(ProblemError, match="defect_targets"):
        load_problem(
            write_problem(
                TINY_PROBLEM,
                ('name = "split"\n', 'name = "split"\ndefect_targets = { cheap = "0.07 /cm^2" }\n'),
                name="other.toml",
            )
        )
