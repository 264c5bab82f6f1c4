"""Run folders and JSON: strict JSON, byte-identical repeats, no leftovers of crashed runs.

Outside truths: RFC 8259 (JSON has no NaN or Infinity: a strict parser rejects them),
byte equality of files from two runs with the same inputs and seed, and the state of
the file system after a simulated crash.
"""

from __future__ import annotations

import json
import math
import os
import re
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from optimizer import outputs
from optimizer.cli import app
from optimizer.outputs import (
    STALE_SECONDS,
    check_results_dir,
    clean,
    figure_writer,
    json_text,
    remove_stale,
    text_writer,
    write_run_folder,
)
from optimizer.problem import ProblemError
from tests.conftest import TINY_PROBLEM
from tests.explore_cases import UNCERTAIN

runner = CliRunner()


def strict_loads(text: str) -> object:
    """A JSON parser that, like strict ones elsewhere, refuses NaN and Infinity."""

    def refuse(name: str) -> None:
        raise ValueError(f"non-standard JSON constant {name}")

    return json.loads(text, parse_constant=refuse)


# ---------------------------------------------------------------- strict JSON
def test_clean_turns_every_non_finite_number_into_null():
    payload = {
        "a": float("nan"),
        "b": [np.float64("inf"), (1, -math.inf)],
        3: np.int64(4),
        "c": np.array([1.5, np.nan]),
        "p": Path("x"),
        "ok": 2.5,
    }
    assert clean(payload) == {
        "a": None,
        "b": [None, [1, None]],
        "3": 4,
        "c": [1.5, None],
        "p": "x",
        "ok": 2.5,
    }
    assert strict_loads(json_text(payload))["b"] == [None, [1, None]]
    with pytest.raises(ValueError):
        strict_loads('{"x": NaN}')  # the checker itself can fail


def test_evaluate_json_is_strict_where_figures_are_undefined(write_problem):
    # price 1 < cost per unit: the design never breaks even (infinite volume); no die
    # has a design margin (infinite sigma): both must come out as null, not Infinity
    path = write_problem(TINY_PROBLEM, ("unit_price = 500.0", "unit_price = 1.0"))
    out = runner.invoke(app, ["evaluate", str(path), "--json"])
    assert out.exit_code == 0, out.output
    assert "Infinity" not in out.stdout and "NaN" not in out.stdout
    payload = strict_loads(out.stdout)
    for design in payload["designs"]:
        assert design["breakeven_volume"] is None
        assert all(die["sigma_margin"] is None for die in design["dies"])
        assert design["profit"] < 0


def test_solve_json_and_its_run_folder_are_strict(write_problem, tmp_path):
    results = tmp_path / "results"
    out = runner.invoke(app, ["solve", str(write_problem()), "--json", "--results", str(results)])
    assert out.exit_code == 0, out.output
    payload = strict_loads(out.stdout)
    assert payload["best"]["dies"][0]["sigma_margin"] is None
    folder = Path(payload["run_folder"])
    strict_loads((folder / "solution.json").read_text())


# ---------------------------------------------------------------- same inputs, same bytes
def _run_twice(args: list[str], results: Path) -> tuple[Path, Path]:
    for _ in range(2):
        out = runner.invoke(app, [*args, "--results", str(results)])
        assert out.exit_code == 0, out.output
    first, second = sorted(p for p in results.iterdir() if not p.name.startswith("."))
    return first, second


def _without_times(value: object) -> object:
    # wall-clock seconds are the only thing allowed to differ between two solves
    if isinstance(value, dict):
        return {k: _without_times(v) for k, v in value.items() if not k.endswith("seconds")}
    if isinstance(value, list):
        return [_without_times(v) for v in value]
    return value


def _log_without_times(text: str) -> str:
    return re.sub(r"\b\d+\.\d+ s\b", "<t> s", text)


# Files that legitimately differ between identical runs, and the only part of each that
# may: solve's solution.json and solver.log hold wall-clock seconds.
MAY_DIFFER = {
    "solution.json": lambda raw: _without_times(json.loads(raw)),
    "solver.log": lambda raw: _log_without_times(raw.decode()),
}


@pytest.mark.parametrize(
    "args",
    [
        ["uncertainty", "{p}", "-n", "40", "--seed", "7", "--top", "2", "--workers", "1"],
        [
            "sweep",
            "{p}",
            "--vary",
            "market.volume",
            "1e4",
            "1e6",
            "--steps",
            "4",
            "--log",
            "--workers",
            "1",
        ],
        # a table with every row proven (rows still open depend on the time they got)
        ["solve", "{p}", "--top", "2", "--table-time", "600"],
    ],
    ids=["uncertainty", "sweep", "solve"],
)
def test_identical_runs_write_identical_files(write_problem, tmp_path, args):
    problem = write_problem(TINY_PROBLEM + UNCERTAIN)
    first, second = _run_twice([a.format(p=problem) for a in args], tmp_path / "results")
    names = sorted(p.name for p in first.iterdir())
    assert names == sorted(p.name for p in second.iterdir())
    for name in names:
        a, b = (first / name).read_bytes(), (second / name).read_bytes()
        if name.endswith(".json"):
            strict_loads(a.decode())
        if name in MAY_DIFFER:
            mask = MAY_DIFFER[name]
            assert mask(a) == mask(b), name
        else:
            assert a == b, f"{name} differs between two identical runs"
    if args[0] != "solve":
        assert any(n.endswith(".svg") for n in names) and any(n.endswith(".png") for n in names)


