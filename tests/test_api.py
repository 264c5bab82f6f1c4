"""The Python API against the command line: the same answers, tables, files and errors.

Every check compares two paths of the program that share no output code any more: the
``dieplan`` command (run in-process through typer's CliRunner) and a direct call of
``optimizer.api``. JSON is compared after a round trip through ``json``, without
``run_folder`` and without wall-clock fields (keys ending in ``seconds``); the demo
problems are small enough that every decision-table row is proven, so both runs agree.
"""

from __future__ import annotations

import io
import json
import tomllib
from pathlib import Path

import pandas as pd
import pytest
from typer.testing import CliRunner

import optimizer
from optimizer import api
from optimizer.cli import app
from optimizer.errors import ProblemError
from optimizer.outputs import clean
from tests.test_startup import HEAVY, loaded_after

ROOT = Path(__file__).resolve().parents[1]
EDGE = ROOT / "problems" / "edge_accelerator.toml"
FAMILY = ROOT / "problems" / "accelerator_family.toml"
LIFE = ROOT / "problems" / "edge_accelerator_life.toml"

runner = CliRunner()


def without_times(value: object) -> object:
    """JSON without run_folder and wall-clock fields, which differ run to run."""
    if isinstance(value, dict):
        return {
            k: without_times(v)
            for k, v in value.items()
            if k != "run_folder" and not k.endswith("seconds")
        }
    if isinstance(value, list):
        return [without_times(v) for v in value]
    return value


def round_trip(payload: dict) -> object:
    return without_times(json.loads(json.dumps(clean(payload))))


def cli_json(*args: str) -> dict:
    out = runner.invoke(app, [*args, "--json"])
    assert out.exit_code == 0, out.output
    return json.loads(out.stdout)


def csv_frame(text: str) -> pd.DataFrame:
    return pd.read_csv(io.StringIO(text))


def same_numbers(folder: Path, name: str, frame: pd.DataFrame) -> None:
    """The DataFrame holds the numbers of the CLI's CSV file (and writes it byte for byte)."""
    text = (folder / name).read_text(encoding="utf-8")
    pd.testing.assert_frame_equal(csv_frame(frame.to_csv(index=False)), csv_frame(text))
    assert frame.to_csv(index=False) == text


# ---------------------------------------------------------------- solve: one product
@pytest.fixture(scope="module")
def edge_solved(tmp_path_factory):
    results = tmp_path_factory.mktemp("cli")
    payload = cli_json("solve", str(EDGE), "--results", str(results))
    return payload, Path(payload["run_folder"]), api.solve(api.load(EDGE))


def test_solve_equals_the_cli_json(edge_solved):
    payload, _, result = edge_solved
    # a comparison of two runs only holds when every row is proven, not cut by time
    assert payload["proven_optimal"] and all(r["proven"] for r in payload["architectures"])
    assert round_trip(result.to_dict()) == without_times(payload)
    assert payload["title"] == "Edge inference accelerator (invented demo)"
    assert payload["options"] == {
        "top": 3,
        "method": "auto",
        "time_limit": None,
        "table_time": 20.0,
        "mixes": 1,
        "by_architecture": False,
        "requirements": {},
    }
    assert result.best.profit == payload["best"]["profit"]


def test_solve_tables_equal_the_cli_csv_files(edge_solved):
    _, folder, result = edge_solved
    same_numbers(folder, "ranked.csv", result.ranked)
    same_numbers(folder, "architectures.csv", result.architectures)
    same_numbers(folder, "flips.csv", result.flips)
    assert list(result.ranked["rank"]) == [1, 2, 3]
    assert result.ranked["profit"].iloc[0] == result.best.profit


def test_solve_write_makes_the_cli_run_folder(edge_solved, tmp_path):
    _, cli_folder, result = edge_solved
    folder = result.write(tmp_path)
    names = sorted(p.name for p in folder.iterdir())
    assert names == sorted(p.name for p in cli_folder.iterdir())
    # solver.log and the report carry wall-clock times; solution.json is compared above
    timed = {"solver.log", "report.html", "solution.json"}
    for name in set(names) - timed:
        assert (folder / name).read_bytes() == (cli_folder / name).read_bytes(), name
    written = json.loads((folder / "solution.json").read_text())
    assert without_times(written) == round_trip(result.to_dict())


# ---------------------------------------------------------------- evaluate, family, life
def test_evaluate_equals_the_cli_json():
    result = api.evaluate(api.load(EDGE))
    assert round_trip(result.to_dict()) == without_times(cli_json("evaluate", str(EDGE)))
    one = api.evaluate(EDGE, design=result.designs[-1].design)
    assert [r.design for r in one.designs] == [result.designs[-1].design]
    # one row per design and per die, the cost components adding up to the unit cost
    assert list(result.overview["profit"]) == [r.profit for r in result.designs]
    assert len(result.dies) == sum(len(r.dies) for r in result.designs)
    totals = result.costs.groupby("design", sort=False)["per_unit"].sum()
    for r in result.designs:
        assert totals[r.design] == pytest.approx(r.cost_per_good_unit, rel=1e-12)


