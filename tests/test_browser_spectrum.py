"""The spectrum panel in a real headless Chromium, fed by a real Pipeline (BROWSER.md setup)."""

from __future__ import annotations

import math
import os
import shutil
import time
from pathlib import Path

import numpy as np
import pytest
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.simulator.signals import PopeGenerator, generate
from test_browser_dashboard import _browser_or_skip, _png_colours, _ServerThread, _wait_for

pytestmark = pytest.mark.browser


class _Clock:
    t = 0.0

    def __call__(self):
        return self.t


def test_spectrum_panel_draws_spectra_slope_and_peak(tmp_path):
    rate = 20_000.0
    gen = PopeGenerator([5.0, 0.0, 0.0], 1.5, 4.0, 1.5e-5, rate, 31)
    x = generate(gen, 1 << 20)
    x[:, 1] += 0.35 * np.sin(2 * math.pi * 50.0 * np.arange(x.shape[0]) / rate)  # a 50 Hz line on v
    p = Pipeline(clock=_Clock())
    p.begin_point("probe-a", {"id": "P1", "x": 0.0, "y": 0.01, "z": 0.0, "nu": 1.5e-5})
    for i in range(0, x.shape[0], 16384):
        p.feed("probe-a", x[i : i + 16384].astype("<f4"), rate_hz=rate)
    snap = p.publish()
    assert snap.streams["probe-a"].spectrum[1] is not None
    driver, profile = _browser_or_skip()
    srv = _ServerThread(lambda: snap)
    try:
        driver.set_window_size(1280, 2600)
        driver.set_page_load_timeout(30)
        driver.get(srv.server.url)
        _wait_for(
            driver,
            "return window.Bokeh !== undefined && Bokeh.documents.length > 0",
            what="the Bokeh document",
        )
        model = "Bokeh.documents[0].get_model_by_name"
        n = _wait_for(
            driver, f"return {model}('spectrum_source').data.f_hz.length", what="spectrum rows"
        )
        assert 50 <= n <= 200
        assert driver.execute_script(f"return {model}('spectrum_slope').data.f_hz.length") > 0
        peaks = driver.execute_script(f"return Array.from({model}('spectrum_peaks').data.f_hz)")
        assert len(peaks) == 1 and abs(peaks[0] - 50.0) < 2.0
        text = driver.execute_script(f"return {model}('spectrum_scales').text")
        assert "Re_λ" in text and "Taylor" in text
        assert "Hz" in driver.execute_script(f"return {model}('spectrum').below[0].axis_label")
        # the compensated toggle switches the axis to k1 by Taylor's hypothesis
        driver.execute_script(f"{model}('spectrum_compensated').active = true")
        _wait_for(
            driver,
            f"return {model}('spectrum').left[0].axis_label.includes('Taylor')",
            what="the compensated axis label",
        )
        driver.execute_script(f"{model}('spectrum_compensated').active = false")
        _wait_for(
            driver,
            f"return !{model}('spectrum').left[0].axis_label.includes('Taylor')",
            what="the plain axis label",
        )
        time.sleep(0.5)
        shot = tmp_path / "spectrum.png"
        driver.save_screenshot(str(shot))
        keep = os.environ.get("EDDYVIGIL_SCREENSHOT_DIR")
        if keep:
            shutil.copy(shot, Path(keep) / "test_browser_spectrum.png")
        assert shot.stat().st_size > 20_000 and _png_colours(shot) > 8
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
        srv.stop()
