"""Product families on the command line: check, solve and evaluate a family file.

Outside truths: the family's money adds up by definition (family profit = the products'
profits, each paying its own NRE, plus the NRE of every shared die design paid once; a
product's profit = revenue + salvage - manufacturing cost - NRE - one-time spend), each
die design's NRE is the file's mask set plus design cost (35e6 here, by hand), and the
JSON must carry the numbers solve_family returns. A solved family design written to
designs.toml, pasted under the products and evaluated, must price to the solved profit.

The family file below is invented (numbers made up for tests): two products built from
one pool of blocks on one process, 'small' (2 cores and a hub) and 'large' (4 cores and
2 hubs). Alone, 'large' is best as one die; in the family it is made of two of the die
'small' is made of, which costs it some profit but saves a mask set and a design.
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.report import CAUTION

runner = CliRunner()

# Every die design's NRE in this file: the mask set plus the design cost per die design,
# 30e6 + 5e6 (no per-mm^2 design cost, no packaging design cost, no links so no
# interface area).
DIE_NRE = 30.0e6 + 5.0e6

SHARED = """
title = "two-product test line (invented numbers)"

[constraints]
min_die_area = "5 mm^2"
max_die_area = "600 mm^2"
max_dies = 4

[[process]]
name = "node_a"
wafer_diameter = "300 mm"
wafer_cost = 9000.0
defect_density = "0.05 /cm^2"
yield_model = "negative_binomial"
clustering_alpha = 2.0
mask_set_cost = 30.0e6

[[packaging]]
name = "mono"
kind = "single_die"
package_cost = 10.0
final_test_cost = 5.0

[[packaging]]
name = "tiles"
kind = "organic_substrate"
max_dies = 4
bond_cost_per_die = 1.0
bond_yield = 0.999
carrier_cost = 20.0
package_cost = 10.0
final_test_cost = 5.0
interface_density = "100 GB/s/mm^2"

[design_cost]
per_die_design = 5.0e6

[[block]]
name = "core"
kind = "logic"
area = "60 mm^2"
count = 4

[[block]]
name = "hub"
kind = "io"
area = "30 mm^2"
count = 2
"""

SMALL = """
[[product]]
name = "small"
blocks = { core = 2, hub = 1 }

[product.market]
currency = "USD"
unit_price = 400.0
volume = 150000
"""

LARGE = """
[[product]]
name = "large"
blocks = { core = 4, hub = 2 }

[product.market]
currency = "USD"
unit_price = 900.0
volume = 150000
"""

FAMILY = SHARED + SMALL + LARGE

# Hand-written family designs, [[product.design]] under each product: 'shared_tile' uses
# one 2-core die design (once in 'small', twice in 'large') and one hub die design in
# both products; 'own_dies' gives each product its own single die.
SMALL_DESIGNS = """
[[product.design]]
name = "shared_tile"
packaging = "tiles"
[[product.design.die]]
name = "tile"
process = "node_a"
blocks = { core = 2 }
[[product.design.die]]
name = "io"
process = "node_a"
blocks = { hub = 1 }

[[product.design]]
name = "own_dies"
packaging = "mono"
[[product.design.die]]
process = "node_a"
blocks = { core = 2, hub = 1 }
"""

LARGE_DESIGNS = """
[[product.design]]
name = "shared_tile"
packaging = "tiles"
[[product.design.die]]
name = "tile"
process = "node_a"
copies = 2
blocks = { core = 2 }
[[product.design.die]]
name = "io"
process = "node_a"
copies = 2
blocks = { hub = 1 }

[[product.design]]
name = "own_dies"
packaging = "mono"
[[product.design.die]]
process = "node_a"
blocks = { core = 4, hub = 2 }
"""

FAMILY_WITH_DESIGNS = SHARED + SMALL + SMALL_DESIGNS + LARGE + LARGE_DESIGNS


def _one_line_error(out) -> str:
    assert out.exit_code == 2, (out.exit_code, out.output)
    assert "Traceback" not in out.output
    assert out.stderr.startswith("dieplan: ") and out.stderr.count("\n") == 1, out.stderr
    assert out.stdout == ""
    return out.stderr


@pytest.fixture(scope="module")
def family_file(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("family") / "line.toml"
    path.write_text(FAMILY, encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def solved(family_file) -> dict:
    """`dieplan solve FILE --json` with a run folder: the payload (run_folder included)."""
    results = family_file.parent / "results"
    out = runner.invoke(app, ["solve", str(family_file), "--json", "--results", str(results)])
    assert out.exit_code == 0, out.output
    return json.loads(out.stdout)


@pytest.fixture(scope="module")
def direct(family_file):
    """The library's own answer for the same file."""
    from optimizer.family import load_family
    from optimizer.solver.family import solve_family

    return solve_family(load_family(family_file), source=str(family_file))


