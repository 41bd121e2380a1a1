"""report.html opened by a real browser: headless Chromium (Debian's ``chromium``).

Chromium is driven through its DevTools protocol over ``--remote-debugging-pipe`` (JSON
messages ending in a NUL byte on file descriptors 3 and 4, standard library only; protocol
as documented for Chromium's DevTools). What is checked, after the page's load event:

- no console error: no ``Runtime.exceptionThrown``, no ``Runtime.consoleAPICalled`` of type
  error or assert, no ``Log.entryAdded`` at level error (a resource that failed to load
  shows up there);
- offline: the page makes no network request at all (every ``Network.requestWillBeSent``
  URL is the file itself or a data: URI);
- the rendered DOM holds the comparison table with one row per method, and one design
  figure per method whose image the browser decoded (``naturalWidth`` > 0), plus the
  side-by-side figure;
- the caution text is visible in the page text;
- the screenshot is not blank: more than one colour and a pixel variance well above that
  of an empty page (common practice, no source).

Skipped, with the reason, only when /usr/bin/chromium is absent.
"""
from __future__ import annotations

import base64
import dataclasses as dc
import fcntl
import io
import json
import os
import select
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from levelform import load_problem
from levelform.comparison import compare_methods, write_comparison
from levelform.spec import CAUTION

CHROMIUM = Path("/usr/bin/chromium")
EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
METHODS = ("levelset", "density", "evolutionary")

pytestmark = pytest.mark.skipif(
    not CHROMIUM.exists(),
    reason="headless browser check needs Debian's chromium at /usr/bin/chromium "
    "(apt-get install chromium)",
)


