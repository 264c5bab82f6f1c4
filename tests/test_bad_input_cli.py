"""Bad options, arguments and environment for every command: one line, exit code 2.

The outside truth is the command-line contract stated in README: any bad input ends in
exactly one line ``dieplan: WHERE: what is wrong; what to do`` on stderr, exit code 2, no
traceback, nothing on stdout and nothing written. Every case below fails before any
solve (they take milliseconds each), except the unreachable scheduler, whose connection
timeout is shortened here.
"""

from __future__ import annotations

import socket

import pytest
from typer.testing import CliRunner

from optimizer.cli import app
from optimizer.explore import parallel
from tests.conftest import TINY_PROBLEM

runner = CliRunner()

UNCERTAIN = """
[[uncertain]]
path = "market.volume"
distribution = "triangular"
low = 6e4
mode = 1e5
high = 2e5
"""

P = "{problem}"  # the tiny problem (with an uncertain input)
F = "{file}"  # an ordinary file, not a folder
R = "{results}"  # a results folder that must stay unwritten
VARY = ["--vary", "market.volume", "1e4", "1e5"]

# (id, arguments, environment, text the line must contain: the option, value or file named)
CASES = [
    # ---- any command
    ("no_command", [], {}, "COMMAND: none given"),
    ("unknown_command", ["sovle", P], {}, "sovle: no such command; did you mean 'solve'"),
    ("unknown_top_level_option", ["--bogus"], {}, "--bogus: no such option"),
    # ---- check
    ("check_missing_file_argument", ["check"], {}, "PROBLEM_PATH: missing"),
    ("check_unknown_option", ["check", P, "--json"], {}, "--json: no such option"),
    ("check_extra_argument", ["check", P, "surplus"], {}, "surplus: unexpected extra argument"),
    ("check_problem_not_found", ["check", "{tmp}/nope.toml"], {}, "nope.toml: file not found"),
    ("check_problem_is_folder", ["check", "{tmp}"], {}, "cannot read the file"),
    ("env_count_workers_text", ["check", P], {"DIEPLAN_COUNT_WORKERS": "many"}, "'many'"),
    ("env_count_workers_zero", ["check", P], {"DIEPLAN_COUNT_WORKERS": "0"}, "'0' is not"),
    ("env_count_workers_empty", ["check", P], {"DIEPLAN_COUNT_WORKERS": ""}, "''"),
    # ---- evaluate
    ("evaluate_unknown_design", ["evaluate", P, "--design", "nope"], {}, "--design"),
    ("evaluate_design_no_value", ["evaluate", P, "--design"], {}, "--design: requires"),
    ("evaluate_option_of_other_command", ["evaluate", P, "--top", "3"], {}, "--top: no such"),
    ("evaluate_flag_with_value", ["evaluate", P, "--json=yes"], {}, "--json: does not take"),
    # ---- solve
    ("solve_top_text", ["solve", P, "--top", "x", "--results", R], {}, "--top: 'x' is not"),
    ("solve_top_zero", ["solve", P, "--top", "0", "--results", R], {}, "--top: 0 is below 1"),
    ("solve_top_fraction", ["solve", P, "-k", "1.5", "--results", R], {}, "--top: '1.5'"),
    ("solve_method_unknown", ["solve", P, "--method", "guess", "--results", R], {}, "--method"),
    ("solve_time_limit_negative", ["solve", P, "--time-limit=-1"], {}, "--time-limit: -1"),
    ("solve_time_limit_nan", ["solve", P, "--time-limit", "nan"], {}, "--time-limit: 'nan'"),
    ("solve_time_limit_text", ["solve", P, "--time-limit", "soon"], {}, "--time-limit: 'soon'"),
    ("solve_die_yield_above_1", ["solve", P, "--require-die-yield", "1.5"], {}, "yield: 1.5"),
    ("solve_die_yield_inf", ["solve", P, "--require-die-yield", "inf"], {}, "--require-die-yield"),
    ("solve_sigma_negative", ["solve", P, "--require-sigma=-1"], {}, "--require-sigma: -1"),
    ("solve_defect_level_1", ["solve", P, "--require-defect-level", "1"], {}, "defect-level: 1"),
    ("solve_results_is_file", ["solve", P, "--results", F], {}, "--results"),
    ("solve_results_under_file", ["solve", P, "--results", F + "/sub"], {}, "lies under the file"),
    ("solve_unknown_option", ["solve", P, "--topp", "2"], {}, "did you mean --top"),
    ("solve_missing_file_argument", ["solve", "--top", "2"], {}, "PROBLEM_PATH: missing"),
    # ---- profit-curve
    ("curve_points_too_few", ["profit-curve", P, "--points", "2"], {}, "--points: 2 is below 3"),
    ("curve_points_text", ["profit-curve", P, "--points", "many"], {}, "--points: 'many'"),
    ("curve_results_is_file", ["profit-curve", P, "--results", F], {}, "--results"),
    ("curve_die_yield_zero", ["profit-curve", P, "--require-die-yield", "0"], {}, "yield: 0"),
    # ---- compare
    ("compare_no_files", ["compare"], {}, "PROBLEM_PATHS: missing"),
    ("compare_processes_two_files", ["compare", P, P, "-p", "fast"], {}, "--processes"),
    ("compare_unknown_process", ["compare", P, "-p", "fast,nope", "--results", R], {}, "nope"),
    ("compare_results_is_file", ["compare", P, "--results", F], {}, "--results: "),
    ("compare_time_limit_text", ["compare", P, "--time-limit", "x"], {}, "--time-limit"),
    # ---- sweep
    ("sweep_missing_vary", ["sweep", P], {}, "--vary: missing"),
    (
        "sweep_vary_two_values",
        ["sweep", P, "--results", R, "--vary", "market.volume", "1"],
        {},
        "--vary: requires 3",
    ),
    ("sweep_vary_unknown_path", ["sweep", P, "--vary", "market.volum", "1", "2"], {}, "volum"),
    ("sweep_vary_not_number", ["sweep", P, "--vary", "market.volume", "lots", "2"], {}, "lots"),
    ("sweep_vary_low_above_high", ["sweep", P, "--vary", "market.volume", "9", "2"], {}, "low"),
    ("sweep_log_from_zero", ["sweep", P, "--vary", "market.volume", "0", "9", "--log"], {}, "log"),
    ("sweep_steps_one", ["sweep", P, *VARY, "--steps", "1"], {}, "--steps"),
    ("sweep_steps_text", ["sweep", P, *VARY, "--steps", "ten"], {}, "--steps: 'ten'"),
    ("sweep_vary2_same_path", ["sweep", P, *VARY, "--vary2", *VARY[1:]], {}, "--vary2"),
    ("sweep_workers_zero", ["sweep", P, *VARY, "--workers", "0"], {}, "--workers"),
    ("sweep_workers_negative", ["sweep", P, *VARY, "--workers=-2"], {}, "--workers"),
    ("sweep_workers_huge", ["sweep", P, *VARY, "--workers", "100000"], {}, "--workers: 100000"),
    ("sweep_scheduler_unparsable", ["sweep", P, *VARY, "--scheduler", "nowhere"], {}, "nowhere"),
    ("sweep_scheduler_protocol", ["sweep", P, *VARY, "--scheduler", "http://h:1"], {}, "'http'"),
    ("sweep_scheduler_bad_port", ["sweep", P, *VARY, "--scheduler", "tcp://h:0"], {}, "port"),
    ("sweep_scheduler_unreachable", ["sweep", P, *VARY, "--scheduler", "{closed}"], {}, "reach"),
    ("sweep_results_is_file", ["sweep", P, *VARY, "--results", F], {}, "--results"),
    # ---- sensitivity
    ("range_no_equals", ["sensitivity", P, "--range", "market.volume"], {}, "PATH=LOW:HIGH"),
    ("range_no_colon", ["sensitivity", P, "--range", "market.volume=1"], {}, "PATH=LOW:HIGH"),
    ("range_unknown_path", ["sensitivity", P, "--range", "market.colour=1:2"], {}, "colour"),
    ("range_reversed", ["sensitivity", P, "--range", "market.volume=9:2"], {}, "--range"),
    ("range_not_number", ["sensitivity", P, "--range", "market.volume=a:2"], {}, "--range"),
    ("sensitivity_results_is_file", ["sensitivity", P, "--results", F], {}, "--results"),
    # ---- uncertainty
    ("seed_negative", ["uncertainty", P, "--seed", "-1"], {}, "--seed: -1 is below 0"),
    ("seed_text", ["uncertainty", P, "--seed", "lucky"], {}, "--seed: 'lucky'"),
    ("samples_one", ["uncertainty", P, "--samples", "1"], {}, "--samples: 1 is below 2"),
    ("samples_text", ["uncertainty", P, "-n", "many"], {}, "--samples: 'many'"),
    ("uncertainty_top_zero", ["uncertainty", P, "--top", "0"], {}, "--top: 0"),
    ("uncertainty_scheduler_no_port", ["uncertainty", P, "--scheduler", "tcp://h"], {}, "port"),
    ("uncertainty_workers_zero", ["uncertainty", P, "--workers", "0"], {}, "--workers"),
    ("uncertainty_results_is_file", ["uncertainty", P, "--results", F], {}, "--results"),
]


