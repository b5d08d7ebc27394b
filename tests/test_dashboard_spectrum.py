"""The spectrum panel's pure column builders (no server): what the page would draw."""

from __future__ import annotations

import math

import numpy as np
from eddyvigil.monitor.dashboard.spectrum import SpectrumPanel, scales_html, spectrum_columns
from eddyvigil.simulator.signals import PopeGenerator, generate
from eddyvigil.stats.dissipation import dissipation
from eddyvigil.stats.spectra import SpectrumAccumulator


def _pope_view_spectrum(seed=21, line=False):
    rate, U = 20_000.0, 5.0
    gen = PopeGenerator([U, 0.0], 1.5, 4.0, 1.5e-5, rate, seed)
    x = generate(gen, 1 << 20)
    if line:  # a 50 Hz line holding ~10 % of v's variance
        x[:, 1] += math.sqrt(2 * 0.1 * gen.stress[1, 1] / 0.9) * np.sin(
            2 * math.pi * 50.0 * np.arange(x.shape[0]) / rate
        )
    spec = SpectrumAccumulator(("u", "v"), rate, segment=16384).update(x).snapshot()
    return spec, dissipation(spec, U, nu=1.5e-5)


def test_columns_slope_line_meets_the_spectrum_in_the_fit_range():
    # the -5/3 line is S = 2 pi C1 eps^{2/3} k1^{-5/3} / U (REFERENCES §7, Taylor's hypothesis):
    # inside the fit range it lies on the measured spectrum within the ±5 % flatness (+ scatter)
    spec, d = _pope_view_spectrum()
    cols = spectrum_columns((spec, d))
    lo, hi = cols["fit"]
    f = cols["lines"]["f_hz"]
    inside = (f >= lo) & (f <= hi)
    line = np.interp(f[inside], cols["slope"]["f_hz"], cols["slope"]["y"])
    ratio = cols["lines"]["u"][inside] / line
    assert abs(np.median(ratio) - 1) < 0.1
    assert np.all(cols["band"]["lo"] <= cols["band"]["hi"])
    # compensated: the -5/3 line becomes flat at C1 eps^{2/3}
    comp = spectrum_columns((spec, d), compensated=True)
    assert comp["compensated"]
    np.testing.assert_allclose(comp["slope"]["y"], d.c1 * d.eps.value ** (2 / 3), rtol=1e-9)


def test_peak_marked_and_scales_text_names_method_and_taylor():
    spec, d = _pope_view_spectrum(line=True)
    cols = spectrum_columns((spec, d))
    assert len(cols["peaks"]["f_hz"]) == 1 and abs(cols["peaks"]["f_hz"][0] - 50.0) <= spec.df_hz
    assert "v 50" in cols["peaks"]["label"][0]
    text = scales_html((spec, d))
    assert "method: iso" in text and "Taylor" in text and "Re_λ" in text and "[" in text


def test_nothing_yet_draws_nothing_and_panel_builds():
    assert spectrum_columns(None)["lines"] == {"f_hz": []}
    assert "waiting" in scales_html(None)
    panel = SpectrumPanel()
    panel.update(None)
    assert panel.lines.data["f_hz"] == []
