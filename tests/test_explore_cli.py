"""The exploration commands as a user meets them: run folders, JSON, one-line errors."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from tests.conftest import TINY_PROBLEM
from tests.explore_cases import BREAK_EVEN, UNCERTAIN

runner = CliRunner()


def _folder(results: Path) -> Path:
    folders = [p for p in results.iterdir() if not p.name.startswith(".")]
    assert len(folders) == 1
    return folders[0]


def test_sweep_writes_its_run_folder(write_problem, tmp_path):
    problem = write_problem(BREAK_EVEN)
    results = tmp_path / "results"
    out = runner.invoke(
        app,
        [
            "sweep",
            str(problem),
            "--vary",
            "market.volume",
            "1e4",
            "1e8",
            "--steps",
            "5",
            "--log",
            "--workers",
            "1",
            "--results",
            str(results),
        ],
    )
    assert out.exit_code == 0, out.output
    folder = _folder(results)
    assert f"wrote {folder}" in out.stdout.replace("\n", "")
    names = {p.name for p in folder.iterdir()}
    assert {
        "points.csv",
        "crossovers.csv",
        "curves.csv",
        "designs.json",
        "options.json",
        "profit.png",
        "profit.svg",
        "problem.toml",
    } <= names
    options = json.loads((folder / "options.json").read_text())
    assert options["axes"][0] == {
        "path": "market.volume",
        "unit": "",
        "low": 1e4,
        "high": 1e8,
        "steps": 5,
        "log": True,
    }
    assert "Crossovers" in out.stdout


def test_sweep_json_and_two_axes(write_problem, tmp_path):
    problem = write_problem(TINY_PROBLEM)
    out = runner.invoke(
        app,
        [
            "sweep",
            str(problem),
            "--vary",
            "process.cheap.wafer_cost",
            "2000",
            "12000",
            "--steps",
            "3",
            "--vary2",
            "market.volume",
            "1e4",
            "1e6",
            "--steps2",
            "2",
            "--log2",
            "--workers",
            "1",
            "--json",
            "--results",
            str(tmp_path / "r"),
        ],
    )
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    assert len(payload["points"]) == 6
    assert Path(payload["run_folder"], "winner_map.svg").exists()


@pytest.mark.parametrize(
    ("args", "line"),
    [
        (
            ["--vary", "market.volum", "1", "2"],
            "dieplan: --vary: market.volum: 'volum' is not a field of [market]",
        ),
        (
            ["--vary", "process.slow.wafer_cost", "1", "2"],
            "dieplan: --vary: process.slow.wafer_cost: no process named 'slow'",
        ),
        (
            ["--vary", "process.fast.yield_model", "1", "2"],
            "dieplan: --vary: process.fast.yield_model: 'yield_model' is not a number",
        ),
        (
            ["--vary", "market.volume", "2e6", "1e5"],
            "dieplan: --vary: market.volume: low (2e+06) must be below high (100000)",
        ),
        (
            ["--vary", "market.volume", "0", "1e5", "--log"],
            "dieplan: --vary: market.volume: log steps need a positive low end",
        ),
        (
            ["--vary", "market.volume", "1e4", "1e5", "--steps", "1"],
            "dieplan: --steps: market.volume: needs at least 2 grid points",
        ),
        (
            ["--vary", "packaging.multi.bond_yield", "0.5", "1.5"],
            "dieplan: --vary: packaging.multi.bond_yield: 1.5 makes the problem invalid",
        ),
        (
            ["--vary", "market.volume", "1e4", "1e5", "--vary2", "market.volume", "1", "2"],
            "dieplan: --vary2: market.volume: is already swept by --vary",
        ),
        (
            ["--vary", "market.volume", "1e4", "1e5", "--workers", "0"],
            "dieplan: --workers: must be at least 1",
        ),
    ],
)
def test_bad_sweeps_exit_2_with_one_line(write_problem, tmp_path, args, line):
    results = tmp_path / "results"
    out = runner.invoke(
        app, ["sweep", str(write_problem(TINY_PROBLEM)), *args, "--results", str(results)]
    )
    assert out.exit_code == 2, out.output
    assert out.stderr.startswith(line), out.stderr
    assert out.stderr.count("\n") == 1 and "Traceback" not in out.output
    assert not results.exists() or not any(results.iterdir())  # nothing written


def test_compare_command(write_problem, tmp_path):
    problem = write_problem(TINY_PROBLEM)
    results = tmp_path / "results"
    out = runner.invoke(
        app,
        [
            "compare",
            str(problem),
            "--processes",
            "fast",
            "--processes",
            "fast,cheap",
            "--results",
            str(results),
        ],
    )
    assert out.exit_code == 0, out.output
    folder = _folder(results)
    assert {
        "comparison.csv",
        "cost_by_component.png",
        "cost_by_component.svg",
        "options.json",
        "problem.toml",
    } <= {p.name for p in folder.iterdir()}
    assert "Winners side by side" in out.stdout
    bad = runner.invoke(app, ["compare", str(problem), "--processes", "fast,nope"])
    assert bad.exit_code == 2
    assert bad.stderr.startswith("dieplan: --processes: fast,nope: unknown process ['nope']")


def test_compare_two_files(write_problem, tmp_path):
    first = write_problem(TINY_PROBLEM, name="a.toml")
    second = write_problem(
        TINY_PROBLEM, ("unit_price = 500.0", "unit_price = 700.0"), name="b.toml"
    )
    out = runner.invoke(app, ["compare", str(first), str(second), "--json", "--no-write"])
    assert out.exit_code == 0, out.output
    rows = json.loads(out.stdout)["comparison"]
    assert [r["option"] for r in rows] == ["b.toml", "a.toml"]
    bad = runner.invoke(app, ["compare", str(first), str(second), "--processes", "fast"])
    assert bad.exit_code == 2 and "applies to one problem file" in bad.stderr


def test_sensitivity_command(write_problem, tmp_path):
    problem = write_problem(TINY_PROBLEM + UNCERTAIN)
    results = tmp_path / "results"
    out = runner.invoke(
        app,
        [
            "sensitivity",
            str(problem),
            "--range",
            "block.io.area=35 mm^2:45 mm^2",
            "--json",
            "--results",
            str(results),
        ],
    )
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    assert {r["input"] for r in payload["sensitivity"]} == {
        "process.cheap.defect_density",
        "market.volume",
        "block.io.area",
    }
    assert (Path(payload["run_folder"]) / "tornado.svg").exists()
    bad = runner.invoke(app, ["sensitivity", str(problem), "--range", "market.volume:1:2"])
    assert bad.exit_code == 2 and "write PATH=LOW:HIGH" in bad.stderr


def test_uncertainty_command_is_reproducible(write_problem, tmp_path):
    problem = write_problem(TINY_PROBLEM + UNCERTAIN)
    runs = []
    for _ in range(2):
        out = runner.invoke(
            app,
            [
                "uncertainty",
                str(problem),
                "--samples",
                "40",
                "--seed",
                "9",
                "--top",
                "2",
                "--workers",
                "1",
                "--json",
                "--results",
                str(tmp_path / "results"),
            ],
        )
        assert out.exit_code == 0, out.output
        runs.append(json.loads(out.stdout))
    assert runs[0]["summary"] == runs[1]["summary"]
    folder = Path(runs[0]["run_folder"])
    assert {
        "summary.csv",
        "samples.csv",
        "profit_distribution.png",
        "profit_distribution.svg",
        "options.json",
    } <= {p.name for p in folder.iterdir()}
    options = json.loads((folder / "options.json").read_text())
    assert options["seed"] == 9 and options["samples"] == 40


def test_uncertainty_without_entries_and_bad_entry(write_problem):
    out = runner.invoke(app, ["uncertainty", str(write_problem(TINY_PROBLEM)), "--no-write"])
    assert out.exit_code == 2 and "no [[uncertain]] inputs" in out.stderr
    bad = TINY_PROBLEM + UNCERTAIN.replace(
        "process.cheap.defect_density", "process.chep.defect_density"
    )
    out = runner.invoke(app, ["uncertainty", str(write_problem(bad)), "--no-write"])
    assert out.exit_code == 2
    assert ": uncertain[0].path: no process named 'chep'" in out.stderr


# ---------------------------------------------------------------- stopping a running sweep
def _children(pid: int) -> list[tuple[int, bytes]]:
    """(pid, command line) of the live child processes of ``pid`` (Linux /proc)."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rpartition(")")[2].split()
            if int(fields[1]) == pid and fields[0] not in ("Z", "X"):
                found.append((int(entry.name), (entry / "cmdline").read_bytes()))
        except (OSError, IndexError, ValueError):
            continue
    return found


