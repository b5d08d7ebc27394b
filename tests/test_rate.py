"""The received sample rate: one definition (monitor/rate.py), the same number everywhere.

The reference is a publisher of known rate: blocks of n samples every n / R seconds of a
controlled clock, so the true rate is R exactly (arithmetic, no source needed).
"""

from __future__ import annotations

import io

import numpy as np
import pytest
from conftest import StreamWriter

from eddyvigil.monitor.dashboard import views
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.rate import WINDOW_S, ReceiveRate, format_rate
from eddyvigil.monitor.watch import status_line


class Clock:
    def __init__(self):
        self.t = 100.0

    def __call__(self):
        return self.t


@pytest.mark.parametrize(("rate_hz", "block"), [(10_000.0, 500), (40_000.0, 4096), (250.0, 25)])
def test_a_steady_publisher_reads_its_own_rate(rate_hz, block):
    r = ReceiveRate()
    period = block / rate_hz
    t = 0.0
    for _ in range(int(3 * WINDOW_S / period)):
        t += period
        r.add(t, block)
    # the window spans whole block periods: exact up to rounding
    assert r.rate_hz(t) == pytest.approx(rate_hz, rel=1e-9)
    # half a period later the estimate dips by at most one block over the window
    assert r.rate_hz(t + period / 2) == pytest.approx(rate_hz, rel=period / WINDOW_S + 1e-9)


def test_unknown_before_data_zero_after_a_silence():
    r = ReceiveRate()
    assert r.rate_hz(0.0) is None
    r.add(1.0, 100)
    assert r.rate_hz(1.5) is None  # one mark is no rate yet
    assert r.rate_hz(1.0 + WINDOW_S + 0.1) == 0.0


def test_terminal_and_dashboard_show_the_pipelines_one_rate():
    clock = Clock()
    p = Pipeline(summary=io.StringIO(), clock=clock, snapshot_interval_s=0.0)
    w = StreamWriter(rate_hz=10_000.0)
    view = p.publish().streams.get("probe-a")
    assert view is None and "–" not in status_line(p.snapshot)  # nothing yet: "waiting"
    p.handle_frames(w.point("P1"))
    health = views.health_html(p.publish())
    assert "varies" not in health and "<td style=\"padding:2px 8px\">–</td>" in health
    rng = np.random.default_rng(3)
    for _ in range(100):  # 5 s of a 10 kHz publisher: 500 samples every 50 ms
        clock.t += 0.05
        p.handle_frames(w.samples(rng.standard_normal((500, 3)).astype(np.float32)))
    snap = p.publish()
    assert snap.streams["probe-a"].received_rate_hz == pytest.approx(10_000.0, rel=1e-9)
    assert "10.0 kHz" in status_line(snap)
    assert "10.0 kHz" in views.health_html(snap)
    assert format_rate(snap.streams["probe-a"].rate_hz) == "10.0 kHz"
    p.close()


def test_a_paced_publisher_over_a_real_socket_reads_its_rate():
    """10 kHz in 500-sample messages every 50 ms of the publisher's own clock, over loopback
    PUSH/PULL; the monitor's received rate is compared with what the publisher achieved over
    the same stretch (both measured here, so the machine's load cancels)."""
    import threading
    import time

    import zmq
    from conftest import tcp_endpoint

    ep = tcp_endpoint()
    ctx = zmq.Context()
    pull = ctx.socket(zmq.PULL)
    pull.setsockopt(zmq.LINGER, 0)
    pull.bind(ep)
    sent_at: list[float] = []

    def publish():
        push = ctx.socket(zmq.PUSH)
        push.setsockopt(zmq.LINGER, 0)
        push.connect(ep)
        w = StreamWriter(rate_hz=10_000.0)
        block = np.random.default_rng(9).standard_normal((500, 3)).astype(np.float32)
        push.send_multipart(w.point("P1"))
        start = time.monotonic()
        for k in range(70):  # 3.5 s
            delay = start + 0.05 * k - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            push.send_multipart(w.samples(block))
            sent_at.append(time.monotonic())
        push.send_multipart(w.end())
        push.close(linger=1000)

    p = Pipeline(summary=io.StringIO(), snapshot_interval_s=0.25)
    thread = threading.Thread(target=publish, daemon=True)
    thread.start()
    try:
        messages = 0
        deadline = time.monotonic() + 30
        while messages < 72 and time.monotonic() < deadline:
            if pull.poll(500):
                p.handle_frames(pull.recv_multipart())
                messages += 1
                if messages == 71:  # the last samples message: read the rate now
                    measured = p.publish().streams["probe-a"].received_rate_hz
        thread.join(10)
        assert messages == 72, f"received {messages} of 72 messages within 30 s"
        # what the publisher achieved over the last window before its last samples message
        recent = [t for t in sent_at if t >= sent_at[-1] - WINDOW_S]
        achieved = 500 * (len(recent) - 1) / (recent[-1] - recent[0])
        assert measured == pytest.approx(achieved, rel=0.15)
        assert measured == pytest.approx(10_000.0, rel=0.25)
    finally:
        pull.close(linger=0)
        ctx.term()