def test_profit_curve_figure_is_byte_identical(tmp_path):
    # the profit-curve command's figure, built twice from the same table
    from optimizer.targets import profit_curve_figure

    d = np.geomspace(0.1, 0.01, 7)
    frame = pd.DataFrame(
        {
            "defect_density_per_cm2": d,
            "hard_yield": np.exp(-2 * d),
            "profit": 1e6 * (3 - (d - 0.05) ** 2 * 100),
            "cost_per_good_unit": 100 + 1 / d,
            "extrapolated": [False] * 5 + [True] * 2,
        }
    )
    frame.attrs["process"] = "fast"
    files = []
    for i in range(2):
        figure = profit_curve_figure(frame, "USD", 0.9)
        for suffix in ("svg", "png"):
            path = tmp_path / f"curve{i}.{suffix}"
            figure_writer(figure)(path)
            files.append(path.read_bytes())
    svg0, png0, svg1, png1 = files
    assert svg0 == svg1 and png0 == png1
    assert b"<dc:date>" not in svg0 and b"Matplotlib v" not in svg0
    assert b"Matplotlib" not in png0


# ---------------------------------------------------------------- crashed runs
def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def _leftover(results: Path, host: str, pid: int, age: float = 0.0) -> Path:
    folder = results / f".20250101-000000-000000-sweep-x.tmp-{host}-{pid}-abc123_z"
    folder.mkdir(parents=True)
    (folder / "points.csv").write_text("half")
    then = time.time() - age
    os.utime(folder, (then, then))
    return folder


def test_leftovers_of_crashed_writers_are_removed_and_nothing_else(tmp_path):
    results = tmp_path / "results"
    host = outputs._host()
    dead = _leftover(results, host, _dead_pid())
    live_young = _leftover(results, host, os.getppid())  # a live writer
    live_old = _leftover(results, "otherhost", os.getppid() + 1, age=STALE_SECONDS + 60)
    other_host_young = _leftover(results, "otherhost", _dead_pid())
    unrelated = results / ".keep-me"
    unrelated.mkdir()
    finished = results / "20250101-000000-000000-sweep-x"
    finished.mkdir()
    folder = write_run_folder(results, "solve", "p", {"a.txt": text_writer("x")})
    assert not dead.exists() and not live_old.exists()
    # a live writer and one on another host (its pid means nothing here) are left alone
    assert live_young.exists() and other_host_young.exists()
    assert unrelated.exists() and finished.exists() and (folder / "a.txt").exists()
    # an hour on, any leftover counts as stale, whoever wrote it
    later = remove_stale(results, now=time.time() + STALE_SECONDS + 60)
    assert {p.name for p in later} == {live_young.name, other_host_young.name}
    assert unrelated.exists() and finished.exists() and folder.exists()


def test_interrupted_write_leaves_nothing(tmp_path):
    results = tmp_path / "results"

    def interrupted(path: Path) -> None:
        path.write_text("half")
        raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        write_run_folder(results, "sweep", "p", {"a.txt": text_writer("x"), "b": interrupted})
    assert list(results.iterdir()) == []


def test_failed_write_is_one_problem_and_leaves_nothing(tmp_path):
    results = tmp_path / "results"

    def disk_full(path: Path) -> None:
        raise OSError(28, "No space left on device")

    with pytest.raises(ProblemError) as info:
        write_run_folder(results, "sweep", "p", {"a.txt": disk_full})
    assert info.value.source == "--results" and "No space left" in info.value.message
    assert list(results.iterdir()) == []


def test_results_folder_is_checked_without_creating_it(tmp_path):
    a_file = tmp_path / "f"
    a_file.write_text("x")
    check_results_dir(tmp_path / "new" / "deeper")  # creatable: fine, and not created
    assert not (tmp_path / "new").exists()
    for bad, words in ((a_file, "is a file"), (a_file / "sub", "lies under the file")):
        with pytest.raises(ProblemError, match=words):
            check_results_dir(bad)


def test_solve_checks_results_before_reading_the_problem(tmp_path):
    # a results path that is a file is reported even though the problem file is missing:
    # the check comes before any work
    a_file = tmp_path / "f"
    a_file.write_text("x")
    out = runner.invoke(app, ["solve", str(tmp_path / "missing.toml"), "--results", str(a_file)])
    assert out.exit_code == 2 and out.stderr.startswith("dieplan: --results: ")
