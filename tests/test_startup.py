"""Start-up stays light: structural checks on which libraries a fresh process loads.

No timing here (timings belong in benchmarks/bench_startup.py): each check runs a new
interpreter and reads ``sys.modules``, so a module-level import of a heavy library in
the command line shows up as a failure whatever the machine's speed.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from tests.conftest import TINY_PROBLEM

ROOT = Path(__file__).resolve().parents[1]

# numerics, units, validation, tables, figures, parallel runs and the MILP solver
HEAVY = (
    "numpy",
    "scipy",
    "numba",
    "pandas",
    "matplotlib",
    "pint",
    "pydantic",
    "dask",
    "distributed",
    "pyomo",
    "highspy",
)


def command_names() -> list[str]:
    """Every registered command, the exploration ones included."""
    import typer

    from optimizer.cli import app

    return list(typer.main.get_command(app).commands)


def loaded_after(code: str) -> set[str]:
    """Top-level packages (and optimizer modules) loaded by ``code`` in a new interpreter."""
    script = (
        "import json, sys\n"
        f"{code}\n"
        "names = sorted({m.split('.')[0] for m in sys.modules} | "
        "{m for m in sys.modules if m.startswith('optimizer')})\n"
        "print('MODULES ' + json.dumps(names))\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", script], cwd=ROOT, capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    line = next(x for x in done.stdout.splitlines() if x.startswith("MODULES "))
    return set(json.loads(line.removeprefix("MODULES ")))


def run_cli(*argv_sets: list[str]) -> str:
    """Code running the app in-process on each argv (output hidden); each must exit 0."""
    calls = "".join(
        f"    code = app({argv!r}, standalone_mode=False)\n    assert code == 0, ({argv!r}, code)\n"
        for argv in argv_sets
    )
    return (
        "import contextlib, io\n"
        "from optimizer.cli import app\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n" + calls
    )


def test_importing_the_command_line_loads_no_heavy_library():
    loaded = loaded_after("import optimizer.cli")
    assert not loaded & set(HEAVY), sorted(loaded & set(HEAVY))
    # the library proper (problem schema, evaluator, solver) loads per command
    for module in ("optimizer.problem", "optimizer.evaluator", "optimizer.solver"):
        assert module not in loaded


def test_help_and_version_load_no_heavy_library():
    argv_sets = [["--version"], ["--help"], *[[c, "--help"] for c in command_names()]]
    loaded = loaded_after(run_cli(*argv_sets))
    # typer itself converts option values with pydantic once a command is parsed
    heavy = set(HEAVY) - {"pydantic"}
    assert not loaded & heavy, sorted(loaded & heavy)
    for module in ("optimizer.problem", "optimizer.evaluator", "optimizer.solver"):
        assert module not in loaded


def test_problem_error_is_one_class_under_both_names():
    from optimizer.errors import ProblemError as light
    from optimizer.problem import ProblemError as schema

    assert light is schema


@pytest.mark.parametrize("with_designs", [True, False])
def test_check_loads_neither_solver_nor_tables_nor_figures(tmp_path, with_designs):
    # check validates in full (pint, pydantic) and prices explicit designs (numba), but
    # never needs the MILP, pandas, matplotlib or a worker pool
    text = TINY_PROBLEM if with_designs else TINY_PROBLEM.split("[[design]]")[0]
    path = tmp_path / "p.toml"
    path.write_text(text, encoding="utf-8")
    loaded = loaded_after(run_cli(["check", str(path)]))
    assert {"pint", "pydantic"} <= loaded
    for name in ("pandas", "matplotlib", "pyomo", "highspy", "distributed", "optimizer.solver"):
        assert name not in loaded, name
    # without designs or mandates there is nothing to price: no evaluator, no numba
    assert ("optimizer.evaluator" in loaded) is with_designs
    assert ("numba" in loaded) is with_designs