class DevToolsPipe:
    """A minimal DevTools protocol client over Chromium's --remote-debugging-pipe."""

    def __init__(self, profile: Path, width: int = 1280, height: int = 2000):
        to_child_r, self._w = os.pipe()
        self._r, from_child_w = os.pipe()
        # Copies above fd 9 first, so placing them at 3 and 4 cannot clobber each other.
        hi_r = fcntl.fcntl(to_child_r, fcntl.F_DUPFD, 10)
        hi_w = fcntl.fcntl(from_child_w, fcntl.F_DUPFD, 10)
        os.close(to_child_r)
        os.close(from_child_w)

        def place_fds():
            os.dup2(hi_r, 3)
            os.dup2(hi_w, 4)

        self.proc = subprocess.Popen(
            [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
             "--no-first-run", "--disable-background-networking", "--disable-component-update",
             "--disable-sync", "--disable-dev-shm-usage", "--remote-debugging-pipe",
             f"--user-data-dir={profile}", f"--window-size={width},{height}", "about:blank"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            preexec_fn=place_fds, close_fds=False,
        )
        os.close(hi_r)
        os.close(hi_w)
        self._buf = b""
        self._id = 0
        self.events: list[dict] = []

    def _read_message(self, deadline: float) -> dict:
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("no answer from chromium")
            ready, _, _ = select.select([self._r], [], [], left)
            if ready:
                chunk = os.read(self._r, 1 << 20)
                if not chunk:
                    raise RuntimeError("chromium closed the DevTools pipe")
                self._buf += chunk
        raw, self._buf = self._buf.split(b"\0", 1)
        return json.loads(raw)

    def send(self, method: str, params=None, session=None, timeout: float = 60.0) -> dict:
        self._id += 1
        msg = {"id": self._id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self._w, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_event(self, method: str, timeout: float = 60.0) -> dict:
        deadline = time.monotonic() + timeout
        for ev in self.events:
            if ev.get("method") == method:
                return ev
        while True:
            ev = self._read_message(deadline)
            self.events.append(ev)
            if ev.get("method") == method:
                return ev

    def close(self):
        try:
            self.send("Browser.close", timeout=5.0)
        except Exception:
            pass
        try:
            self.proc.wait(timeout=5.0)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._r)
        os.close(self._w)


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    problem = load_problem(EXAMPLES / "mbb_half_beam.toml")
    problem = dc.replace(problem, domain=dc.replace(problem.domain, cell=1.0),
                         method=dc.replace(problem.method, iterations=20))
    comparison = compare_methods(problem, methods=METHODS)
    out = tmp_path_factory.mktemp("browser")
    files = write_comparison(comparison, out)
    return files["report.html"], comparison


@pytest.fixture(scope="module")
def page(report, tmp_path_factory):
    path, comparison = report
    url = path.resolve().as_uri()
    cdp = DevToolsPipe(tmp_path_factory.mktemp("chromium-profile"))
    try:
        target = cdp.send("Target.createTarget", {"url": "about:blank"}, timeout=30.0)["targetId"]
        session = cdp.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Runtime", "Log", "Page", "Network"):
            cdp.send(f"{domain}.enable", session=session)
        cdp.send("Emulation.setDeviceMetricsOverride",
                 {"width": 1280, "height": 2000, "deviceScaleFactor": 1, "mobile": False},
                 session=session)
        cdp.events.clear()
        cdp.send("Page.navigate", {"url": url}, session=session)
        cdp.wait_event("Page.loadEventFired")
        probe = cdp.send("Runtime.evaluate", {"returnByValue": True, "expression": """JSON.stringify({
            rows: Array.from(document.querySelectorAll('#comparison tbody tr'))
                       .map(r => r.getAttribute('data-method')),
            images: Array.from(document.images).map(i => ({cls: i.className,
                       w: i.naturalWidth, h: i.naturalHeight, complete: i.complete})),
            text: document.body.innerText,
            external: document.querySelectorAll('link[href], script[src], iframe, object').length
        })"""}, session=session)
        shot = cdp.send("Page.captureScreenshot", {"format": "png"}, session=session, timeout=30.0)
        events = list(cdp.events)
    finally:
        cdp.close()
    return {
        "url": url,
        "comparison": comparison,
        "dom": json.loads(probe["result"]["value"]),
        "screenshot": base64.b64decode(shot["data"]),
        "events": events,
    }


def test_no_console_errors(page):
    bad = []
    for ev in page["events"]:
        m, p = ev.get("method"), ev.get("params", {})
        if m == "Runtime.exceptionThrown":
            bad.append(p.get("exceptionDetails", {}).get("text"))
        elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
            bad.append(p.get("args"))
        elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
            bad.append(p["entry"].get("text"))
    assert bad == []


def test_makes_no_network_request(page):
    urls = [ev["params"]["request"]["url"] for ev in page["events"]
            if ev.get("method") == "Network.requestWillBeSent"]
    assert page["url"] in urls  # the probe works: the page itself is seen
    assert all(u == page["url"] or u.startswith("data:") for u in urls), urls
    assert page["dom"]["external"] == 0


def test_table_and_one_decoded_figure_per_method(page):
    comparison = page["comparison"]
    dom = page["dom"]
    assert dom["rows"] == list(comparison.methods)
    designs = [i for i in dom["images"] if i["cls"] == "design"]
    assert len(designs) == len(comparison.methods)
    assert len([i for i in dom["images"] if i["cls"] == "overview"]) == 1
    for img in dom["images"]:
        assert img["complete"] and img["w"] > 100 and img["h"] > 100, img
    assert CAUTION in dom["text"]


def test_screenshot_is_not_blank(page):
    import matplotlib.image as mpimg

    img = mpimg.imread(io.BytesIO(page["screenshot"]), format="png")
    assert img.shape[0] >= 1000 and img.shape[1] == 1280
    rgb = img[..., :3].reshape(-1, 3)
    q = np.round(rgb * 255).astype(np.int64)
    assert np.unique(q[:, 0] * 65536 + q[:, 1] * 256 + q[:, 2]).size > 50
    # A blank white page has variance 0; the table and figures give far more.
    assert float(rgb.var()) > 1e-3
