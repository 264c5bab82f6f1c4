"""The README's problem-file reference is generated from the schema and complete."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from optimizer import problem as schema
from optimizer.reference import MEANINGS, reference_markdown, rows, sections, shape

ROOT = Path(__file__).resolve().parent.parent
START, END = "<!-- reference:start -->\n", "<!-- reference:end -->"


def test_readme_block_matches_the_schema():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    assert text.count(START) == 1 and text.count(END) == 1
    block = text.split(START, 1)[1].split(END, 1)[0]
    assert block == reference_markdown(), (
        "README reference is stale; regenerate it with python -m optimizer.reference"
    )


def test_every_field_has_a_meaning():
    missing = [
        (path, row[0]) for path, _, model in sections() for row in rows(path, model) if not row[5]
    ]
    assert missing == []


def test_every_section_of_the_schema_is_walked():
    walked = {model for _, _, model in sections()}
    every = {
        value
        for value in vars(schema).values()
        if isinstance(value, type) and issubclass(value, schema._Section)
    } - {schema._Section}
    assert walked == every


def test_no_meaning_is_left_over():
    keys = {(path, row[0].strip("`")) for path, _, model in sections() for row in rows(path, model)}
    assert set(MEANINGS) - keys == set()


def test_units_ranges_and_defaults_come_from_the_schema():
    table = reference_markdown()
    assert "| `area` | number | mm^2 | 0.0001 to 160000 | required |" in table
    assert '| `edge_exclusion` | number | mm | 0 to 50 | "3 mm" |' in table
    assert "| `wafer_cost` | number | currency | above 0 to 1e15 | required |" in table
    assert '"poisson" / "murphy"' in table
    spares = "| `spare_choices` | list of integers |  | each 0 to 64; 0 to 64 entries | [0] |"
    assert spares in table
    assert shape(schema.Problem.model_fields["market"].annotation).model is schema.Market


def test_module_prints_the_reference():
    out = subprocess.run(
        [sys.executable, "-m", "optimizer.reference"],
        capture_output=True,
        text=True,
        check=True,
        cwd=ROOT,
    ).stdout
    assert out == reference_markdown()


def _dieplan(*args: str, cwd: Path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [str(Path(sys.executable).parent / "dieplan"), *args],
        capture_output=True,
        text=True,
        cwd=cwd,
    )


def test_new_writes_a_starter_that_checks_and_solves(tmp_path):
    path = tmp_path / "product.toml"
    made = _dieplan("new", str(path), cwd=tmp_path)
    assert made.returncode == 0, made.stderr
    text = path.read_text(encoding="utf-8")
    assert "INVENTED" in text
    for section in ("[market]", "[[market.salvage_bin]]", "[constraints]", "[[process]]",
                    "[process.area_scale]", "defect_reduction =", "margin =", "[design_cost]",
                    "[critical_area_reduction]", "[requirements]", "[[block]]",
                    "[block.repair]", "[[link]]", "[[design]]", "[[design.die]]",
                    "[[uncertain]]"):  # fmt: skip
        assert section in text
    assert 'kind = "single_die"' in text and 'kind = "organic_substrate"' in text
    checked = _dieplan("check", str(path), cwd=tmp_path)
    assert checked.returncode == 0, checked.stderr
    solved = _dieplan("solve", "--no-write", str(path), cwd=tmp_path)
    assert solved.returncode == 0, solved.stderr
    assert not (tmp_path / "results").exists()


def test_new_refuses_to_overwrite(tmp_path):
    path = tmp_path / "mine.toml"
    path.write_text("# mine\n", encoding="utf-8")
    refused = _dieplan("new", str(path), cwd=tmp_path)
    assert refused.returncode == 2
    assert refused.stderr == f"dieplan: {path}: already exists; choose a new path or remove " \
        "the file first\n"  # fmt: skip
    assert path.read_text(encoding="utf-8") == "# mine\n"
