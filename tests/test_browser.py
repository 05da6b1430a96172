"""The HTML report in a real browser: headless Chromium (Debian's `chromium`), driven over the
DevTools protocol (websocket-client), with the network on and emulated offline.

Checks what a reader meets: no console errors or exceptions, every image decoded (naturalWidth >
0), no horizontal scrolling at 1280 px, every table and figure present, table-of-contents links
that land on a heading, no request leaving the page (everything embedded or relative), and the
page prints (Page.printToPDF gives a PDF). A screenshot lands in the test's temp folder. Skips
with a printed reason only where Chromium or websocket-client is missing; .ci/run installs both.
"""
from __future__ import annotations

import base64
import json
import os
import re
import shutil
import subprocess
import tempfile
import time
import urllib.request
from pathlib import Path

import pytest

from lapbench.config import build_params
from lapbench.report import ReportConfig, write_report
from tests.test_report import classical_ladder, field_of, make_record, pinn_seeds, write_all

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--remote-debugging-port=0", "--window-size=1280,900"]
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"   # PNG specification (ISO/IEC 15948), file signature
PDF_MAGIC = b"%PDF-"                # PDF specification (ISO 32000-1, 7.5.2), file header


def _skip(reason):
    print(reason)
    pytest.skip(reason)


class DevTools:
    """One page of a headless Chromium, over its DevTools websocket: send commands, collect events."""

    def __init__(self, ws):
        self.ws, self.next_id, self.events = ws, 0, []

    def call(self, method, timeout=60, **params):
        self.next_id += 1
        self.ws.send(json.dumps({"id": self.next_id, "method": method, "params": params}))
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            self.ws.settimeout(max(0.1, end - time.monotonic()))
            msg = json.loads(self.ws.recv())
            if msg.get("id") == self.next_id:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            if "method" in msg:
                self.events.append(msg)
        raise TimeoutError(method)

    def wait_event(self, name, timeout=60):
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            for e in self.events:
                if e["method"] == name:
                    self.events.remove(e)
                    return e
            self.ws.settimeout(max(0.1, end - time.monotonic()))
            msg = json.loads(self.ws.recv())
            if "method" in msg:
                self.events.append(msg)
        raise TimeoutError(name)

    def js(self, expr):
        r = self.call("Runtime.evaluate", expression=expr, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in r:
            raise RuntimeError(f"{expr}: {r['exceptionDetails']}")
        return r["result"].get("value")


@pytest.fixture(scope="module")
def browser():
    websocket = pytest.importorskip("websocket", reason="websocket-client not installed (pip install -e '.[test]')")
    if not os.path.exists(CHROMIUM):
        _skip("chromium not installed (apt-get install -y chromium)")
    profile = tempfile.mkdtemp(prefix="lapbench-chromium-")
    proc = subprocess.Popen([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "about:blank"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        port, end = None, time.monotonic() + 60
        while port is None and time.monotonic() < end:
            line = proc.stderr.readline()
            if not line and proc.poll() is not None:
                break
            if line.startswith("DevTools listening on ws://"):
                port = int(line.split("ws://", 1)[1].split("/", 1)[0].rsplit(":", 1)[1])
        if port is None:
            _skip(f"chromium did not start its DevTools endpoint (exit code {proc.poll()})")
        req = urllib.request.Request(f"http://127.0.0.1:{port}/json/new?about:blank", method="PUT")
        with urllib.request.urlopen(req, timeout=30) as r:
            target = json.load(r)
        ws = websocket.create_connection(target["webSocketDebuggerUrl"], timeout=60, suppress_origin=True)
        yield DevTools(ws)
        ws.close()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
        shutil.rmtree(profile, ignore_errors=True)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """A report of two problems with fd5 and fst5 identical (rings), a learned method, a failure and an
    error field: every figure kind the HTML embeds; PNG and SVG written, the smaller embedded."""
    d = tmp_path_factory.mktemp("browser")
    recs = classical_ladder() + classical_ladder(solver="fst5") + pinn_seeds()
    for r in recs[3:6]:
        r["solver"]["family"] = "spectral"
    recs[1]["field"] = field_of()
    recs += classical_ladder(problem="sine", pparams={"k": 4, "l": 4})
    recs += [make_record(solver="fd5", status="timeout", config={"n": 4096})]
    write_all(d / "res", recs)
    cfg = build_params(ReportConfig, {"results": [str(d / "res")], "name": "b", "formats": ["md", "csv", "html"],
                                      "figures": {"formats": ["png", "svg"]}}, prefix="report")
    out, _ = write_report(cfg, d / "reports")
    return out


def _load(dt, page: Path, offline: bool):
    dt.events.clear()
    for domain in ("Page", "Runtime", "Log", "Network"):
        dt.call(f"{domain}.enable")
    dt.call("Network.emulateNetworkConditions", offline=offline, latency=0, downloadThroughput=-1,
            uploadThroughput=-1)
    dt.call("Emulation.setDeviceMetricsOverride", width=1280, height=900, deviceScaleFactor=1, mobile=False)
    dt.call("Page.navigate", url=page.as_uri())
    dt.wait_event("Page.loadEventFired")
    # every image decoded: decode() rejects for a broken image; then its intrinsic width
    return dt.js("Promise.all([...document.images].map(i => i.decode().then(() => i.naturalWidth, "
                 "() => 0)))")


def _errors(events):
    out = []
    for e in events:
        m, p = e["method"], e["params"]
        if m == "Runtime.exceptionThrown":
            out.append(p["exceptionDetails"].get("text"))
        elif m == "Runtime.consoleAPICalled" and p["type"] in ("error", "assert"):
            out.append(str(p["args"]))
        elif m == "Log.entryAdded" and p["entry"]["level"] == "error":
            out.append(p["entry"].get("text"))
    return out


@pytest.mark.parametrize("offline", [False, True], ids=["network", "offline"])
def test_report_in_chromium(browser, report, offline, tmp_path):
    page = report / "report.html"
    widths = _load(browser, page, offline)
    n_figs = len({p.stem for p in (report / "figures").iterdir()})
    assert len(widths) == n_figs and all(w > 0 for w in widths), widths
    assert _errors(browser.events) == []
    # nothing but the page itself and its data URIs is requested
    urls = [e["params"]["request"]["url"] for e in browser.events if e["method"] == "Network.requestWillBeSent"]
    assert all(u.startswith(("data:", "file:")) for u in urls), urls
    # no horizontal scrolling at 1280 px: the page is no wider than the window
    assert browser.js("document.documentElement.scrollWidth <= window.innerWidth"), \
        browser.js("[document.documentElement.scrollWidth, window.innerWidth]")
    # every table and figure: one <table> per CSV the report wrote, one image per figure file (as
    # many as the Markdown report links)
    md = (report / "report.md").read_text()
    assert browser.js("document.querySelectorAll('table').length") == len(list((report / "csv").glob("*.csv")))
    assert browser.js("document.querySelectorAll('figure img').length") == n_figs == md.count("](figures/")
    # the contents: each link lands on an element of the page with a visible heading or figure
    missing = browser.js("[...document.querySelectorAll('nav a')].map(a => a.getAttribute('href'))"
                         ".filter(h => !document.getElementById(h.slice(1)))")
    assert missing == [] and browser.js("document.querySelectorAll('nav a').length") > n_figs
    # relative links to files beside the page (CSV, all runs) resolve to existing files
    hrefs = browser.js("[...document.querySelectorAll('a[href]')].map(a => a.getAttribute('href'))"
                       ".filter(h => !h.startsWith('#'))")
    assert hrefs and all(not h.startswith(("/", "file:", "http")) and (report / h).is_file() for h in hrefs), hrefs
    pdf = base64.b64decode(browser.call("Page.printToPDF", printBackground=True)["data"])
    # page objects: /Type /Page, not /Pages (PDF specification, ISO 32000-1, 7.7.3.3)
    assert pdf.startswith(PDF_MAGIC) and len(re.findall(rb"/Type\s*/Page(?!s)", pdf)) >= 1
    (tmp_path / "report.pdf").write_bytes(pdf)
    shot = base64.b64decode(browser.call("Page.captureScreenshot", format="png")["data"])
    (tmp_path / "report.png").write_bytes(shot)
    assert shot.startswith(PNG_MAGIC)
    assert int.from_bytes(shot[16:20], "big") == 1280   # IHDR width (PNG specification, 11.2.2)