def test_family_solve_equals_the_cli(tmp_path):
    payload = cli_json("solve", str(FAMILY), "--results", str(tmp_path))
    result = api.solve(api.load(FAMILY))
    assert result.problem_file.kind == "family"
    assert round_trip(result.to_dict()) == without_times(payload)
    assert payload["options"]["method"] == "milp"  # the family search's own default
    folder = Path(payload["run_folder"])
    for name, frame in (
        ("library.csv", result.library),
        ("products.csv", result.products),
        ("architectures.csv", result.architectures),
    ):
        cli = csv_frame((folder / name).read_text())
        pd.testing.assert_frame_equal(csv_frame(frame.to_csv(index=False)), cli, obj=name)


def test_life_solve_and_evaluate_equal_the_cli(tmp_path):
    payload = cli_json("solve", str(LIFE), "--results", str(tmp_path))
    result = api.solve(api.load(LIFE))
    assert round_trip(result.to_dict()) == without_times(payload)
    periods = csv_frame((Path(payload["run_folder"]) / "periods.csv").read_text())
    pd.testing.assert_frame_equal(csv_frame(result.periods.to_csv(index=False)), periods)
    assert list(result.decision["npv"]) == [r["npv"] for r in payload["architectures"]]
    priced = api.evaluate(LIFE)
    assert round_trip(priced.to_dict()) == without_times(cli_json("evaluate", str(LIFE)))
    assert len(priced.periods) == sum(len(v.periods) for v in priced.values)


# ---------------------------------------------------------------- exploration
def test_sweep_equals_the_cli(tmp_path):
    args = ["market.volume", "1e5", "1e7"]
    payload = cli_json(
        "sweep", str(EDGE), "--vary", *args, "--steps", "4", "--workers", "1",
        "--results", str(tmp_path),
    )  # fmt: skip
    result = api.sweep(api.load(EDGE, exploring=True), *args, steps=4, workers=1)
    assert round_trip(result.to_dict()) == without_times(payload)
    folder = Path(payload["run_folder"])
    same_numbers(folder, "points.csv", result.points)
    same_numbers(folder, "crossovers.csv", result.crossovers)


def test_compare_equals_the_cli():
    payload = cli_json(
        "compare", str(EDGE), "--processes", "fine", "-p", "middle,older", "--no-write"
    )
    result = api.compare(EDGE, processes=["fine", ["middle", "older"]])
    assert round_trip(result.to_dict()) == without_times(payload)
    assert list(result.table["option"]) == [row["option"] for row in payload["comparison"]]


# ---------------------------------------------------------------- loading
def test_loading_a_dict_equals_loading_the_file(tmp_path):
    data = tomllib.loads(EDGE.read_text(encoding="utf-8"))
    from_dict = api.load(data, name=str(EDGE))
    from_file = api.load(EDGE)
    assert (from_dict.kind, from_dict.source, from_dict.data) == ("problem", str(EDGE), data)
    assert from_dict.parsed == from_file.parsed
    assert api.evaluate(from_dict).to_dict() == api.evaluate(from_file).to_dict()
    for path in (FAMILY, LIFE):
        data = tomllib.loads(path.read_text(encoding="utf-8"))
        assert api.load(data).kind == api.load(path).kind
    # the run folder of a dict holds the document as TOML that reads back the same
    data["title"] = 'Quotes " and \\ and tab\t and é (invented)'
    written = api.evaluate(api.load(data)).problem_file.problem_writer()
    written(tmp_path / "problem.toml")
    assert tomllib.loads((tmp_path / "problem.toml").read_text(encoding="utf-8")) == data


def test_the_package_offers_the_api_and_stays_light():
    assert optimizer.load is api.load and optimizer.solve is api.solve
    loaded = loaded_after("import optimizer\noptimizer.load\noptimizer.solve")
    assert not loaded & set(HEAVY), sorted(loaded & set(HEAVY))
    assert "optimizer.problem" not in loaded


# ---------------------------------------------------------------- bad input
def bad_cases(tmp_path: Path) -> list[tuple[list[str], object]]:
    broken = tmp_path / "broken.toml"
    broken.write_text(EDGE.read_text().replace("volume = ", "volume = -", 1), encoding="utf-8")
    return [
        (["evaluate", str(EDGE), "--design", "nope"], lambda: api.evaluate(EDGE, "nope")),
        (["solve", str(EDGE), "--method", "fastest"], lambda: api.solve(EDGE, method="fastest")),
        (["solve", str(FAMILY), "--top", "2"], lambda: api.solve(FAMILY, top=2)),
        (["check", str(broken)], lambda: api.load(broken)),
        (["check", str(tmp_path / "missing.toml")], lambda: api.load(tmp_path / "missing.toml")),
        (
            ["sweep", str(EDGE), "--vary", "market.volume", "5", "1", "--no-write"],
            lambda: api.sweep(EDGE, "market.volume", 5, 1),
        ),
    ]


def test_bad_input_raises_the_line_the_cli_prints(tmp_path):
    for argv, call in bad_cases(tmp_path):
        out = runner.invoke(app, argv)
        assert out.exit_code == 2, argv
        with pytest.raises(ProblemError) as caught:
            call()
        assert out.stderr == f"dieplan: {caught.value.line()}\n", argv
