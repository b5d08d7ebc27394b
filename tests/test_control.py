"""Control socket (DESIGN §6): a real PUB bound by the monitor, a SUB as a traverse would use."""

from __future__ import annotations

import json

import pytest
import zmq
from conftest import tcp_endpoint, wait_for

from eddyvigil.monitor.control import ControlPublisher, converged_message
from eddyvigil.monitor.subscriber import AddressInUseError, SubscriberError

pytestmark = pytest.mark.integration  # real sockets or child processes


def test_converged_signal_has_the_documented_frames_and_fields():
    ep = tcp_endpoint()
    control = ControlPublisher(ep)
    ctx = zmq.Context()
    sub = ctx.socket(zmq.SUB)
    sub.setsockopt(zmq.LINGER, 0)
    sub.setsockopt(zmq.SUBSCRIBE, b"probe-a")
    sub.connect(ep)
    try:
        summary = {"v": 1, "kind": "point", "converged_at_s": 12.5, "x": float("nan")}

        def delivered():  # PUB drops until the subscription has arrived: resend, bounded
            control.send("probe-a", {"id": "P3", "y": 0.004}, 12.5, summary)
            return sub.poll(100)

        wait_for(delivered, timeout=10, what="a converged signal")
        topic, body = sub.recv_multipart()
        msg = json.loads(body)
        assert topic == b"probe-a"
        assert msg == {
            "v": 1,
            "kind": "converged",
            "stream": "probe-a",
            "point": {"id": "P3", "y": 0.004},
            "at_s": 12.5,
            "verdict": None,
            "summary": {"v": 1, "kind": "point", "converged_at_s": 12.5, "x": None},
        }
    finally:
        sub.close(linger=0)
        ctx.term()
        control.close()


def test_converged_message_is_plain_data():
    m = converged_message("s", {"id": "A"}, 1, {"kind": "point"})
    assert m["at_s"] == 1.0 and isinstance(m["at_s"], float)


def test_bind_errors_are_reported_as_endpoint_errors():
    ep = tcp_endpoint()
    first = ControlPublisher(ep)
    try:
        with pytest.raises(AddressInUseError):
            ControlPublisher(ep)
    finally:
        first.close()
    with pytest.raises(SubscriberError):
        ControlPublisher("tcp://256.1.1.1:notaport")