def test_solve_json_carries_solve_familys_numbers(solved, direct):
    from optimizer.report import short_design

    assert solved["products"] == direct.names == ["small", "large"]
    assert solved["proven"] is direct.proven is True
    for key in ("profit", "alone_profit", "reuse_premium", "shared_nre", "shared_targets"):
        assert solved[key] == pytest.approx(getattr(direct, key), rel=1e-9, abs=1e-6), key
    for got, want in zip(solved["designs"], direct.designs, strict=True):
        assert got["profit"] == pytest.approx(want.profit, rel=1e-9)
        assert got["nre"] == pytest.approx(want.nre, rel=1e-9)
        assert got["packaging"] == want.packaging
        assert [d["copies"] for d in got["dies"]] == [d.copies for d in want.dies]
    assert [a["profit"] for a in solved["alone"]] == pytest.approx(
        [d.profit for d in direct.alone], rel=1e-9
    )
    assert [short_design(d) for d in direct.alone]  # both alone designs priced
    assert len(solved["library"]) == len(direct.library)
    for got, want in zip(solved["library"], direct.library, strict=True):
        assert got["users"] == want.users
        assert got["nre"] == pytest.approx(want.nre, rel=1e-12)
        assert got["blocks"] == want.blocks


def test_solve_family_money_adds_up(solved):
    designs = solved["designs"]
    # revenue is the file's price x volume
    assert [d["revenue"] for d in designs] == pytest.approx([400.0 * 150000, 900.0 * 150000])
    for d in designs:
        # profit = revenue + salvage - manufacturing cost - NRE - one-time target spend
        made = d["volume"] * d["manufacturing_cost_per_good_unit"]
        assert d["manufacturing_cost"] == pytest.approx(made, rel=1e-12)
        pnl = d["revenue"] + d["salvage_revenue"] - made - d["nre"] - d["improvement_spend"]
        assert d["profit"] == pytest.approx(pnl, rel=1e-9)
    for die in solved["library"]:
        assert die["nre"] == pytest.approx(DIE_NRE, rel=1e-12)
    # each shared die design is paid once instead of once per product using it
    saved = sum(die["nre"] * (len(die["users"]) - 1) for die in solved["library"])
    assert solved["shared_nre"] == pytest.approx(saved, rel=1e-12)
    assert any(len(die["users"]) == 2 for die in solved["library"])
    total = sum(d["profit"] for d in designs) + solved["shared_nre"] + solved["shared_targets"]
    assert solved["profit"] == pytest.approx(total, rel=1e-9)
    premium = solved["profit"] - solved["alone_profit"]
    assert solved["reuse_premium"] == pytest.approx(premium, rel=1e-9, abs=1e-6)
    assert solved["reuse_premium"] == pytest.approx(
        solved["shared_nre"] + solved["shared_targets"] - solved["profit_given_up_to_share"],
        rel=1e-9,
    )
    assert solved["reuse_premium"] > 0
    # alone each product is one die of its own; together 'large' gives up some profit to
    # be made of two of the die 'small' is made of
    assert [a["n_dies"] for a in solved["alone"]] == [1, 1]
    assert [d["n_dies"] for d in designs] == [1, 2]
    assert solved["profit_given_up_to_share"] > 0
    assert [len(die["users"]) for die in solved["library"]] == [2]
    # copies per unit of each die add up to each product's dies
    for d in designs:
        per_die = sum(lib["users"].get(d["product"], 0) for lib in solved["library"])
        assert per_die == d["n_dies"] == sum(d["library_dies"].values())


