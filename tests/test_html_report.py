"""report.html in every run folder: its numbers are the run's, and it loads nothing.

Outside truths: every number checked on the page, read back with the standard library's
HTML parser, equals the number the same run printed with ``--json`` (another path of the
program: the page is built from the run folder's files, not from that output) to the
precision the page shows; money on the page adds up as README "Usage" defines it (cost
components to the cost per good unit; profit = revenue + salvage - volume x
manufacturing cost per good unit - NRE - yield-improvement spend); and the page names
nothing outside itself, checked with regular expressions written here, apart from the
program's own check. Problems are the small invented ones of the other tests.
"""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser
from pathlib import Path

import pytest
from typer.testing import CliRunner

from optimizer import html_report
from optimizer.cli import app
from optimizer.invariants import InvariantViolation
from optimizer.outputs import copy_writer, text_writer, write_run_folder
from tests.conftest import TINY_PROBLEM
from tests.explore_cases import UNCERTAIN

runner = CliRunner()

# a two-product family (invented numbers): the tiny problem's processes and packaging
FAMILY = (
    TINY_PROBLEM.split("[market]")[0]
    + TINY_PROBLEM[TINY_PROBLEM.index("[constraints]") : TINY_PROBLEM.index("[[block]]")]
    + """
[[block]]
name = "compute"
kind = "logic"
area = "150 mm^2"
count = 2

[[block]]
name = "io"
kind = "io"
area = "40 mm^2"

[[product]]
name = "one"
blocks = { compute = 1, io = 1 }
[product.market]
currency = "USD"
unit_price = 300.0
volume = 80000

[[product]]
name = "two"
blocks = { compute = 2, io = 1 }
[product.market]
currency = "USD"
unit_price = 500.0
volume = 100000
"""
)
LIFE = TINY_PROBLEM + (
    '\n[life]\nperiod = "year"\nvolumes = [60000, 100000, 40000]\ndiscount_rate = 0.1\n'
)
# a yield-improvement curve on both processes, for profit-curve
CURVE = (
    '{ form = "log_ratio", floor = "0.02 /cm^2", one_time_per_log = 1.0e6, '
    "per_wafer_per_log = 300.0 }"
)
WITH_CURVE = TINY_PROBLEM.replace(
    "fault_coverage = 0.99\n", f"fault_coverage = 0.99\ndefect_reduction = {CURVE}\n"
).replace("sort_cost_per_die = 0.5\n", f"sort_cost_per_die = 0.5\ndefect_reduction = {CURVE}\n")