@pytest.fixture
def closed_port() -> str:
    """A local TCP address where nothing listens (the port was just released)."""
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    return f"tcp://127.0.0.1:{port}"


@pytest.mark.parametrize(("case_id", "args", "env", "named"), CASES, ids=[c[0] for c in CASES])
def test_bad_input_is_one_line_and_exit_2(
    write_problem, tmp_path, monkeypatch, closed_port, case_id, args, env, named
):
    monkeypatch.setattr(parallel, "CONNECT_TIMEOUT", 0.5)
    problem = write_problem(TINY_PROBLEM + UNCERTAIN)
    a_file = tmp_path / "notes.txt"
    a_file.write_text("not a folder")
    results = tmp_path / "results"
    fill = {
        "problem": str(problem),
        "file": str(a_file),
        "results": str(results),
        "tmp": str(tmp_path),
        "closed": closed_port,
    }
    argv = [a.format(**fill) for a in args]
    if (
        "--results" not in argv
        and argv
        and argv[0]
        in {
            "solve",
            "profit-curve",
            "compare",
            "sweep",
            "sensitivity",
            "uncertainty",
        }
    ):
        argv += ["--results", str(results)]
    out = runner.invoke(app, argv, env=env)
    assert out.exit_code == 2, (out.exit_code, out.output)
    assert "Traceback" not in out.output
    assert out.stderr.startswith("dieplan: "), out.stderr
    assert out.stderr.count("\n") == 1 and out.stderr.endswith("\n"), out.stderr
    assert named in out.stderr, out.stderr
    if case_id != "no_command":  # a bare `dieplan` also shows the help on stdout
        assert out.stdout == ""
    assert not results.exists()  # checked before any work: nothing created


def test_there_are_at_least_40_kinds():
    assert len(CASES) >= 40 and len({c[0] for c in CASES}) == len(CASES)


def test_long_values_are_shortened(write_problem, tmp_path):
    # a 300-character value shows as about 40 characters and an ellipsis
    long = "m" * 300
    out = runner.invoke(app, ["solve", str(write_problem()), "--method", long, "--no-write"])
    assert out.exit_code == 2
    assert "m" * 39 + "…" in out.stderr and "m" * 41 not in out.stderr
    out = runner.invoke(app, ["uncertainty", str(write_problem()), "--seed", "x" * 300])
    assert out.exit_code == 2 and "x" * 41 not in out.stderr and "…" in out.stderr


def test_the_installed_entry_point_takes_the_same_path(write_problem, capsys):
    # pyproject's `dieplan = "optimizer.cli:app"` calls app() with sys.argv; the same
    # one-line handling applies there as through CliRunner
    import sys

    argv = sys.argv
    sys.argv = ["dieplan", "solve", str(write_problem()), "--top", "zero"]
    try:
        with pytest.raises(SystemExit) as info:
            app()
    finally:
        sys.argv = argv
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert err == "dieplan: --top: 'zero' is not a whole number; give a whole number at least 1\n"