def test_solve_gives_each_products_table_within_the_family(solved):
    # one row per (packaging, die count) of each product; the row of the product's own
    # architecture in the optimum carries the family optimum itself
    tables = solved["architectures"]
    assert set(tables) == {"small", "large"}
    for name, design in zip(solved["products"], solved["designs"], strict=True):
        (own,) = [row for row in tables[name] if row["optimum"]]
        assert own["family_profit"] == pytest.approx(solved["profit"], rel=1e-9)
        assert own["packaging"] == design["packaging"]
        behind = [r["behind"] for r in tables[name] if r["family_profit"] is not None]
        assert min(behind) == pytest.approx(0.0, abs=1e-6 * abs(solved["profit"]))


def test_solve_run_folder(solved):
    folder = Path(solved["run_folder"])
    assert folder.name.split("-solve-")[1] == "line"
    assert {p.name for p in folder.iterdir()} == {
        "family.json",
        "library.csv",
        "report.html",
        "products.csv",
        "solver.log",
        "problem.toml",
        "designs.toml",
        "architectures.csv",
    }
    written = json.loads((folder / "family.json").read_text())
    assert written == {k: v for k, v in solved.items() if k != "run_folder"}
    library = (folder / "library.csv").read_text().splitlines()
    assert len(library) == 1 + len(solved["library"])
    assert library[0].split(",")[-2:] == ["copies_small", "copies_large"]
    products = (folder / "products.csv").read_text().splitlines()
    assert [line.split(",")[0] for line in products] == ["product", "small", "large"]
    assert (folder / "problem.toml").read_text() == FAMILY


def test_solved_designs_toml_prices_again_with_evaluate(solved, tmp_path):
    text = (Path(solved["run_folder"]) / "designs.toml").read_text()
    chunks = dict(re.findall(r"# product '(\w+)'\n(.*?)(?=\n# product '|\Z)", text, re.S))
    assert set(chunks) == {"small", "large"}
    path = tmp_path / "with_optimum.toml"
    path.write_text(SHARED + SMALL + chunks["small"] + LARGE + chunks["large"])
    out = runner.invoke(app, ["evaluate", str(path), "--design", "family_optimum", "--json"])
    assert out.exit_code == 0, out.output
    priced = json.loads(out.stdout)["designs"]
    assert len(priced) == 1
    assert priced[0]["profit"] == pytest.approx(solved["profit"], rel=1e-9)
    assert priced[0]["shared_nre"] == pytest.approx(solved["shared_nre"], rel=1e-9)


def test_solve_prints_library_products_and_premium(family_file, direct, monkeypatch):
    from optimizer.report import money
    from optimizer.solver import family as family_solver

    calls = []

    def recorded(family, **options):
        calls.append(options)
        return direct

    # the table is drawn from the library's own answer; the solve itself is tested above
    monkeypatch.setattr(family_solver, "solve_family", recorded)
    out = runner.invoke(app, ["solve", str(family_file), "--no-write", "--time-limit", "50"])
    assert out.exit_code == 0, out.output
    text = " ".join(out.stdout.split())
    for words in (
        "Die library",
        "Products, each priced alone",
        "all products",
        "NRE paid once instead of per product",
        f"Reuse premium: {money(direct.reuse_premium, 'USD')}",
        f"family profit {money(direct.profit, 'USD')}",
        "proven optimal",
        " ".join(CAUTION.split()),
    ):
        assert words in text, words
    assert "small" in text and "large" in text and "(1/unit)" in text
    # --time-limit reaches the solver as what is left of it
    assert len(calls) == 1 and 0 < calls[0]["time_limit"] <= 50


@pytest.mark.parametrize(
    "option",
    [
        ["--top", "2"],
        ["--mixes", "2"],
        ["--by-architecture"],
        ["--require-die-yield", "0.9"],
        ["--require-sigma", "3"],
        ["--require-defect-level", "1e-4"],
    ],
)
def test_solve_refuses_single_product_options(family_file, tmp_path, option):
    results = tmp_path / "results"
    out = runner.invoke(app, ["solve", str(family_file), *option, "--results", str(results)])
    line = _one_line_error(out)
    assert line.startswith(f"dieplan: {option[0]}: does not apply to the product family"), line
    assert "drop it" in line
    assert not results.exists()


@pytest.fixture
def designs_file(tmp_path) -> Path:
    path = tmp_path / "designed.toml"
    path.write_text(FAMILY_WITH_DESIGNS, encoding="utf-8")
    return path


