"""The study report page, opened in a real browser (headless Chromium).

Chromium comes from the system packages (`.ci/run` installs it when it is missing).  The browser
runs behind a local recording proxy: every request it makes for anything but a local file would
reach the proxy, so an empty record means the page asks nothing of the network.  A page that does
ask (an image from a web address) is the control that shows the record works.
"""

from __future__ import annotations

import re
import shutil
import socket
import subprocess
import threading

import numpy as np
import pytest
from conftest import small_study

import foilmap
from foilmap.report.page import report_page


def _browser() -> str:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    pytest.fail("no Chromium on this machine: install the system package (apt-get install "
                "chromium), as .ci/run does")


class _RecordingProxy:
    """A TCP listener that records the first line of every connection it gets."""

    def __init__(self):
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(16)
        self.port = self.sock.getsockname()[1]
        self.requests: list[str] = []
        self._stop = False
        self.thread = threading.Thread(target=self._serve, daemon=True)
        self.thread.start()

    def _serve(self):
        self.sock.settimeout(0.2)
        while not self._stop:
            try:
                conn, _ = self.sock.accept()
            except OSError:
                continue
            try:
                conn.settimeout(1.0)
                data = conn.recv(4096)
                self.requests.append(data.split(b"\r\n", 1)[0].decode("latin-1"))
            except OSError:
                self.requests.append("(connection without a request line)")
            finally:
                conn.close()

    def close(self):
        self._stop = True
        self.thread.join(timeout=2)
        self.sock.close()


#: the browser's own services (its updater, clock and account checks): their requests are the
#: browser's, not the page's, and are set aside by host
_BROWSER_HOSTS = re.compile(r"(google\.com|googleapis\.com|gstatic\.com|gvt1\.com)(:\d+)?[/ ]")


def _page_requests(proxy: _RecordingProxy) -> list[str]:
    return [r for r in proxy.requests if not _BROWSER_HOSTS.search(r)]


def _screenshot(html_path, png_path, proxy: _RecordingProxy):
    cmd = [_browser(), "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", "--disable-default-apps", "--metrics-recording-only",
           "--no-pings", "--disable-domain-reliability", "--disable-breakpad",
           "--disable-client-side-phishing-detection", "--disable-field-trial-config",
           "--disable-features=NetworkTimeServiceQuerying,OptimizationHints,Translate,"
           "MediaRouter,AutofillServerCommunication,AccountConsistency,SigninIntercept",
           f"--proxy-server=http://127.0.0.1:{proxy.port}", "--proxy-bypass-list=<-loopback>",
           "--window-size=1280,2200", f"--screenshot={png_path}", html_path.as_uri()]
    r = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    assert png_path.exists(), r.stderr[-2000:]


@pytest.fixture(scope="module")
def folders(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    out = []
    for name, evals in (("a", 240), ("b", 160)):
        text = small_study("page", [1, 2], evals, constraints="thickness = [0.10, 1.0]",
                           extra="").replace("cl = 0.5", "cl = 0.5\ncl_range = [0.3, 0.7]", 1)
        (root / f"{name}.toml").write_text(text)
        study = foilmap.load_study(root / f"{name}.toml")
        foilmap.run_study(study, root / name, workers=2)
        out.append(root / name)
    mo = small_study("front", [1], 300, objectives="peak_suction = 1.0\nseverity = 1.0",
                     extra='[fronts]\nreference_point = [3.0, 3.0]\n')
    mo = mo.replace("[search]\n", '[search]\nmethod = "comocma"\nkernels = 4\n')
    (root / "mo.toml").write_text(mo)
    foilmap.run_study(foilmap.load_study(root / "mo.toml"), root / "mo", workers=1)
    out.append(root / "mo")
    return out


def test_page_in_a_browser(folders, tmp_path):
    page = tmp_path / "report.html"
    r = subprocess.run(["foilmap", "report", *map(str, folders[:2]), "-o", str(page)],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    text = page.read_text()
    # self-contained: no scripts, no style sheets to fetch, every image inline
    assert "<script" not in text and "<link" not in text
    assert not re.search(r'(src|href)\s*=\s*"(?!data:)', text)
    assert text.count('src="data:image/png;base64,') >= 6
    for heading in ("What the study asked", "Runs", "Convergence and the best sections",
                    "Best designs", "How to reproduce it", "The studies compared"):
        assert heading in text, heading
    assert "licensed engineering practice" in text
    proxy = _RecordingProxy()
    try:
        shot = tmp_path / "shot.png"
        _screenshot(page, shot, proxy)
    finally:
        proxy.close()
    assert _page_requests(proxy) == [], proxy.requests
    # the screenshot is not blank: many pixels away from the background, in several colours
    from matplotlib.image import imread

    img = imread(shot)[..., :3]
    background = np.array([0xfb, 0xfc, 0xfc]) / 255.0
    away = np.abs(img - background).sum(axis=2) > 0.1
    assert away.mean() > 0.05
    colours = np.unique((img[away] * 15).round().astype(int), axis=0)
    assert len(colours) > 20


def test_the_network_check_sees_a_request(tmp_path):
    # the control: a page that loads an image from a web address reaches the proxy
    page = tmp_path / "fetching.html"
    page.write_text('<!DOCTYPE html><html><body><p>control</p>'
                    '<img src="http://foilmap-test.invalid/image.png"></body></html>')
    proxy = _RecordingProxy()
    try:
        _screenshot(page, tmp_path / "control.png", proxy)
    finally:
        proxy.close()
    assert any("foilmap-test.invalid" in r for r in _page_requests(proxy)), proxy.requests


def test_multi_objective_study_shows_its_front(folders, tmp_path):
    text = report_page([folders[2]])
    assert "Hypervolume and fronts" in text
    assert "Designs from the merged front" in text
    assert "Warnings" not in text or "no feasible design" not in text


def test_warnings_on_the_page(tmp_path):
    # an infeasible study: the page says so instead of showing designs
    text = small_study("none", [1], 120, constraints="thickness = [0.6, 1.0]")
    (tmp_path / "s.toml").write_text(text)
    foilmap.run_study(foilmap.load_study(tmp_path / "s.toml"), tmp_path / "out", workers=1)
    page = report_page([tmp_path / "out"])
    assert "Warnings" in page and "has a feasible design yet" in page


def test_report_refuses_bad_input(tmp_path):
    r = subprocess.run(["foilmap", "report", str(tmp_path), "-o", str(tmp_path / "r.html")],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 2 and "is not a study folder" in r.stderr
    assert not (tmp_path / "r.html").exists()
