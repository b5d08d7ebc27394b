"""The dashboard's quality view: counts as the summary states them, flagged samples on the trace.

The reference is the pipeline's own summary line (DESIGN §9) and the injected spike's known
time and value (analytic: a row index over the sampling rate).
"""

from __future__ import annotations

import io
import json
import math

import numpy as np
from bokeh.document import Document
from bokeh.plotting import figure
from processes import turbulence

from eddyvigil.monitor import Pipeline
from eddyvigil.monitor.dashboard.app import build_document
from eddyvigil.monitor.dashboard.quality_view import QualityPanel, mark_columns, quality_columns

RATE_HZ = 1000.0


def _spiked_pipeline():
    rng = np.random.default_rng(8)
    x = turbulence(rng, 30_000, math.exp(-1.0 / 10.0))
    spike_row = 28_500
    x[spike_row, 1] += 9.0
    buf = io.StringIO()
    p = Pipeline(summary=buf)
    p.begin_point("probe-a", {"id": "P1", "y": 0.0})
    for i in range(0, x.shape[0], 1000):
        assert p.feed("probe-a", x[i : i + 1000], rate_hz=RATE_HZ) is None
    return p, buf, x, spike_row


def test_counts_and_marks_follow_the_pipeline():
    p, buf, x, spike_row = _spiked_pipeline()
    snap = p.publish()
    view = snap.streams["probe-a"]
    cols = quality_columns(snap)
    assert cols["component"] == ["u", "v", "w"]
    marks = mark_columns(view)
    # the spike: its time (row / rate, the point's first row at t = 0) and its raw value
    hit = [
        i for i, (t, c) in enumerate(zip(marks["t"], marks["component"], strict=True))
        if c == "v" and abs(t - spike_row / RATE_HZ) < 0.5 / RATE_HZ
    ]
    assert len(hit) == 1
    assert marks["value"][hit[0]] == x[spike_row, 1]
    assert marks["kind"][hit[0]] == "spike"
    p.end("probe-a")
    p.close()
    line = json.loads(buf.getvalue().splitlines()[0])
    final = quality_columns(p.snapshot)  # the point is over: no current point, no rows
    assert final["stream"] == []
    assert line["quality"]["v"]["spikes"] >= int(cols["spikes"][1]) >= 1


def test_panel_draws_on_the_trace_and_the_page_builds():
    p, _, _, _ = _spiked_pipeline()
    fig = figure()
    panel = QualityPanel(fig)
    snap = p.publish()
    panel.update(snap, snap.streams["probe-a"])
    assert list(panel.source.data["component"]) == ["u", "v", "w"]
    assert len(panel.marks.data["t"]) >= 1
    doc = Document()
    build_document(doc, get_snapshot=lambda: snap, title="quality")
    assert doc.select_one({"name": "quality"}) is not None


def test_terminal_status_warns_with_the_counts():
    from eddyvigil.monitor.watch import status_line

    p, _, _, _ = _spiked_pipeline()
    snap = p.publish()
    q = snap.streams["probe-a"].quality
    line = status_line(snap)
    assert f"v: {q['v']['spikes']} spikes" in line


def test_random_sampling_rows_say_spikes_are_not_checked():
    """Random sampling has no spike check in arrival order (stats.quality.NO_SPIKE_CHECK): the
    summary's count is null and the table says so in words, not "None"."""
    rng = np.random.default_rng(3)
    n = 6000
    t = np.cumsum(rng.exponential(1e-3, n))
    x = 10.0 + rng.standard_normal((n, 2))
    p = Pipeline(summary=io.StringIO())
    p.begin_point("lda-1", {"id": "L1", "y": 0.0})
    assert p.feed("lda-1", x, columns=("u", "v"), times=t, weights=np.ones(n)) is None
    cols = quality_columns(p.publish())
    assert cols["component"] == ["u", "v"]
    assert cols["spikes"] == ["not checked", "not checked"]
    assert all(d.isdigit() for d in cols["dropouts"])
