"""The control socket of DESIGN §6: "move on" and "take that back", for a traverse controller.

With ``--control ENDPOINT`` the monitor binds a PUB socket there and publishes two frames, the
stream name and a JSON object:

* ``{"v": 1, "kind": "converged", "stream", "point", "at_s", "verdict", "summary"}`` when the
  point's verdict (:mod:`eddyvigil.stats.verdict`) first says MOVE ON: every target met, and
  the record at least ``MIN_RECORD_INTEGRAL_TIMES`` integral times long, so that the drift
  check had power;
* ``{"v": 1, "kind": "withdrawn", "stream", "point", "at_s", "converged_at_s", "reason",
  "verdict", "summary"}`` when a point already signalled converged turns suspect at a later
  checkpoint while data keep coming. The point may be signalled converged again later.

``at_s`` is the acquisition time into the point, ``summary`` the point's DESIGN §4 line at
that moment (``"complete": false``: the point is still running). A controller subscribes (to
all, or to its stream's name) and moves the traverse on. Like any PUB socket it does not queue
for a subscriber that is not connected yet: connect before the point converges.
"""

from __future__ import annotations

from collections.abc import Mapping

import zmq

from eddyvigil.monitor.subscriber import open_socket
from eddyvigil.monitor.summary import dumps_line

__all__ = ["ControlPublisher", "converged_message", "withdrawn_message"]


def converged_message(stream: str, point: Mapping, at_s: float, summary: Mapping) -> dict:
    """The JSON object of one ``converged`` signal."""
    return {
        "v": 1,
        "kind": "converged",
        "stream": stream,
        "point": dict(point),
        "at_s": float(at_s),
        "verdict": summary.get("verdict"),
        "summary": dict(summary),
    }


def withdrawn_message(stream: str, point: Mapping, at_s: float, summary: Mapping) -> dict:
    """The JSON object of one ``withdrawn`` signal (the reason is the verdict's)."""
    verdict = summary.get("verdict") or {}
    return {
        "v": 1,
        "kind": "withdrawn",
        "stream": stream,
        "point": dict(point),
        "at_s": float(at_s),
        "converged_at_s": summary.get("signalled_at_s"),
        "reason": verdict.get("reason"),
        "verdict": summary.get("verdict"),
        "summary": dict(summary),
    }


class ControlPublisher:
    """A bound PUB socket sending ``converged`` signals (LINGER 0).

    Raises ``eddyvigil.monitor.subscriber.SubscriberError`` (or its ``AddressInUseError``) when the
    endpoint cannot be bound.
    """

    def __init__(self, endpoint: str, context: zmq.Context | None = None):
        self._own_ctx = context is None
        self._ctx = context if context is not None else zmq.Context()
        try:
            self.socket = open_socket(self._ctx, zmq.PUB, endpoint, bind=True)
        except Exception:
            if self._own_ctx:
                self._ctx.term()
            raise
        self.endpoint = endpoint
        self.sent = 0

    def send(self, stream: str, point: Mapping, at_s: float, summary: Mapping) -> None:
        """Publish one ``converged`` signal; never blocks (PUB drops if nobody listens)."""
        self._publish(stream, converged_message(stream, point, at_s, summary))

    def withdrawn(self, stream: str, point: Mapping, at_s: float, summary: Mapping) -> None:
        """Publish one ``withdrawn`` signal (Pipeline finds it as ``on_converged.withdrawn``)."""
        self._publish(stream, withdrawn_message(stream, point, at_s, summary))

    def _publish(self, stream: str, message: Mapping) -> None:
        body = dumps_line(message)
        self.socket.send_multipart([stream.encode("utf-8"), body.encode("utf-8")])
        self.sent += 1

    __call__ = send  # usable directly as Pipeline(on_converged=...)

    def close(self) -> None:
        self.socket.close(linger=0)
        if self._own_ctx:
            self._ctx.term()
