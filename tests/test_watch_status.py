"""The one-line status of ``watch``: what it names, from a real pipeline snapshot."""

from __future__ import annotations

import io

import numpy as np

from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.watch import StatusPrinter, status_line
from eddyvigil.stats.verdict import point_verdict


def test_status_names_stream_point_counts_and_the_verdict():
    p = Pipeline(summary=io.StringIO())
    assert status_line(p.snapshot) == "waiting for data"
    rng = np.random.default_rng(70)
    p.begin_point("probe-a", {"id": "P9"})
    p.feed("probe-a", 5.0 + rng.standard_normal((20000, 3)), rate_hz=20000.0)
    p.feed("probe-a", np.full((4, 3), np.nan), rate_hz=20000.0)
    line = status_line(p.publish())
    assert line.startswith("probe-a P9: 20k samples")
    assert "lost 0" in line and "rej 1" in line
    assert point_verdict(p.snapshot.streams["probe-a"].stats).text() in line
    p.end("probe-a")
    assert status_line(p.publish()) == "probe-a: finished, 1 point (the publisher sent end)"
    out = io.StringIO()
    printer = StatusPrinter(out, plain_interval_s=0.0)  # not a terminal: plain lines
    for _ in range(3):
        printer.tick(p.snapshot)
    printer.done()
    assert out.getvalue().count("\n") == 1  # a finished run is stated once, not repeated
    p.close()


def test_data_before_any_point_message_is_said_live():
    p = Pipeline(summary=io.StringIO())
    p.feed("probe-a", np.random.default_rng(1).standard_normal((2000, 3)), rate_hz=1000.0)
    line = status_line(p.publish())
    assert line.startswith("probe-a -: 2k samples")
    assert "data before any point message: counted under point null" in line
    from eddyvigil.monitor.dashboard.views import banner

    assert "before any point message" in banner(p.snapshot.streams["probe-a"]).detail
    p.close()


def test_a_disconnect_after_end_is_not_an_alarm():
    out = io.StringIO()
    ended = [False]
    printer = StatusPrinter(out, ended=lambda: ended[0])
    printer.event("peer disconnected")
    assert "transport: peer disconnected" in out.getvalue()
    ended[0] = True
    before = out.getvalue()
    printer.event("connection closed")
    assert out.getvalue() == before
