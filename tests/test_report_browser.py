"""The report's HTML in a real browser: headless Chromium driven over the DevTools protocol.

Checks that the page renders with its figures: every image decoded (complete, non-zero
natural size), nothing fetched from the network (every request the page makes is a
``file:`` or ``data:`` URL; the page's own content-security policy is bypassed so that an
outside reference would be requested and seen), and the main results table present with a
row per result. A full-page screenshot is saved to ``build/report_screenshot.png`` for
people to look at.

The browser is the Debian package ``chromium`` (``.ci/run`` installs it when absent);
without it the test is skipped with a one-line reason. The DevTools protocol runs over a
pipe (``--remote-debugging-pipe``: messages are JSON separated by NUL bytes on file
descriptors 3 and 4), so no extra Python package is needed.
"""

from __future__ import annotations

import base64
import json
import os
import select
import shutil
import subprocess
import time
from pathlib import Path

import numpy as np
import pytest

from transport.estimate import Estimate
from transport.report.document import build_report, read_documents, write_report
from transport.report.jsonout import build_document, write_json

ROOT = Path(__file__).resolve().parents[1]


def _chromium() -> str | None:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


class _DevTools:
    """A minimal DevTools-protocol client over Chromium's debugging pipe."""

    def __init__(self, exe: str, profile: Path) -> None:
        to_child_r, self._w = os.pipe()
        self._r, from_child_w = os.pipe()

        def fds() -> None:  # in the child: its fd 3 reads commands, fd 4 writes answers
            os.dup2(to_child_r, 3)
            os.dup2(from_child_w, 4)

        self.proc = subprocess.Popen(
            [exe, "--headless", "--no-sandbox", "--disable-gpu", "--remote-debugging-pipe",
             "--no-first-run", "--disable-extensions", "--disable-background-networking",
             "--disable-component-update", "--disable-sync",
             # no name resolves: a request to the outside cannot succeed (and is recorded)
             "--host-resolver-rules=MAP * ~NOTFOUND", f"--user-data-dir={profile}",
             "about:blank"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            preexec_fn=fds, close_fds=False)
        os.close(to_child_r)
        os.close(from_child_w)
        self._buf = b""
        self._id = 0
        self.events: list[dict] = []

    def _read_message(self, deadline: float) -> dict:
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("no answer from the browser")
            ready, _, _ = select.select([self._r], [], [], left)
            if ready:
                chunk = os.read(self._r, 1 << 20)
                if not chunk:
                    raise RuntimeError("the browser closed the pipe")
                self._buf += chunk
        msg, self._buf = self._buf.split(b"\0", 1)
        return json.loads(msg)

    def call(self, method: str, params: dict | None = None, session: str | None = None,
             timeout: float = 60.0) -> dict:
        self._id += 1
        msg = {"id": self._id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self._w, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            m = self._read_message(deadline)
            if m.get("id") == self._id:
                if "error" in m:
                    raise RuntimeError(f"{method}: {m['error']}")
                return m.get("result", {})
            self.events.append(m)

    def wait_event(self, method: str, timeout: float = 60.0) -> dict:
        deadline = time.monotonic() + timeout
        for i, m in enumerate(self.events):
            if m.get("method") == method:
                return self.events.pop(i)
        while True:
            m = self._read_message(deadline)
            if m.get("method") == method:
                return m
            self.events.append(m)

    def close(self) -> None:
        try:
            self.call("Browser.close", timeout=10)
        except Exception:
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        os.close(self._w)
        os.close(self._r)


def _small_report(folder: Path) -> Path:
    """A report of a few results with curves (no heavy analysis)."""
    t = np.linspace(0.0, 20.0, 401)
    run = 0.9 * (1 - np.exp(-t / 1.5))
    gk = Estimate(
        "shear_viscosity", "green_kubo", 0.9, 0.03, (0.84, 0.96), "mPa s", window=(0, 8.0),
        window_unit="ps", n_independent=12,
        diagnostics={"temperature": [298.0], "volume_mean": [27e-27], "pieces": 12,
                     "segment_length": 100.0, "decorrelation_time": 1.5},
        curves={"time": t, "running_integral": run,
                "running_integral_std": 0.05 + 0.02 * t, "acf_normalised": np.exp(-t / 1.5),
                "sigma": 0.05 + 0.02 * t, "sigma_fit": 0.05 + 0.02 * t, "fit": run})
    d = Estimate(
        "self_diffusion", "msd_gls", 2.1, 0.02, (2.06, 2.14), "1e-9 m^2/s", group="SOL",
        window=(2.0, 50.0), window_unit="ps", n_independent=216,
        diagnostics={"box_lengths": [3.0] * 3, "box_volume": 27.0, "length_unit": "nm",
                     "temperature": 298.0, "msd_unit": "nm^2"},
        curves={"time": t * 5, "msd": 6 * 2.1e-3 * t * 5, "msd_sd": 1e-3 * t,
                "fit": 6 * 2.1e-3 * t * 5, "fit_sd": 1e-4 * t})
    vpath, dpath = folder / "visc.json", folder / "diff.json"
    write_json(build_document("viscosity", inputs=[], settings={}, results=[gk]), vpath)
    write_json(build_document("diffusion", inputs=[], settings={}, results=[d]), dpath)
    rep = build_report(read_documents([vpath, dpath]))
    return write_report(rep, folder / "report")


def test_report_renders_in_headless_chromium(tmp_path):
    exe = _chromium()
    if exe is None:
        pytest.skip("chromium not installed (Debian package 'chromium'; .ci/run installs it)")
    html = _small_report(tmp_path)
    dt = _DevTools(exe, tmp_path / "profile")
    try:
        target = dt.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = dt.call("Target.attachToTarget", {"targetId": target,
                                                    "flatten": True})["sessionId"]
        for m in ("Page.enable", "Network.enable"):
            dt.call(m, session=session)
        dt.call("Page.setBypassCSP", {"enabled": True}, session=session)
        dt.call("Emulation.setDeviceMetricsOverride",
                {"width": 1200, "height": 900, "deviceScaleFactor": 1, "mobile": False},
                session=session)
        dt.call("Page.navigate", {"url": html.as_uri()}, session=session)
        dt.wait_event("Page.loadEventFired")
        probe = dt.call("Runtime.evaluate", {"returnByValue": True, "expression": """
            JSON.stringify({
              images: Array.from(document.images).map(i => ({complete: i.complete,
                  width: i.naturalWidth, height: i.naturalHeight})),
              rows: document.querySelectorAll('#main-results tbody tr').length,
              header: Array.from(document.querySelectorAll('#main-results th'))
                  .map(h => h.textContent),
              cautions: document.querySelectorAll('.caution li').length,
              height: document.documentElement.scrollHeight})"""}, session=session)
        page = json.loads(probe["result"]["value"])
        shot = dt.call("Page.captureScreenshot",
                       {"format": "png", "captureBeyondViewport": True,
                        "clip": {"x": 0, "y": 0, "width": 1200,
                                 "height": min(page["height"], 12000), "scale": 1}},
                       session=session)
    finally:
        dt.close()
    png = base64.b64decode(shot["data"])
    (ROOT / "build").mkdir(exist_ok=True)
    (ROOT / "build" / "report_screenshot.png").write_bytes(png)
    (tmp_path / "report_screenshot.png").write_bytes(png)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    # every figure decoded by the browser (2 summaries + 2 diagnostic figures)
    assert len(page["images"]) == 4
    assert all(i["complete"] and i["width"] > 100 and i["height"] > 100
               for i in page["images"])
    # the main table: periodic D, corrected D, viscosity
    assert page["rows"] == 3
    assert page["header"][:5] == ["quantity", "group", "method", "finite size", "value"]
    assert page["cautions"] == 5
    # nothing fetched from the network: only the file itself and data: images
    urls = [e["params"]["request"]["url"] for e in dt.events
            if e.get("method") == "Network.requestWillBeSent"]
    assert urls, "the browser reported no request at all (the probe is not working)"
    assert all(u.startswith(("file:", "data:")) for u in urls), urls