def _gone(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rpartition(")")[2].split()[0]
    except OSError:
        return True
    return state in ("Z", "X")  # exited, maybe not yet reaped


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc")
@pytest.mark.parametrize(("signum", "code"), [(signal.SIGTERM, 143), (signal.SIGINT, 130)])
def test_stopping_a_sweep_stops_its_workers_and_writes_nothing(
    write_problem, tmp_path, signum, code
):
    # The installed command in its own process, stopped while its 2 workers solve a grid
    # that would take far longer; source: the process table and the results folder.
    problem = write_problem(TINY_PROBLEM)
    results = tmp_path / "results"
    command = [
        sys.executable,
        "-c",
        "from optimizer.cli import app; app()",
        *("sweep", str(problem), "--vary", "process.cheap.wafer_cost", "2000", "12000"),
        *("--steps", "400", "--workers", "2", "--results", str(results)),
    ]
    root = Path(__file__).resolve().parents[1]
    run = subprocess.Popen(
        command, cwd=root, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    workers: list[int] = []
    try:
        deadline = time.monotonic() + 60
        while len(workers) < 2 and time.monotonic() < deadline and run.poll() is None:
            workers = [p for p, line in _children(run.pid) if b"spawn_main" in line]
            time.sleep(0.1)
        assert len(workers) == 2, "the sweep did not start its workers"
        time.sleep(1.0)  # busy solving
        run.send_signal(signum)
        out, err = run.communicate(timeout=30)
    finally:
        run.kill()
        run.wait()
        for pid in workers:  # only if the test failed: our own leftovers, by id
            if not _gone(pid):
                os.kill(pid, signal.SIGKILL)
    assert run.returncode == code, err
    assert err.count("\n") == 1 and err.startswith("dieplan: "), err
    assert "Traceback" not in err and out == ""
    deadline = time.monotonic() + 5
    while not all(_gone(p) for p in workers) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert all(_gone(p) for p in workers), "worker processes outlived the command"
    assert not results.exists() or list(results.iterdir()) == []


def test_names_with_markup_and_math_signs_print_and_draw_as_written(write_problem, tmp_path):
    # '[bold]' would be console markup and '$\frac$' a broken math formula in a figure;
    # both must come out as plain text (exit 0, figures written)
    name = r"[bold]a$\\frac$b"
    text = TINY_PROBLEM.replace('name = "cheap"', f'name = "{name}"').replace(
        'process = "cheap"', f'process = "{name}"'
    )
    results = tmp_path / "results"
    out = runner.invoke(app, ["compare", str(write_problem(text)), "--results", str(results)])
    assert out.exit_code == 0, out.output
    assert r"[bold]a$\frac$b" in out.stdout
    folder = _folder(results)
    assert (folder / "cost_by_component.svg").stat().st_size > 0


def test_only_invented_problems_get_the_invented_data_note():
    # The figure footer claims invented data only where the problem says so (the demos).
    from matplotlib.figure import Figure

    from optimizer.cli_explore import _figure_writers

    def notes(title: str) -> list[str]:
        fig = Figure()
        _figure_writers("x", fig, title)
        return [t.get_text() for t in fig.texts]

    assert "demo data invented" in notes("Edge accelerator (invented demo)")
    assert "demo data invented" not in notes("Our next product")
