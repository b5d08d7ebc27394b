"""The rake/field panel's pure column builders (monitor/dashboard/field_panel.py).

References: the image is the per-vector array of the field accumulator laid out row-major on
the grid (DESIGN §13: P = nx * ny, x fastest), checked against numpy's reshape; the ratio map
is the interval's half-width over the resolved target, recomputed here from the snapshot's own
arrays; badge colours are the Okabe & Ito (2008) colour-blind-safe set; Viridis and Cividis are
perceptually uniform, colour-blind-safe maps (van der Walt & Smith 2015; Nuñez, Anderton &
Renslow 2018), as Bokeh ships them.
"""

from __future__ import annotations

from types import MappingProxyType

import numpy as np
from bokeh.document import Document

from eddyvigil.monitor.dashboard import field_panel
from eddyvigil.stats.field import FieldStatistics
from eddyvigil.stats.targets import Targets

GRID = {"x0": 0.0, "dx": 0.5, "nx": 5, "y0": 1.0, "dy": 0.25, "ny": 3}


def _view(layout: dict, P: int, seed: int, valid=None):
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((4000, P, 2)) * np.linspace(0.2, 3.0, P)[None, :, None] + [5, 0]
    f = FieldStatistics(("u", "v"), P, 100.0, targets=Targets.from_dict(
        {"targets": {"U": {"absolute": 0.05}, "uu": {"relative": 0.1}}}))
    f.update(x, valid)
    return MappingProxyType({"snapshot": f.snapshot(), "grid": None, "probes": None,
                             "final": False, **layout})


def test_grid_image_is_the_row_major_field_with_blank_vectors_without_samples():
    valid = np.ones((4000, 15), dtype=bool)
    valid[:, 7] = False  # a vector never valid
    view = _view({"grid": GRID}, 15, 1750, valid)
    snap = view["snapshot"]
    img = field_panel.grid_image(view, "U")
    want = snap.values["U"].reshape(3, 5).copy()
    want[1, 2] = np.nan  # vector 7 = row 1, column 2
    np.testing.assert_array_equal(img["image"][0], want)
    assert img["x"] == [-0.25] and img["y"] == [0.875] and img["dw"] == [2.5]
    assert img["dh"] == [0.75]
    r = field_panel.grid_image(view, "U", "ratio")["image"][0].ravel()
    hw = 0.5 * (snap.ci_high["U"] - snap.ci_low["U"])
    np.testing.assert_allclose(r[snap.counts > 0], (hw / 0.05)[snap.counts > 0])
    # an untargeted statistic: the worst targeted ratio of each vector
    worst = field_panel.grid_image(view, "vv", "ratio")["image"][0].ravel()
    hw_uu = 0.5 * (snap.ci_high["uu"] - snap.ci_low["uu"])
    both = np.fmax(hw / 0.05, hw_uu / snap.target["uu"])
    np.testing.assert_allclose(worst[snap.counts > 0], both[snap.counts > 0])
    assert field_panel.grid_image(view, "nope")["image"] == []
    assert field_panel.grid_image(None, "U")["image"] == []


def test_rake_badges_follow_each_probe_verdict():
    probes = [{"id": f"R{i}", "x": 0.0, "y": 0.01 * i, "z": 0.0} for i in range(6)]
    view = _view({"probes": probes}, 6, 1751)
    snap = view["snapshot"]
    cols = field_panel.rake_columns(view, "U")
    assert cols["probe"] == [p["id"] for p in probes]
    np.testing.assert_allclose(cols["coord"], [p["y"] for p in probes])
    want = ["met" if c else "acquiring" for c in snap.probe_converged]
    assert cols["state"] == want and "met" in want and "acquiring" in want  # quiet vs noisy
    assert cols["colour"] == [field_panel.BADGE_COLOURS[s] for s in want]
    np.testing.assert_array_equal(cols["lo"], snap.ci_low["U"])
    text = field_panel.summary_text(view)
    assert f"{snap.converged_fraction:.3f}" in text and "rake of 6 vectors" in text
    assert field_panel.summary_text(None) == ""


def test_the_panel_builds_and_shows_only_for_rakes_and_fields():
    class View:
        field = _view({"grid": GRID}, 15, 1752)

    panel = field_panel.FieldPanel(height=200)
    Document().add_root(panel.layout)
    panel.update(None)
    assert not panel.layout.visible
    panel.update(View)
    assert panel.layout.visible and panel.map_row.visible and not panel.rake_row.visible
    assert panel.value_source.data["image"][0].shape == (3, 5)
    assert "converged fraction" in panel.summary.text
    assert panel.value_mapper.palette[0] == "#440154"  # Viridis256 starts at dark purple