RUNS = {
    "solve": ("p.toml", ["solve", "{p}", "--top", "2"]),
    "family": ("f.toml", ["solve", "{p}"]),
    "life": ("l.toml", ["solve", "{p}"]),
    "sweep": (
        "p.toml",
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
    ),
    "compare": ("p.toml", ["compare", "{p}"]),
    "sensitivity": ("p.toml", ["sensitivity", "{p}"]),
    "uncertainty": ("p.toml", ["uncertainty", "{p}", "-n", "40", "--workers", "1"]),
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict[str, tuple[dict, Path]]:
    """Each kind of run once: its --json payload and its run folder."""
    root = tmp_path_factory.mktemp("reports")
    for name, text in {
        "p.toml": TINY_PROBLEM + UNCERTAIN,
        "f.toml": FAMILY,
        "l.toml": LIFE,
        "c.toml": WITH_CURVE,
    }.items():
        (root / name).write_text(text, encoding="utf-8")
    made = {}
    for kind, (problem, args) in RUNS.items():
        argv = [a.format(p=root / problem) for a in args]
        out = runner.invoke(app, [*argv, "--json", "--results", str(root / kind)])
        assert out.exit_code == 0, out.output
        payload = json.loads(out.stdout)
        made[kind] = (payload, Path(payload["run_folder"]))
    # profit-curve has no --json: its stdout names the folder
    out = runner.invoke(app, ["profit-curve", str(root / "c.toml"), "--results", str(root / "pc")])
    assert out.exit_code == 0, out.output
    (folder,) = (root / "pc").iterdir()
    made["profit_curve"] = ({"stdout": out.stdout}, folder)
    return made


# ---------------------------------------------------------------- reading the page
class Page(HTMLParser):
    """Tables by id (header texts, body rows of cell texts), texts of spans with an id."""

    def __init__(self, html: str):
        super().__init__(convert_charrefs=True)
        self.tables: dict[str, dict] = {}
        self.spans: dict[str, str] = {}
        self._table = self._row = self._cell = None
        self._head = False
        self._span: str | None = None
        self.feed(html)

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "table" and "id" in attrs:
            self._table = self.tables[attrs["id"]] = {"head": [], "rows": []}
        elif tag == "thead":
            self._head = True
        elif tag == "tr" and self._table is not None:
            self._row = []
        elif tag in ("td", "th") and self._row is not None:
            self._cell = ""
        elif tag == "span" and "id" in attrs:
            self._span = attrs["id"]
            self.spans[self._span] = ""

    def handle_endtag(self, tag):
        if tag == "table":
            self._table = None
        elif tag == "thead":
            self._head = False
        elif tag in ("td", "th") and self._cell is not None:
            self._row.append(" ".join(self._cell.split()))
            self._cell = None
        elif tag == "tr" and self._row is not None:
            if self._head:
                self._table["head"] = self._row
            else:
                self._table["rows"].append(self._row)
            self._row = None
        elif tag == "span":
            self._span = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell += data
        if self._span is not None:
            self.spans[self._span] += data

    def column(self, table: str, header: str) -> list[str]:
        head = self.tables[table]["head"]
        index = next(i for i, h in enumerate(head) if h.startswith(header))
        return [row[index] for row in self.tables[table]["rows"]]

    def header(self, table: str, header: str) -> str:
        return next(h for h in self.tables[table]["head"] if h.startswith(header))

    def kv(self, table: str) -> dict[str, str]:
        return {row[0]: row[1] for row in self.tables[table]["rows"]}


NUMBER = re.compile(r"\s*(-?[\d,]*\.?\d+)")


def number(cell: str) -> float | None:
    if cell.strip() in ("", "—"):
        return None
    return float(NUMBER.match(cell)[1].replace(",", ""))


def scale_of(header: str) -> float:
    """The unit a header states: [%], [M ...], [ppm] or as is."""
    if "[%]" in header:
        return 0.01
    if "[M " in header:
        return 1e6
    if "[ppm]" in header:
        return 1e-6
    return 1.0


def shown(cell: str, expected: float | None, scale: float = 1.0) -> None:
    """``cell`` shows ``expected`` (in units of ``scale``), rounded as far as it shows."""
    if expected is None:
        assert cell.strip() == "—", cell
        return
    token = NUMBER.match(cell)[1]
    decimals = len(token.split(".")[1]) if "." in token else 0
    tolerance = 0.5 * 10.0**-decimals * scale * (1 + 1e-9) + 1e-12 * abs(expected)
    assert abs(number(cell) * scale - expected) <= tolerance, (cell, expected, scale)


def page_of(folder: Path) -> Page:
    return Page((folder / "report.html").read_text(encoding="utf-8"))


def check_design(page: Page, design: dict, prefix: str = "") -> None:
    """The cost breakdown, die table and profit and loss of one priced design."""
    rows = page.tables[f"{prefix}breakdown"]["rows"]
    assert len(rows) == len(design["breakdown"]) + 1
    for row, value in zip(rows, design["breakdown"].values(), strict=False):
        shown(row[1], value)
    shown(rows[-1][1], design["cost_per_good_unit"])
    # the components shown add up to the cost per good unit shown (README: components)
    parts = sum(number(r[1]) for r in rows[:-1])
    assert parts == pytest.approx(number(rows[-1][1]), abs=0.005 * len(rows) + 1e-9)
    dies = page.tables[f"{prefix}dies"]
    assert len(dies["rows"]) == len(design["dies"])
    for die, yield_cell, gross, area in zip(
        design["dies"],
        page.column(f"{prefix}dies", "die yield"),
        page.column(f"{prefix}dies", "gross dies"),
        page.column(f"{prefix}dies", "area"),
        strict=True,
    ):
        shown(yield_cell, die["die_yield"], 0.01)
        shown(gross, die["gross_dies_per_wafer"])
        shown(area, die["area_mm2"])
    lines = page.tables[f"{prefix}pnl"]["rows"]
    shown(lines[-1][1], design["profit"])
    # README: profit = revenue + salvage - volume x manufacturing cost - NRE - spend
    assert sum(number(r[1]) for r in lines[:-1]) == pytest.approx(
        number(lines[-1][1]), abs=0.5 * len(lines)
    )


# ---------------------------------------------------------------- numbers per kind of run
def test_solve_report_numbers_equal_the_json(runs):
    payload, folder = runs["solve"]
    page = page_of(folder)
    best = payload["best"]
    shown(page.spans["headline-profit"], best["profit"])
    shown(page.spans["headline-cost"], best["cost_per_good_unit"])
    optimum = next(a for a in payload["architectures"] if a["optimum"])
    assert page.spans["winner"].startswith(optimum["architecture"])
    assert page.spans["winner"].endswith(optimum["process_mix"])
    check_design(page, best)
    proof = page.kv("proof")
    assert proof["status"] == "proven optimal" and payload["proven_optimal"] is True
    assert proof["statement"] == payload["proof"]
    for rank, profit in zip(payload["ranked"], page.column("ranked", "profit"), strict=True):
        shown(profit, rank["profit"], 1e6)
    # the decision table: one row per architecture, then its process-mix rows
    rows = page.tables["decision"]["rows"]
    assert len(rows) == sum(1 + len(a["mixes"]) for a in payload["architectures"])
    main = [r for r in rows if r[0] != "held to its mix"]
    assert [r[0] for r in main] == [a["architecture"] for a in payload["architectures"]]
    head = page.tables["decision"]["head"]
    at = {name: head.index(page.header("decision", name)) for name in ("profit", "behind")}
    for row, arch in zip(main, payload["architectures"], strict=True):
        design = arch["design"]
        profit = None if design is None else design["profit"]
        shown(row[at["profit"]], profit, 1e6)
        shown(row[at["behind"]], None if profit is None else best["profit"] - profit, 1e6)


def test_family_report_numbers_equal_the_json(runs):
    payload, folder = runs["family"]
    page = page_of(folder)
    shown(page.spans["headline-profit"], payload["profit"])
    assert page.column("products", "product") == payload["products"]
    for design, alone, price in zip(
        payload["designs"],
        page.column("products", "profit priced alone"),
        page.column("products", "unit price"),
        strict=True,
    ):
        shown(alone, design["profit"], 1e6)
        shown(price, design["unit_price"])
        check_design(page, design, prefix=f"{design['product']}-")
    for die, nre in zip(payload["library"], page.column("library", "NRE"), strict=True):
        shown(nre, die["nre"], 1e6)
    # a shared die's NRE is paid once by the family, in full by each product priced alone
    assert sum(d["profit"] for d in payload["designs"]) <= payload["profit"] * (1 + 1e-12)


def test_life_report_numbers_equal_the_json(runs):
    payload, folder = runs["life"]
    page = page_of(folder)
    shown(page.spans["headline-npv"], payload["npv"])
    shown(page.spans["headline-cost"], payload["design"]["cost_per_good_unit"])
    check_design(page, payload["design"])
    for index, life in enumerate(payload["life"].values(), start=1):
        table = f"periods-{index}"
        assert page.column(table, "period") == [p["period"] for p in life["periods"]]
        for period, cash, cumulative in zip(
            life["periods"],
            page.column(table, "cash flow"),
            page.column(table, "cumulative"),
            strict=True,
        ):
            shown(cash, period["cash_flow"], 1e6)
            shown(cumulative, period["cumulative"], 1e6)
    # the cumulative discounted value at the end of the life is its net present value
    last = page.column("periods-1", "cumulative")[-1]
    shown(last, payload["npv"], 1e6)


def test_sweep_report_numbers_equal_the_json(runs):
    payload, folder = runs["sweep"]
    page = page_of(folder)
    points = payload["points"]
    assert len(page.tables["points"]["rows"]) == len(points)
    for point, volume, profit, cost in zip(
        points,
        page.column("points", "market.volume"),
        page.column("points", "profit"),
        page.column("points", "cost per good unit"),
        strict=True,
    ):
        shown(volume, point["market.volume"])
        shown(profit, point["profit"], 1e6)
        shown(cost, point["cost_per_good_unit"])
    won = [int(number(c)) for c in page.column("winners", "points won")]
    assert sum(won) == len(points)
    shown(page.spans["headline-profit"], max(p["profit"] for p in points))


def test_compare_report_numbers_equal_the_json(runs):
    payload, folder = runs["compare"]
    page = page_of(folder)
    rows = payload["comparison"]
    assert page.column("comparison", "option") == [r["option"] for r in rows]
    for row, profit, cost, behind in zip(
        rows,
        page.column("comparison", "profit"),
        page.column("comparison", "cost per good unit"),
        page.column("comparison", "vs best"),
        strict=True,
    ):
        shown(profit, row["profit"], 1e6)
        shown(cost, row["cost_per_good_unit"])
        shown(behind, row["profit_vs_best"], 1e6)
    best = max(rows, key=lambda r: r["profit"])
    assert page.spans["winner"] == best["option"]
    shown(page.spans["headline-profit"], best["profit"])
    components = page.tables["components"]
    options = components["head"][1:]
    assert options == [r["option"] for r in rows]
    for line in components["rows"][:-1]:
        key = next(k for k, label in html_report.COMPONENTS if label == line[0])
        for row, cell in zip(rows, line[1:], strict=True):
            shown(cell, row[f"cost_{key}"])


def test_sensitivity_and_uncertainty_reports_equal_the_json(runs):
    payload, folder = runs["sensitivity"]
    page = page_of(folder)
    shown(page.spans["headline-profit"], payload["winner"]["profit"])
    assert page.column("sensitivity", "input") == [r["input"] for r in payload["sensitivity"]]
    for row, swing in zip(payload["sensitivity"], page.column("sensitivity", "swing"), strict=True):
        shown(swing, row["swing"], 1e6)
    payload, folder = runs["uncertainty"]
    page = page_of(folder)
    for row, mean, p90, best in zip(
        payload["summary"],
        page.column("summary", "mean"),
        page.column("summary", "P90"),
        page.column("summary", "probability best"),
        strict=True,
    ):
        shown(mean, row["mean"], 1e6)
        shown(p90, row["p90"], 1e6)
        shown(best, row["prob_best"], 0.01)


def test_profit_curve_report_matches_what_the_command_printed(runs):
    printed, folder = runs["profit_curve"]
    page = page_of(folder)
    # its line "profit peaks at ...: profit 32.22 M USD, cost per good unit 177.83"
    line = next(li for li in printed["stdout"].splitlines() if li.startswith("profit peaks"))
    profit_m, cost = re.search(
        r"profit (-?[\d.]+) M \w+, cost per good unit ([\d.]+)", line
    ).groups()
    assert number(page.spans["headline-profit"]) / 1e6 == pytest.approx(float(profit_m), abs=0.006)
    assert number(page.spans["headline-cost"]) == pytest.approx(float(cost), abs=0.006)


# ---------------------------------------------------------------- one file, nothing fetched
EXTERNAL = [
    (re.compile(r"<\s*(script|link|iframe|frame|object|embed|img|base)\b", re.I), "element"),
    (re.compile(r"@import", re.I), "@import"),
    (re.compile(r"https?://", re.I), "URL"),
]
ATTRIBUTE = re.compile(r"\b(?:src|href|srcset|action|poster)\s*=\s*[\"']?([^\"'\s>]*)", re.I)
CSS_URL = re.compile(r"url\(\s*[\"']?([^\"')\s]*)", re.I)


def external_references(html: str) -> list[str]:
    found = [f"{what}: {m[0]}" for pattern, what in EXTERNAL for m in pattern.finditer(html)]
    for pattern in (ATTRIBUTE, CSS_URL):
        found += [m[0] for m in pattern.finditer(html) if not m[1].startswith(("#", "data:"))]
    return found


def test_the_reference_finder_finds_what_a_page_could_fetch():
    for bad in (
        '<img src="x.png">',
        "<link rel=stylesheet href=s.css>",
        '<p style="background: url(paper.png)">',
        "<style>@import 'a.css';</style>",
        '<a href="//host/x">',
        "<script>1</script>",
    ):
        assert external_references(bad), bad
        assert html_report.fetched_resources(bad), bad
    fine = '<a href="#answer">x</a><svg><use xlink:href="#g1"/><path clip-path="url(#c1)"/></svg>'
    assert external_references(fine) == [] and html_report.fetched_resources(fine) == []


@pytest.mark.parametrize(
    "kind",
    ["solve", "family", "life", "sweep", "compare", "sensitivity", "uncertainty", "profit_curve"],
)
def test_every_report_is_one_self_contained_printable_file(runs, kind):
    folder = runs[kind][1]
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert html.startswith("<!DOCTYPE html>")
    assert external_references(html) == []
    assert "@media print" in html and "<table" in html
    assert "foundry" in html and "assembly" in html  # the caution
    # every figure of the run is inline, drawn with the run's own SVG paths
    svgs = sorted(folder.glob("*.svg"))
    figures = re.findall(r"<svg\b.*?</svg>", html, flags=re.S)
    assert len(figures) == len(svgs)
    for svg, figure in zip(svgs, figures, strict=True):
        paths = re.findall(r' d="([^"]+)"', svg.read_text(encoding="utf-8"))
        assert paths and sorted(re.findall(r' d="([^"]+)"', figure)) == sorted(paths)
    ids = re.findall(r'\sid="([^"]+)"', html)
    assert len(ids) == len(set(ids)), "an id is used twice on the page"


def test_names_from_the_problem_file_are_printed_as_text(runs, tmp_path):
    payload, folder = runs["solve"]
    title = 'tiny <script>alert("x")</script> & <b>co</b> (invented)'
    toml = (
        (folder / "problem.toml")
        .read_text()
        .replace('title = "tiny test problem (invented numbers)"', f"title = {json.dumps(title)}")
    )
    made = write_run_folder(
        tmp_path,
        "solve",
        "escaped",
        {"solution.json": copy_writer(folder / "solution.json"), "problem.toml": text_writer(toml)},
    )
    html = (made / "report.html").read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt; &amp; &lt;b&gt;co&lt;/b&gt;" in html
    assert external_references(html) == []


def test_a_report_that_would_load_something_is_refused_and_nothing_is_written(tmp_path):
    results = tmp_path / "results"
    sneaky = '<svg viewBox="0 0 1 1"><image href="http://127.0.0.1:9/x.png"/></svg>'
    with pytest.raises(InvariantViolation, match="report.html would load"):
        write_run_folder(results, "sweep", "p", {"figure.svg": text_writer(sneaky)})
    assert list(results.iterdir()) == []


def test_a_payload_the_page_cannot_read_gives_the_plain_page_with_the_reason(
    write_problem, tmp_path, monkeypatch
):
    # a field the page does not know must not cost the run its folder
    def unknown(folder):
        raise KeyError("a_new_field")

    monkeypatch.setitem(html_report.GATHER, "compare", unknown)
    results = tmp_path / "results"
    out = runner.invoke(app, ["compare", str(write_problem()), "--results", str(results)])
    assert out.exit_code == 0, out.output
    (folder,) = results.iterdir()
    html = (folder / "report.html").read_text(encoding="utf-8")
    assert "could not read the run's results (KeyError: &#39;a_new_field&#39;)" in html
    assert "<code>comparison.json</code>" in html and "<svg" in html
    assert external_references(html) == []


def test_a_report_that_cannot_be_built_at_all_is_one_internal_error_line(
    write_problem, tmp_path, monkeypatch
):
    def broken(folder):
        raise KeyError("x")

    monkeypatch.setitem(html_report.GATHER, "compare", broken)
    monkeypatch.setitem(html_report.GATHER, "generic", broken)
    results = tmp_path / "results"
    out = runner.invoke(app, ["compare", str(write_problem()), "--results", str(results)])
    assert out.exit_code == 3
    assert out.stderr.startswith("dieplan: internal error: report.html could not be built")
    assert out.stderr.count("\n") == 1 and "Traceback" not in out.output
    assert not results.exists() or list(results.iterdir()) == []


def test_a_folder_of_unknown_content_still_gets_a_page(tmp_path):
    made = write_run_folder(tmp_path, "solve", "p", {"a.txt": text_writer("x")})
    html = (made / "report.html").read_text(encoding="utf-8")
    assert "<code>a.txt</code>" in html and external_references(html) == []
