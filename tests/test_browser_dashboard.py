"""The dashboard in a real headless Chromium, over a real websocket, fully offline.

The server runs in a thread on a free port with a synthetic run that changes over time
(:class:`eddyvigil.monitor.dashboard.preview.PreviewRun`). The browser setup follows the project's
BROWSER.md (explicit chromedriver, SE_OFFLINE, fresh profile).
"""

from __future__ import annotations

import logging
import os
import re
import shutil
import struct
import tempfile
import threading
import time
import zlib
from pathlib import Path

import pytest

from eddyvigil.monitor.dashboard.preview import PreviewRun
from eddyvigil.monitor.dashboard.server import DashboardServer

CHROMIUM = "/usr/bin/chromium"
CHROMEDRIVER = "/usr/bin/chromedriver"

pytestmark = [pytest.mark.browser, pytest.mark.integration]


def _browser_or_skip():
    have = os.path.exists(CHROMIUM) and os.path.exists(CHROMEDRIVER)
    if not have:
        if os.environ.get("CI"):
            pytest.fail("CI is set but Chromium/chromedriver are missing: this test must run")
        pytest.skip("Chromium and chromedriver not installed (CI unset): browser test not run")
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    os.environ["SE_OFFLINE"] = "true"
    profile = tempfile.mkdtemp(prefix="eddyvigil-chromium-")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
                 "--window-size=1280,1400"):
        options.add_argument(flag)
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    return driver, profile


class _ServerThread:
    """A DashboardServer on a free port in its own thread (its own event loop)."""

    def __init__(self, get_snapshot, on_start=None, on_stop=None):
        self.ready = threading.Event()
        self.server: DashboardServer | None = None
        self.error: BaseException | None = None
        self.thread = threading.Thread(target=self._run, args=(get_snapshot, on_start, on_stop),
                                       daemon=True)
        self.thread.start()
        assert self.ready.wait(20), "dashboard server did not come up within 20 s"
        if self.error is not None:
            raise self.error

    def _run(self, get_snapshot, on_start, on_stop):
        try:
            self.server = DashboardServer(get_snapshot, port=0, on_start=on_start,
                                          on_stop=on_stop)
            self.server.start()
        except BaseException as exc:  # noqa: B036 - handed to the test thread
            self.error = exc
            self.ready.set()
            return
        self.ready.set()
        self.server.run()
        self.server.close()

    def stop(self):
        self.server.stop()
        self.thread.join(20)
        assert not self.thread.is_alive(), "dashboard server thread did not stop within 20 s"


def _wait_for(driver, script, timeout_s=20.0, what=""):
    """Poll ``script`` in the page until it returns something truthy (bounded in time)."""
    deadline = time.monotonic() + timeout_s
    for _ in range(int(timeout_s / 0.1) + 1):
        value = driver.execute_script(script)
        if value:
            return value
        if time.monotonic() > deadline:
            break
        time.sleep(0.1)
    raise AssertionError(f"timed out after {timeout_s} s waiting for {what or script}")


def _open_page(driver, url: str, width: int = 1280, height: int = 1400) -> None:
    """Load the dashboard at ``url`` and wait for its Bokeh document (websocket connected)."""
    driver.set_window_size(width, height)
    driver.set_page_load_timeout(30)
    driver.get(url)
    _wait_for(driver, "return window.Bokeh !== undefined && Bokeh.documents.length > 0",
              what="the Bokeh document")


