"""The one-line status of ``watch``: what it names, from a real pipeline snapshot."""

from __future__ import annotations

import io

import numpy as np

from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.watch import StatusPrinter, status_line


def test_status_names_stream_point_counts_and_the_slowest_statistic():
    p = Pipeline(summary=io.StringIO())
    assert status_line(p.snapshot) == "waiting for data"
    rng = np.random.default_rng(70)
    p.begin_point("probe-a", {"id": "P9"})
    p.feed("probe-a", 5.0 + rng.standard_normal((20000, 3)), rate_hz=20000.0)
    p.feed("probe-a", np.full((4, 3), np.nan), rate_hz=20000.0)
    line = status_line(p.publish())
    assert line.startswith("probe-a P9: 20k samples")
    assert "lost 0" in line and "rej 1" in line
    slow = p.snapshot.streams["probe-a"].stats.slowest()
    assert f"slowest {slow.name} ETA" in line
    p.end("probe-a")
    assert status_line(p.publish()).endswith("[ended]")
    out = io.StringIO()
    StatusPrinter(out).tick(p.snapshot)  # not a terminal: one plain line
    assert out.getvalue().count("\n") == 1
    p.close()