def test_evaluate_prices_family_designs(designs_file):
    out = runner.invoke(app, ["evaluate", str(designs_file), "--json"])
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    assert payload["products"] == ["small", "large"]
    found = {d["design"]: d for d in payload["designs"]}
    assert set(found) == {"shared_tile", "own_dies"}
    shared, own = found["shared_tile"], found["own_dies"]
    # 'shared_tile': the tile and the hub die are each designed once for both products
    assert shared["shared_nre"] == pytest.approx(2 * DIE_NRE, rel=1e-12)
    alone = sum(p["profit"] for p in shared["products"])
    assert shared["profit"] == pytest.approx(alone + 2 * DIE_NRE, rel=1e-12)
    assert [p["nre"] for p in shared["products"]] == pytest.approx([2 * DIE_NRE, 2 * DIE_NRE])
    # 'own_dies': nothing shared, the family is the products' sum
    assert own["shared_nre"] == 0.0
    assert own["profit"] == pytest.approx(sum(p["profit"] for p in own["products"]), rel=1e-12)
    # best family design first
    assert payload["designs"][0]["profit"] >= payload["designs"][1]["profit"]


def test_evaluate_family_member_prices_as_its_own_file(designs_file, tmp_path):
    # the product 'large' written out by hand as an ordinary single-product file
    single = tmp_path / "large_alone.toml"
    single.write_text(
        SHARED
        + "\n[market]"
        + LARGE.split("[product.market]")[1]
        + LARGE_DESIGNS.replace("[[product.design", "[[design"),
        encoding="utf-8",
    )
    alone = runner.invoke(app, ["evaluate", str(single), "--json"])
    assert alone.exit_code == 0, alone.output
    family = runner.invoke(app, ["evaluate", str(designs_file), "--json"])
    by_design = {d["design"]: d["products"][1] for d in json.loads(family.stdout)["designs"]}
    for design in json.loads(alone.stdout)["designs"]:
        member = by_design[design["design"]]
        assert member["product"] == "large"
        for key in ("profit", "cost_per_good_unit", "nre", "package_yield"):
            assert member[key] == pytest.approx(design[key], rel=1e-12), key


def test_evaluate_family_text_and_one_design(designs_file):
    from optimizer.report import money

    every = json.loads(runner.invoke(app, ["evaluate", str(designs_file), "--json"]).stdout)
    profit = {d["design"]: d["profit"] for d in every["designs"]}
    out = runner.invoke(app, ["evaluate", str(designs_file), "--design", "own_dies"])
    assert out.exit_code == 0, out.output
    text = " ".join(out.stdout.split())
    assert "Family design own_dies" in text and "shared_tile" not in text
    assert f"family profit {money(profit['own_dies'], 'USD')}" in text
    out = runner.invoke(app, ["evaluate", str(designs_file)])
    text = " ".join(out.stdout.split())
    assert "Family designs by family profit" in text and " ".join(CAUTION.split()) in text


def test_check_family_summarises_each_product(designs_file):
    out = runner.invoke(app, ["check", str(designs_file)])
    assert out.exit_code == 0, out.output
    text = " ".join(out.stdout.split())
    assert "family of 2" in text and "is valid" in text
    assert "core x2, hub x1" in text and "core x4, hub x2" in text
    assert "shared_tile," in text and "own_dies" in text
    assert "150,000" in text and "900.00" in text


def test_single_product_files_work_as_before(write_problem, tiny_text):
    from optimizer.designs import evaluate_design
    from optimizer.evaluator import Evaluator
    from optimizer.problem import load_problem
    from optimizer.solver import solve

    path = write_problem(tiny_text)
    problem = load_problem(path)
    out = runner.invoke(app, ["evaluate", str(path), "--json"])
    assert out.exit_code == 0, out.output
    got = {d["design"]: d["profit"] for d in json.loads(out.stdout)["designs"]}
    evaluator = Evaluator(problem)
    want = {d.name: evaluate_design(evaluator, d).profit for d in problem.design}
    assert got == pytest.approx(want, rel=1e-12)
    out = runner.invoke(app, ["check", str(path)])
    assert out.exit_code == 0 and "is valid" in out.stdout and "family" not in out.stdout
    out = runner.invoke(
        app, ["solve", str(path), "--json", "--no-write", "--top", "2", "--table-time", "0"]
    )
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    assert len(payload["ranked"]) == 2 and payload["proven_optimal"]
    best = solve(problem, top=1).best.profit
    assert payload["best"]["profit"] == pytest.approx(best, rel=1e-9)
    assert math.isfinite(best)
