"""Subscriber: a real PULL/SUB socket fed by a real publisher process; transport events."""

from __future__ import annotations

import threading

import numpy as np
import pytest
from conftest import StreamWriter, tcp_endpoint, write_messages

from eddyvigil.monitor import wire
from eddyvigil.monitor.subscriber import Subscriber, SubscriberError, check_endpoint

pytestmark = pytest.mark.integration  # real sockets or child processes


def test_receives_every_message_without_copy_and_reports_peer_drops(procs, tmp_path):
    w = StreamWriter()
    rng = np.random.default_rng(40)
    messages = [w.point("S")] + [w.samples(rng.standard_normal((100, 3))) for _ in range(20)]
    write_messages(tmp_path / "m.bin", messages)
    ep = tcp_endpoint()
    sub = Subscriber(ep, bind=True, socket="pull")
    got, events = [], []

    def on_frames(frames, received_at):
        msg = wire.decode(frames)
        got.append(msg.seq)
        if isinstance(msg, wire.SamplesMessage):
            assert not msg.data.flags.writeable  # a view on ZeroMQ's buffer
        if len(got) == len(messages) and any("disconnected" in e for e in events):
            sub.stop()

    def on_event(text):
        events.append(text)
        if len(got) == len(messages) and "disconnected" in text:
            sub.stop()

    timer = threading.Timer(30.0, sub.stop)  # bound in time whatever happens
    timer.start()
    try:
        p = procs.player(tmp_path / "m.bin", ep, "push", "connect")
        sub.run(on_frames, on_event=on_event, tick_interval_s=0.1)
        procs.wait(p)
    finally:
        timer.cancel()
        sub.close()
    assert got == list(range(len(messages)))
    assert any("accepted" in e for e in events)
    assert any("disconnected" in e for e in events)
    assert sub.disconnects >= 1


def test_subscription_filter_keeps_only_named_streams(procs, tmp_path):
    a, b = StreamWriter("probe-a"), StreamWriter("probe-b")
    messages = []
    for _ in range(10):
        messages += [a.samples(np.ones((10, 3))), b.samples(np.ones((10, 3)))]
    write_messages(tmp_path / "m.bin", messages)
    ep = tcp_endpoint()
    sub = Subscriber(ep, socket="sub", streams=["probe-b"])
    got = []

    def on_frames(frames, received_at):
        got.append(bytes(frames[0].buffer))
        if len(got) == 10:
            sub.stop()

    timer = threading.Timer(30.0, sub.stop)
    timer.start()
    try:
        procs.player(tmp_path / "m.bin", ep, "xpub", "bind")
        sub.run(on_frames)
    finally:
        timer.cancel()
        sub.close()
    assert got == [b"probe-b"] * 10


@pytest.mark.parametrize("bad", ["127.0.0.1:5", "tcp://", "carrier-pigeon://x"])
def test_malformed_endpoints_are_refused_with_a_reason(bad):
    with pytest.raises(SubscriberError):
        check_endpoint(bad)
    with pytest.raises(SubscriberError):
        Subscriber(bad)
