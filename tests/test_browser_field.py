"""The rake/field panel in a real headless Chromium (BROWSER.md setup), fed by a real Pipeline
with the simulator's ``piv`` and ``rake`` scenarios (the messages ``eddyvigil simulate
--scenario piv|rake`` sends). Checked: the colour maps carry the grid's image, the rake's
badges one row per probe, the converged fraction is written, and the screenshot is not blank
(more than a few colours: a Viridis map alone has dozens; common practice of these tests)."""

from __future__ import annotations

import os
import shutil
import time
from pathlib import Path

import pytest
from test_browser_dashboard import (
    _browser_or_skip,
    _open_page,
    _png_colours,
    _ServerThread,
    _wait_for,
)

from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.simulator.fields import field_messages, field_scenario

pytestmark = [pytest.mark.browser, pytest.mark.integration]


class _Clock:
    t = 0.0

    def __call__(self):
        return self.t


def _fed_pipeline():
    clock = _Clock()  # still while feeding: the field views are made once, after it
    p = Pipeline(clock=clock)
    for name, snapshots in (("piv", 600), ("rake", 8000)):
        sc = field_scenario(name)
        sc.snapshots = snapshots
        for _, frames in list(field_messages(sc, seed=3))[:-1]:  # the points still running
            assert p.handle_frames(frames) is None
    clock.t = 10.0
    return p.publish()


def test_field_maps_and_rake_badges_render(tmp_path):
    snap = _fed_pipeline()
    driver, profile = _browser_or_skip()
    srv = _ServerThread(lambda: snap)
    try:
        _open_page(driver, srv.server.url, height=1600)
        model = "Bokeh.documents[0].get_model_by_name"
        shots = {}
        for stream, words in (("piv", "field of 3072 vectors"), ("rake", "rake of 16 vectors")):
            driver.execute_script(f"{model}('stream_select').value = {stream!r}")
            _wait_for(driver, f"return {model}('field_summary').text.includes({words!r}) && "
                              f"{model}('field_panel').visible", what=f"the {stream} summary")
            text = driver.execute_script(f"return {model}('field_summary').text")
            banner = driver.execute_script(f"return {model}('verdict').text")
            assert "KEEP ACQUIRING" in banner and "vectors meet every target" in banner
            assert "converged fraction" in text
            # a fresh view: every vector has valid samples by now
            assert ("of 3072 vectors meet" if stream == "piv" else "of 16 vectors meet") in text
            if stream == "piv":
                rows = _wait_for(driver, f"const d = {model}('field_value_source').data;"
                                         "return d.image.length && d.image[0].length",
                                 what="the field image")
                assert rows in (48, 48 * 64)  # (ny, nx) as nested rows or a flat array
                assert driver.execute_script(
                    f"return {model}('field_ratio_source').data.image.length") == 1
            else:
                n = _wait_for(driver, f"return {model}('rake_source').data.probe.length",
                              what="the rake badges")
                assert n == 16
            time.sleep(0.8)
            shots[stream] = tmp_path / f"{stream}.png"
            driver.save_screenshot(str(shots[stream]))
        keep = os.environ.get("EDDYVIGIL_SCREENSHOT_DIR")
        for stream, shot in shots.items():
            if keep:
                shutil.copy(shot, Path(keep) / f"test_browser_field_{stream}.png")
            assert shot.stat().st_size > 20_000 and _png_colours(shot) > 8
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
        srv.stop()
