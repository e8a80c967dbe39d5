"""The report in a real browser: Debian's Chromium, headless, driven through the DevTools protocol
(websocket-client). A tiny run whose region levels include `<script>alert(1)</script>` and `$x$`
is fitted, compared, tabulated and reported; the page must decode every image, make no network
request, keep the per-factor charts inside their boxes, and show the hostile level as text.

Chromium's flags are those this machine needs (no sandbox as root, no background networking).
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import time
import urllib.request
from pathlib import Path

import pytest

from _builders import QUICK_GBM, SPEC_TEXT, run_cli, small_book, write_book

CHROMIUM = Path("/usr/bin/chromium")
HOSTILE = "<script>alert(1)</script>"
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]

pytestmark = pytest.mark.skipif(
    not CHROMIUM.is_file(), reason="/usr/bin/chromium is absent (.ci/run installs Debian's chromium)"
)


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    """A report of a tiny run (1,500 policies, quick search) with hostile level names."""
    folder = tmp_path_factory.mktemp("browser")
    book = small_book(1500, seed=11)
    book["region"] = book["region"].replace({"Southby": HOSTILE, "Eastvale": "$x$"})
    write_book(book, folder / "book.parquet")
    (folder / "spec.toml").write_text(SPEC_TEXT + QUICK_GBM.replace("max_rounds = 600", "max_rounds = 60"))
    steps = [
        ("fit", str(folder / "book.parquet"), "--spec", str(folder / "spec.toml"), "--out", str(folder / "run")),
        ("compare", str(folder / "run")),
        ("tabulate", str(folder / "run"), "--out", str(folder / "table")),
        ("report", str(folder / "run"), "--table", str(folder / "table"), "--out", str(folder / "r.html")),
    ]
    for step in steps:
        done = run_cli(*step)
        assert done.returncode == 0, (step, done.stderr)
    return folder / "r.html"


class Browser:
    """Headless Chromium with a fresh profile and a DevTools websocket to its one page."""

    def __init__(self, profile: Path):
        self.process = subprocess.Popen(
            [str(CHROMIUM), *FLAGS, f"--user-data-dir={profile}", "--remote-debugging-port=0", "about:blank"],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        port_file = profile / "DevToolsActivePort"
        for _ in range(300):
            if port_file.is_file() and port_file.read_text().strip():
                break
            time.sleep(0.1)
        port = int(port_file.read_text().split()[0])
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as answer:
            page = next(t for t in json.load(answer) if t["type"] == "page")
        import websocket

        self.socket = websocket.create_connection(page["webSocketDebuggerUrl"], timeout=30, suppress_origin=True)
        self.next_id = 0
        self.events: list[dict] = []

    def call(self, method: str, **params) -> dict:
        self.next_id += 1
        self.socket.send(json.dumps({"id": self.next_id, "method": method, "params": params}))
        while True:
            message = json.loads(self.socket.recv())
            if message.get("id") == self.next_id:
                assert "error" not in message, message
                return message.get("result", {})
            self.events.append(message)

    def evaluate(self, expression: str):
        return self.call("Runtime.evaluate", expression=expression, returnByValue=True)["result"]["value"]

    def close(self) -> None:
        self.socket.close()
        self.process.terminate()
        self.process.wait(timeout=20)


def test_report_renders_offline_in_chromium(report, tmp_path):
    browser = Browser(tmp_path / "profile")
    try:
        for domain in ("Page", "Network", "Runtime", "Log"):
            browser.call(f"{domain}.enable")
        browser.call("Emulation.setDeviceMetricsOverride", width=1200, height=1600, deviceScaleFactor=1, mobile=False)
        browser.call("Page.navigate", url=report.as_uri())
        for _ in range(200):
            if browser.evaluate("document.readyState") == "complete":
                break
            time.sleep(0.1)
        images = browser.evaluate("Array.from(document.images).map(i => [i.complete, i.naturalWidth])")
        overflow = browser.evaluate(
            "Array.from(document.querySelectorAll('.factor-chart, .factor-chart *'))"
            ".filter(e => e.scrollWidth > e.clientWidth + 1 && e.clientWidth > 0).map(e => e.tagName + ' ' + e.id)"
        )
        texts = browser.evaluate("document.body.innerText")
        scripts = browser.evaluate("document.scripts.length")
        title_ok = browser.evaluate("document.title")
        shot = browser.call("Page.captureScreenshot", format="png")
        browser.call("Runtime.evaluate", expression="1")  # drain the events the load left
    finally:
        browser.close()
    shots = os.environ.get("PREMIUMLAB_SHOTS")
    if shots:
        import base64

        Path(shots).mkdir(parents=True, exist_ok=True)
        (Path(shots) / "report_top.png").write_bytes(base64.b64decode(shot["data"]))
    assert images and all(complete and width > 0 for complete, width in images), images
    requests = [
        e["params"]["request"]["url"]
        for e in browser.events
        if e.get("method") == "Network.requestWillBeSent"
        and not e["params"]["request"]["url"].startswith(("file:", "data:"))
    ]
    assert requests == []
    violations = [
        e
        for e in browser.events
        if "Content Security Policy" in json.dumps(e) or e.get("method") == "Page.javascriptDialogOpening"
    ]
    assert violations == []
    assert overflow == []
    assert HOSTILE in texts and "$x$" in texts and scripts == 0
    assert title_ok.startswith("Pricing review of run")


def test_chromium_takes_a_screenshot(report, tmp_path):
    shot = tmp_path / "shot.png"
    done = subprocess.run(
        [
            str(CHROMIUM),
            *FLAGS,
            f"--user-data-dir={tmp_path / 'p'}",
            f"--screenshot={shot}",
            "--window-size=1200,1400",
            report.as_uri(),
        ],
        capture_output=True,
        timeout=120,
    )
    assert done.returncode == 0 and shot.stat().st_size > 10_000
    if shutil.which("file"):
        assert b"PNG" in subprocess.run(["file", str(shot)], capture_output=True).stdout