def _png_colours(path: Path) -> int:
    """Distinct RGB(A) colours in a PNG (decoded here with zlib; PNG spec, W3C 2003)."""
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, idat, width, height, ctype = 8, b"", 0, 0, 0
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos:pos + 4])
        kind = data[pos + 4:pos + 8]
        body = data[pos + 8:pos + 8 + length]
        if kind == b"IHDR":
            width, height, _depth, ctype = struct.unpack(">IIBB", body[:10])
        elif kind == b"IDAT":
            idat += body
        pos += 12 + length
    channels = {2: 3, 6: 4}[ctype]
    raw = zlib.decompress(idat)
    stride = width * channels
    colours = set()
    prev = bytearray(stride)
    # Undo the PNG row filters (None, Sub, Up, Average, Paeth) on every 8th row.
    for y in range(height):
        f = raw[y * (stride + 1)]
        line = bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
        for i in range(stride):
            a = line[i - channels] if i >= channels else 0
            b = prev[i]
            c = prev[i - channels] if i >= channels else 0
            if f == 1:
                line[i] = (line[i] + a) & 255
            elif f == 2:
                line[i] = (line[i] + b) & 255
            elif f == 3:
                line[i] = (line[i] + (a + b) // 2) & 255
            elif f == 4:
                p = a + b - c
                pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
                pred = a if pa <= pb and pa <= pc else (b if pb <= pc else c)
                line[i] = (line[i] + pred) & 255
        if y % 8 == 0:
            for x in range(0, stride, channels * 4):
                colours.add(bytes(line[x:x + 3]))
        prev = line
    return len(colours)


def test_dashboard_updates_live_in_a_real_browser(tmp_path):
    driver, profile = _browser_or_skip()
    run = PreviewRun(point_s=4.0, points=5)
    started = time.monotonic()
    hooks = []
    # Run time goes 8x faster than the wall clock so points finish within the test.
    srv = _ServerThread(lambda: run.snapshot(8.0 * (time.monotonic() - started)),
                        on_start=lambda: hooks.append("start"),
                        on_stop=lambda: hooks.append("stop"))
    try:
        url = srv.server.url
        driver.set_page_load_timeout(30)
        driver.get(url)
        _wait_for(driver, "return window.Bokeh !== undefined && Bokeh.documents.length > 0",
                  what="the Bokeh document (websocket connected)")
        model = "Bokeh.documents[0].get_model_by_name"
        _wait_for(driver, f"return {model}('status_source').data.name.length > 0",
                  what="status board rows")
        first_verdict = driver.execute_script(f"return {model}('verdict').text")
        first_t = driver.execute_script(
            f"const t = {model}('trace_source').data.t; return t[t.length - 1]")
        # The trace streams on: its last time moves forward, over the websocket.
        _wait_for(driver, f"const t = {model}('trace_source').data.t;"
                          f"return t.length > 0 && t[t.length - 1] > {first_t} + 1.0",
                  what="new trace rows")
        # A point finishes: the traverse table and profile get rows.
        _wait_for(driver, f"return {model}('finished_source').data.id.length >= 1",
                  timeout_s=25, what="a finished point in the traverse table")
        _wait_for(driver, f"return {model}('verdict').text != {first_verdict!r}",
                  what="the verdict to change")
        assert "point P" in driver.execute_script(f"return {model}('verdict').text")
        # the campaign ETA is rendered in the words of monitor.campaign.campaign_text (the
        # preview at 8x reaches its last point in seconds, where less than 1 s may be left)
        eta = re.compile(r"traverse: [1-4] of 5 points done, (about \d+ s left "
                         r"\((\d+–\d+ s|no range yet: [1-3] positions? measured, a range "
                         r"needs 4)\)|less than 1 s left)")
        _wait_for(driver, f"return {model}('campaign').text.includes('points done, ')",
                  what="the campaign ETA")
        text = driver.execute_script(f"return {model}('campaign').text")
        assert eta.search(text), text
        n_lines = driver.execute_script(f"return {model}('halfwidth_source').data.xs.length")
        assert n_lines == 4  # the four of the preview's six targets furthest from target
        driver.execute_script(f"{model}('show_all').active = true")  # the rest on demand
        _wait_for(driver, f"return {model}('halfwidth_source').data.xs.length == 6",
                  timeout_s=90, what="all six half-width lines")  # slow when loaded
        health = driver.execute_script(f"return {model}('health').text")
        assert "non_finite 2" in health and "! " in health  # non-zero rejections are flagged

        origin = url.rstrip("/")
        resources = driver.execute_script(
            "return performance.getEntriesByType('resource').map(e => e.name)")
        assert resources, "the page loaded no resources at all"
        foreign = [r for r in resources if not r.startswith(origin + "/")]
        assert not foreign, f"resources from outside the dashboard server: {foreign}"
        assert any("/static/js/bokeh" in r for r in resources)

        time.sleep(0.5)
        shot = tmp_path / "dashboard.png"
        driver.save_screenshot(str(shot))
        keep = os.environ.get("EDDYVIGIL_SCREENSHOT_DIR")
        if keep:
            shutil.copy(shot, Path(keep) / "test_browser_dashboard.png")
        assert shot.stat().st_size > 20_000, "screenshot suspiciously small: blank page?"
        assert _png_colours(shot) > 8, "screenshot has too few colours: blank page?"
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
        srv.stop()
    assert hooks == ["start", "stop"], "on_start/on_stop must run exactly once per server"


#: Every rendered row of the status board, read through the shadow DOM (Bokeh 3 draws widgets
#: inside shadow roots), with the banner text of the same instant.
_RENDERED = """
const rows = [];
function walk(root) {
  for (const el of root.querySelectorAll('*')) {
    if (el.shadowRoot) walk(el.shadowRoot);
    if (el.classList && el.classList.contains('slick-row')) {
      rows.push(Array.from(el.querySelectorAll('.slick-cell')).map(c => c.textContent));
    }
  }
}
walk(document);
const doc = Bokeh.documents[0];
return {rows: rows, banner: doc.get_model_by_name('verdict').text,
        model: Array.from(doc.get_model_by_name('status_source').data.value)};
"""


#: the status board's columns as rendered (monitor/dashboard/app.py), and two of them by place
STATUS_COLUMNS = ("stream", "point", "statistic", "value", "unresolved", "target", "state", "eta")
VALUE, STATE = STATUS_COLUMNS.index("value"), STATUS_COLUMNS.index("state")


def _rendered(driver):
    got = driver.execute_script(_RENDERED)
    # the status board is the table whose rows carry a ± in their value column
    got["rows"] = [r for r in got["rows"]
                   if len(r) == len(STATUS_COLUMNS) and "±" in r[VALUE]]
    return got


def _in_step(got):
    """The rendered rows are the server's current rows and tell the banner's story."""
    assert [r[VALUE] for r in got["rows"]] == got["model"], "rendered cells differ from the data"
    banner = got["banner"]
    points = {r[1] for r in got["rows"]}
    assert len(points) == 1 and f"point {points.pop()}" in banner
    converged = sum(1 for r in got["rows"] if r[STATE] == "converged")
    if "MOVE ON" in banner:
        assert converged == len(got["rows"])
    elif "targets met" in banner:
        assert f"{converged}/{len(got['rows'])} targets met" in banner


def test_rendered_table_follows_the_banner_and_a_late_tab_and_closing_a_tab(caplog):
    """Must-fix 1 of the first-hour report: the rendered status cells froze within a point.

    The run's clock is set by the test (P00 covers 0-7 s), so the moments are exact whatever
    the machine's load; each moment waits (bounded) until the page shows it.
    """
    driver, profile = _browser_or_skip()
    run = PreviewRun(point_s=7.0, points=4)
    now = {"t": 2.0}
    srv = _ServerThread(lambda: run.snapshot(now["t"]))

    def at(t_s, what):
        now["t"] = t_s
        _wait_for(driver, "return Bokeh.documents[0].get_model_by_name('halfwidth_source')"
                          f".data.xs.length > 0 && {_LAST_D} >= {min(t_s % 7.0, 6.9) - 0.3}",
                  what=what)
        time.sleep(0.6)  # a couple of ticks at the same moment
        got = _rendered(driver)
        _in_step(got)
        return got

    try:
        driver.set_page_load_timeout(30)
        driver.get(srv.server.url)
        _wait_for(driver, "return window.Bokeh !== undefined && Bokeh.documents.length > 0",
                  what="the Bokeh document")
        first = at(2.0, "t = 2 s")
        second = at(5.0, "t = 5 s")  # same point, later: values and states move on
        assert first["rows"][0][1] == second["rows"][0][1] == "P00"
        assert [r[VALUE] for r in first["rows"]] != [r[VALUE] for r in second["rows"]]
        assert [r[STATE] for r in first["rows"]] != [r[STATE] for r in second["rows"]]
        home = driver.current_window_handle
        # a second tab opened mid-point shows this point's rows, and the next point's later
        driver.switch_to.new_window("tab")
        driver.get(srv.server.url)
        _wait_for(driver, "return window.Bokeh !== undefined && Bokeh.documents.length > 0",
                  what="the second tab")
        assert at(5.5, "t = 5.5 s in the second tab")["rows"][0][1] == "P00"
        late = at(10.0, "t = 10 s (P01) in the second tab")
        assert late["rows"][0][1] == "P01"
        assert srv.server.session_count == 2
        caplog.set_level(logging.INFO, logger="bokeh")
        driver.close()  # the second tab goes away
        driver.switch_to.window(home)
        deadline = time.monotonic() + 15
        while srv.server.session_count > 1 and time.monotonic() < deadline:
            time.sleep(0.2)
        assert srv.server.session_count == 1, "the closed tab's session was not released"
        assert at(12.0, "t = 12 s in the first tab")["rows"][0][1] == "P01"
        driver.save_screenshot(str(Path(os.environ.get("EDDYVIGIL_SCREENSHOT_DIR", profile))
                                   / "table_in_step.png"))
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
        srv.stop()
    noisy = [r.getMessage() for r in caplog.records if r.levelno >= logging.WARNING]
    assert not noisy, f"the server complained when a tab closed: {noisy[:3]}"


#: The acquisition time of the newest running-estimate row the page holds.
_LAST_D = ("(() => { const d = Bokeh.documents[0].get_model_by_name('history_source')"
           ".data.duration_s; return d.length ? d[d.length - 1] : -1; })()")
