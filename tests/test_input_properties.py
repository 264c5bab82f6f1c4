"""Random damage to valid problem files never ends in a traceback.

The outside truth is the command-line contract of the README: ``check`` either accepts
a file (exit 0) or refuses it with exactly one line ``dieplan: FILE: ...`` on stderr and
exit code 2; a file ``check`` accepts can be solved, ending in exit 0 or, when no design
is feasible, in the same one line with exit 2. Files are the demo problems and the tiny
fixture with one to three values replaced by junk of a random type (huge, negative, NaN or
infinite numbers, the edges of the stated ranges, text, lists, tables) or keys deleted.
"""

from __future__ import annotations

import math
import re
import tomllib
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

from optimizer.cli import app
from tests.conftest import TINY_PROBLEM

ROOT = Path(__file__).resolve().parent.parent
runner = CliRunner()

BASES = {
    "tiny": tomllib.loads(TINY_PROBLEM),
    "edge_accelerator": tomllib.loads((ROOT / "problems/edge_accelerator.toml").read_text()),
    "server_processor": tomllib.loads((ROOT / "problems/server_processor.toml").read_text()),
}


# ---------------------------------------------------------------- writing TOML back
_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")


def _string(text: str) -> str:
    out = []
    for c in text:
        if c in '"\\':
            out.append("\\" + c)
        elif ord(c) < 0x20 or ord(c) == 0x7F:
            out.append(f"\\u{ord(c):04x}")
        else:
            out.append(c)
    return '"' + "".join(out) + '"'


def _key(key: str) -> str:
    return key if _BARE_KEY.fullmatch(key) else _string(key)


def _value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, list):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_key(k)} = {_value(v)}" for k, v in value.items()) + "}"
    raise TypeError(type(value))


def to_toml(data: dict) -> str:
    """The document as top-level keys with inline tables (any decoded TOML round-trips)."""
    return "".join(f"{_key(k)} = {_value(v)}\n" for k, v in data.items())


def test_writer_round_trips_the_demo_files():
    # source: tomllib reads back what the writer wrote
    for data in BASES.values():
        assert tomllib.loads(to_toml(data)) == data


# ---------------------------------------------------------------- damage
def node_paths(node: object, path: tuple = ()) -> list[tuple]:
    """Every value's path in the document (keys and list positions), containers too."""
    out = [path] if path else []
    if isinstance(node, dict):
        for key, value in node.items():
            out += node_paths(value, (*path, key))
    elif isinstance(node, list):
        for i, value in enumerate(node):
            out += node_paths(value, (*path, i))
    return out


def damaged(data: dict, path: tuple, junk: object, delete: bool) -> dict:
    """A copy of ``data`` with the value at ``path`` replaced by ``junk`` (or deleted)."""
    out = tomllib.loads(to_toml(data))  # a deep copy
    parent = out
    for step in path[:-1]:
        parent = parent[step]
    if delete and isinstance(parent, dict):
        del parent[path[-1]]
    else:
        parent[path[-1]] = junk
    return out


text = st.text(st.characters(blacklist_categories=("Cs",)), max_size=30)
numbers = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(-(2**63), 2**63 - 1),
    st.sampled_from([0, -1, 1, 2.5, 4096, 4097, 1e15, 1e308, -1e308, 5e-324, 0.0, -0.0]),
    # the edges of the stated ranges, where valid but extreme files live
    st.sampled_from([1e-6, 1e-4, 0.05, 2, 20, 25, 50, 64, 100, 450, 1000, 1e5, 1e6, 1e12]),
)
units = st.sampled_from(
    ["mm", "mm^2", "/cm^2", "1/cm**2", "GB/s", "GB/s/mm^2", "um", "km", "m^2", "pi",
     "percent", "bit/s", "", "mm**9", "*1e300 mm", "mm + 1 mm"]
)  # fmt: skip
quantities = st.builds(lambda n, u: f"{n} {u}", numbers, units)
scalars = st.one_of(numbers, st.booleans(), text, quantities)
junk = st.one_of(
    scalars,
    st.just([]),
    st.lists(scalars, max_size=4),
    st.dictionaries(st.sampled_from(["name", "a", "area", "count", "x"]), scalars, max_size=3),
    st.lists(st.lists(scalars, max_size=2), max_size=2),
)


@st.composite
def damaged_files(draw, bases: tuple[str, ...]) -> dict:
    """A base file with one to three values damaged."""
    data = BASES[draw(st.sampled_from(bases))]
    for _ in range(draw(st.integers(1, 3))):
        paths = node_paths(data)
        if not paths:
            break
        path = paths[draw(st.integers(0, len(paths) - 1))]
        data = damaged(data, path, draw(junk), draw(st.booleans()))
    return data


def run(tmp_path: Path, data: dict, args: list[str]):
    path = tmp_path / "damaged.toml"
    path.write_text(to_toml(data), encoding="utf-8")
    return path, runner.invoke(app, [args[0], str(path), *args[1:]])


def assert_ok_or_one_line(path: Path, result) -> None:
    assert result.exit_code in (0, 2), (result.exit_code, result.output[-2000:])
    assert "Traceback" not in result.output
    if result.exit_code == 2:
        lines = result.stderr.splitlines()
        assert len(lines) == 1, lines[:5]
        assert lines[0].startswith(f"dieplan: {path}: "), lines[0]
    else:
        assert result.stderr == "", result.stderr[:2000]


@settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(data=damaged_files(tuple(BASES)))
def test_check_accepts_or_refuses_in_one_line(tmp_path, data):
    path, result = run(tmp_path, data, ["check"])
    assert_ok_or_one_line(path, result)


@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(data=damaged_files(("tiny",)))
def test_what_check_accepts_can_be_solved(tmp_path, data):
    path, checked = run(tmp_path, data, ["check"])
    assert_ok_or_one_line(path, checked)
    if checked.exit_code == 0:
        path, solved = run(tmp_path, data, ["solve", "--no-write", "--time-limit", "5"])
        assert_ok_or_one_line(path, solved)
