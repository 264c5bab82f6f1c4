"""report.html of a demo run, opened in headless Chromium as a reader would open it.

Outside truths: the browser's own rendering (a screenshot that is not blank, and the DOM
text it built, which must hold the run's headline numbers from solution.json formatted
here, not by the program), and the browser's network log, which must show no request
made by the page. A control page that does fetch something shows the log check can fail.
Skipped only where /usr/bin/chromium is absent (.ci/run installs it with apt-get).
"""

from __future__ import annotations

import json
import re
import subprocess
import tempfile
from html.parser import HTMLParser
from pathlib import Path

import pytest
from typer.testing import CliRunner

from optimizer.cli import app

CHROMIUM = Path("/usr/bin/chromium")
DEMO = Path(__file__).resolve().parent.parent / "problems" / "edge_accelerator.toml"

pytestmark = pytest.mark.skipif(
    not CHROMIUM.exists(), reason="/usr/bin/chromium is absent (apt-get install -y chromium)"
)


def chromium(page: Path, *options: str) -> subprocess.CompletedProcess:
    """One headless Chromium run on ``page`` with a new empty profile."""
    with tempfile.TemporaryDirectory() as profile:
        command = [
            str(CHROMIUM),
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            f"--user-data-dir={profile}",
            # the browser's own background calls go to a closed local port, not out
            "--proxy-server=127.0.0.1:9",
            "--hide-scrollbars",
            *options,
            page.as_uri(),
        ]
        return subprocess.run(command, capture_output=True, text=True, timeout=120, check=True)


def page_requests(net_log: Path) -> list[str]:
    """URLs the page asked for, from Chromium's network log.

    Requests of the page carry its origin (a file:// page's is "null") or a network
    isolation key of file://; the browser's own calls are made from "not an origin".
    """
    log = json.loads(net_log.read_text(encoding="utf-8"))
    urls = []
    for event in log["events"]:
        params = event.get("params", {})
        if "url" not in params:
            continue
        initiator = params.get("initiator")
        key = str(params.get("network_isolation_key", ""))
        if (initiator is not None and initiator != "not an origin") or "file://" in key:
            urls.append(params["url"])
    return urls


class Text(HTMLParser):
    """The text a reader sees: everything outside <style> and <svg>."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.parts: list[str] = []
        self._skip = 0

    def handle_starttag(self, tag, attrs):
        self._skip += tag in ("style", "svg")

    def handle_endtag(self, tag):
        self._skip -= tag in ("style", "svg")

    def handle_data(self, data):
        if not self._skip:
            self.parts.append(data)

    def text(self) -> str:
        return " ".join(" ".join(self.parts).split())


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory) -> tuple[dict, Path]:
    results = tmp_path_factory.mktemp("browser") / "results"
    out = CliRunner().invoke(app, ["solve", str(DEMO), "--json", "--results", str(results)])
    assert out.exit_code == 0, out.output
    payload = json.loads(out.stdout)
    return payload, Path(payload["run_folder"]) / "report.html"


def test_demo_report_renders_with_its_numbers_and_fetches_nothing(demo_run, tmp_path):
    payload, report = demo_run
    shot, net_log = tmp_path / "report.png", tmp_path / "net.json"
    chromium(report, f"--screenshot={shot}", "--window-size=1280,2400", f"--log-net-log={net_log}")

    # not blank: a page of text, tables and a figure has many pixel values and ink
    import matplotlib.image

    pixels = matplotlib.image.imread(shot)[..., :3]
    assert pixels.shape[:2] == (2400, 1280)
    assert pixels.std() > 0.05
    assert (pixels.min(axis=2) < 0.5).mean() > 0.01  # dark (text) pixels
    assert page_requests(net_log) == []

    dom = chromium(report, "--dump-dom").stdout
    reader = Text()
    reader.feed(dom)
    text = reader.text()
    best = payload["best"]
    optimum = next(a for a in payload["architectures"] if a["optimum"])
    assert f"{best['profit']:,.0f}" in text
    assert f"{best['cost_per_good_unit']:.2f}" in text
    assert f"{optimum['architecture']}: {optimum['process_mix']}" in text
    assert "foundry" in text and "estimates" in text.lower()


def test_the_network_check_sees_a_page_that_fetches(tmp_path):
    # control: a page asking a closed local port for an image must show up in the log
    page = tmp_path / "fetching.html"
    page.write_text(
        '<!DOCTYPE html><html><body><p>control</p><img src="http://127.0.0.1:9/probe.png">'
        "</body></html>",
        encoding="utf-8",
    )
    net_log = tmp_path / "net.json"
    chromium(
        page,
        f"--screenshot={tmp_path / 'c.png'}",
        "--window-size=400,300",
        f"--log-net-log={net_log}",
    )
    assert any(re.search(r"127\.0\.0\.1:9/probe\.png", url) for url in page_requests(net_log))
