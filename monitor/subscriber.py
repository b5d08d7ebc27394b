"""The monitor's receiving socket: ZeroMQ SUB (default) or PULL, connected or bound.

:class:`Subscriber` opens the socket with LINGER 0, receives multipart messages without
copying (``copy=False``: the samples frame reaches numpy as a view on ZeroMQ's buffer, no
per-sample Python work) and hands each frame list to a callback, normally
:meth:`eddyvigil.monitor.pipeline.Pipeline.handle_frames`. A ZeroMQ socket monitor reports transport
events (peer connected, disconnected, handshake failed) to a second callback, so a peer that
ZeroMQ drops never goes unnoticed.

Queue depth. ``RCVHWM`` is set to :data:`DEFAULT_RCVHWM` messages (ZeroMQ's default is
1000). At the typical 16384 rows x 3 float32 per message (196 KiB) that lets about 800 MiB
queue in the monitor while the statistics catch up after a stall (a dashboard redraw, a
garbage collection) before a PUB starts dropping; with PUSH/PULL a full queue just slows the
publisher down. Smaller messages cost proportionally less memory.

Size limit. The application limit (``--max-message-mb``) is enforced by
:func:`eddyvigil.monitor.wire.decode`, which rejects and counts an oversized message. ZeroMQ's own
``MAXMSGSIZE``, which disconnects a peer without telling anyone, is only set as a far higher
memory ceiling (:data:`MAXMSGSIZE_FACTOR` times the limit), and a disconnect it causes shows up
as a transport event.

CURVE. With a :class:`eddyvigil.monitor.keys.Gatekeeper` (``curve=``) the socket is the CURVE
server (whether it binds or connects), the gatekeeper's ZAP handler runs on the socket's
context, handshake failures are counted by the gatekeeper, and its notices of refused peers
are passed to ``on_event``; the connect/disconnect chatter of a refused peer retrying every
0.1 s is not (it would flood the terminal).
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable, Iterable

import zmq
from zmq.utils.monitor import recv_monitor_message

from eddyvigil.monitor.transport import (
    AddressInUseError,
    EndpointError,
    check_endpoint,
    open_socket,
)

__all__ = [
    "Subscriber",
    "SubscriberError",
    "AddressInUseError",
    "DEFAULT_RCVHWM",
    "MAXMSGSIZE_FACTOR",
    "check_endpoint",
    "open_socket",
]

DEFAULT_RCVHWM = 4096
#: Bytes of messages kept in order while the kernels compile on a first start (64 probes of
#: 3 x float32 at 20 kHz send 15 MiB/s: about a minute of them).
DEFAULT_BACKLOG_BYTES = 1 << 30
MAXMSGSIZE_FACTOR = 4
#: Seconds between closing a CURVE socket and stopping its ZAP handler (see :meth:`close`).
CURVE_CLOSE_GRACE_S = 0.5
#: Messages taken from the socket per poll before the loop looks at its stop flag again.
DRAIN_BATCH = 64

_EVENT_TEXT = {
    zmq.EVENT_CONNECTED: "connected to",
    zmq.EVENT_ACCEPTED: "accepted a peer on",
    zmq.EVENT_DISCONNECTED: "peer disconnected from",
    zmq.EVENT_CLOSED: "connection closed on",
    zmq.EVENT_ACCEPT_FAILED: "could not accept a peer on",
    zmq.EVENT_BIND_FAILED: "could not bind",
}
for _name, _text in (
    ("EVENT_HANDSHAKE_FAILED_NO_DETAIL", "handshake failed with"),
    ("EVENT_HANDSHAKE_FAILED_PROTOCOL", "protocol error (peer cut off) on"),
    ("EVENT_HANDSHAKE_FAILED_AUTH", "authentication failed on"),
):
    if hasattr(zmq, _name):
        _EVENT_TEXT[getattr(zmq, _name)] = _text


_HANDSHAKE_FAILED = {
    getattr(zmq, name)
    for name in ("EVENT_HANDSHAKE_FAILED_NO_DETAIL", "EVENT_HANDSHAKE_FAILED_PROTOCOL",
                 "EVENT_HANDSHAKE_FAILED_AUTH")
    if hasattr(zmq, name)
}
_HANDSHAKE_FAILED_AUTH = getattr(zmq, "EVENT_HANDSHAKE_FAILED_AUTH", None)
_PEER_CHATTER = {zmq.EVENT_CONNECTED, zmq.EVENT_ACCEPTED, zmq.EVENT_DISCONNECTED,
                 zmq.EVENT_CLOSED}


#: Kept under their old names: the errors of :mod:`eddyvigil.monitor.transport`.
SubscriberError = EndpointError


class Subscriber:
    """A receiving socket and its loop.

    Parameters
    ----------
    endpoint : str
        ZeroMQ endpoint, e.g. ``tcp://127.0.0.1:5555``.
    bind : bool
        Bind instead of connect.
    socket : {"sub", "pull"}
        SUB (topics filtered by ``streams``) or PULL (back-pressure, no filter).
    streams : iterable of str
        Topic filters for SUB (exact stream names); empty subscribes to everything.
    max_message_bytes : int
        The application limit; ZeroMQ's ``MAXMSGSIZE`` is set to a multiple of it.
    rcvhwm : int
        Receive high-water mark in messages.
    context : zmq.Context, optional
        Defaults to a private context, terminated by :meth:`close`.
    curve : eddyvigil.monitor.keys.Gatekeeper, optional
        CURVE server keys and allowed publishers; None (default) leaves the socket open to all.
    backlog_limit_bytes : int
        At most this many bytes kept while waiting for ``ready`` (see :meth:`run`).
    """

    def __init__(
        self,
        endpoint: str,
        *,
        bind: bool = False,
        socket: str = "sub",
        streams: Iterable[str] = (),
        max_message_bytes: int = 256 * 2**20,
        rcvhwm: int = DEFAULT_RCVHWM,
        context: zmq.Context | None = None,
        curve=None,
        backlog_limit_bytes: int = DEFAULT_BACKLOG_BYTES,
    ):
        if socket not in ("sub", "pull"):
            raise SubscriberError(f"socket must be 'sub' or 'pull', not {socket!r}")
        self.endpoint = endpoint
        self._own_ctx = context is None
        self._ctx = context if context is not None else zmq.Context()
        self._stop = threading.Event()
        kind = zmq.SUB if socket == "sub" else zmq.PULL
        self._bound = bool(bind)
        self.curve = curve
        self._quiet_until = -float("inf")
        try:
            if curve is not None:
                curve.start(self._ctx)
            self.socket = open_socket(self._ctx, kind, endpoint, bind=bind,
                                      options=curve.options if curve is not None else None)
        except SubscriberError:
            if curve is not None:
                curve.stop()
            if self._own_ctx:
                self._ctx.term()
            raise
        self.socket.setsockopt(zmq.RCVHWM, int(rcvhwm))
        self.socket.setsockopt(zmq.MAXMSGSIZE, MAXMSGSIZE_FACTOR * int(max_message_bytes) + 2**20)
        if kind == zmq.SUB:
            topics = list(streams) or [""]
            for t in topics:
                self.socket.setsockopt(zmq.SUBSCRIBE, t.encode("utf-8"))
        self._monitor = self.socket.get_monitor_socket(
            zmq.EVENT_CONNECTED
            | zmq.EVENT_DISCONNECTED
            | zmq.EVENT_ACCEPTED
            | zmq.EVENT_CLOSED
            | zmq.EVENT_ACCEPT_FAILED
            | zmq.EVENT_BIND_FAILED
            | getattr(zmq, "EVENT_HANDSHAKE_FAILED_NO_DETAIL", 0)
            | getattr(zmq, "EVENT_HANDSHAKE_FAILED_PROTOCOL", 0)
            | getattr(zmq, "EVENT_HANDSHAKE_FAILED_AUTH", 0)
        )
        self._monitor.setsockopt(zmq.LINGER, 0)
        self.messages = 0
        #: messages received but not yet handed on (waiting for ``ready``), and their bytes
        self.backlog_messages = 0
        self.backlog_bytes = 0
        self.backlog_limit_bytes = int(backlog_limit_bytes)
        self.disconnects = 0
        self._last_event: tuple | None = None
        self._ever_connected = False
        #: a peer connected (or was accepted) at least once: someone is at the other end
        self.peer_seen = False

    def stop(self) -> None:
        """Ask :meth:`run` to return (thread-safe, also from a signal handler)."""
        self._stop.set()

    @property
    def stopping(self) -> bool:
        return self._stop.is_set()

    def run(
        self,
        on_frames: Callable[[list, float], object],
        *,
        on_event: Callable[[str], object] | None = None,
        on_tick: Callable[[], object] | None = None,
        tick_interval_s: float = 1.0,
        poll_ms: int = 100,
        max_messages: int | None = None,
        ready: threading.Event | None = None,
    ) -> None:
        """Receive until :meth:`stop` (or ``max_messages``); callbacks run in this thread.

        ``on_frames(frames, received_at)`` gets the ``zmq.Frame`` list and the wall time;
        ``on_event(text)`` transport events; ``on_tick()`` about every ``tick_interval_s``.
        ``ready``: until it is set (the statistics kernels are being compiled) messages are
        received and kept in order with their receive times, not handed on; then the backlog
        goes to ``on_frames`` first. The backlog holds at most :attr:`backlog_limit_bytes`;
        beyond that messages wait in ZeroMQ's queue (PULL: the publisher is slowed down).
        """
        poller = zmq.Poller()
        poller.register(self.socket, zmq.POLLIN)
        poller.register(self._monitor, zmq.POLLIN)
        next_tick = time.monotonic() + tick_interval_s
        backlog: deque = deque()
        self.backlog_bytes = 0
        enough = max_messages if max_messages is not None else float("inf")
        while not self._stop.is_set():
            warm = ready is None or ready.is_set()
            full = self.backlog_bytes >= self.backlog_limit_bytes
            if not warm and full:
                poller.unregister(self.socket)  # no busy loop while the queue is full
            ready_sockets = dict(poller.poll(0 if (warm and backlog) else poll_ms))
            if not warm and full:
                poller.register(self.socket, zmq.POLLIN)
            if self._monitor in ready_sockets:
                self._drain_events(on_event)
            if self.curve is not None:
                self._curve_notices(on_event)
            if self.socket in ready_sockets:
                for _ in range(DRAIN_BATCH):
                    if self.messages >= enough:
                        break
                    direct = warm and not backlog
                    if not direct and self.backlog_bytes >= self.backlog_limit_bytes:
                        break
                    try:
                        frames = self.socket.recv_multipart(zmq.NOBLOCK, copy=False)
                    except zmq.Again:
                        break
                    self.messages += 1
                    if direct:
                        on_frames(frames, time.time())
                    else:
                        backlog.append((frames, time.time()))
                        self.backlog_bytes += sum(len(f) for f in frames)
                    if self._stop.is_set():
                        break
            if warm:
                for _ in range(min(len(backlog), DRAIN_BATCH)):
                    if self._stop.is_set():
                        break
                    frames, received_at = backlog.popleft()
                    self.backlog_bytes -= sum(len(f) for f in frames)
                    on_frames(frames, received_at)
            self.backlog_messages = len(backlog)
            if self.messages >= enough and not backlog:
                self._stop.set()
            now = time.monotonic()
            if on_tick is not None and now >= next_tick:
                next_tick = now + tick_interval_s
                on_tick()

    @property
    def refused_peers(self) -> int | None:
        """Peers refused by CURVE (None without CURVE)."""
        return None if self.curve is None else self.curve.refused_peers

    def _drain_events(self, on_event) -> None:
        while True:
            try:
                evt = recv_monitor_message(self._monitor, zmq.NOBLOCK)
            except zmq.Again:
                break
            if self.curve is not None and self._curve_event(evt, on_event):
                continue
            kind = evt.get("event")
            if kind in (zmq.EVENT_CONNECTED, zmq.EVENT_ACCEPTED):
                self.peer_seen = True
            if kind == zmq.EVENT_DISCONNECTED:
                self.disconnects += 1
            text = _EVENT_TEXT.get(kind)
            if text is not None and on_event is not None:
                addr = evt.get("endpoint", b"")
                if isinstance(addr, bytes):
                    addr = addr.decode("utf-8", "replace")
                # a connect retry to a publisher that is not up yet closes every ~100 ms:
                # not worth a word before the first connection, and once per run of retries after
                if kind == zmq.EVENT_CONNECTED:
                    self._ever_connected = True
                if kind == zmq.EVENT_CLOSED and not self._ever_connected:
                    continue
                if (kind, addr) == self._last_event:
                    continue
                self._last_event = (kind, addr)
                on_event(f"{time.strftime('%H:%M:%S')} {text} {addr or self.endpoint}")

    def _curve_event(self, evt: dict, on_event) -> bool:
        """Count a handshake failure; True if the event is not to be shown (refused peer)."""
        kind = evt.get("event")
        if kind in _HANDSHAKE_FAILED:
            self._quiet_until = time.monotonic() + 1.0
            if kind != _HANDSHAKE_FAILED_AUTH:  # a ZAP refusal is counted by its key instead
                self.curve.handshake_failed(
                    f"{time.strftime('%H:%M:%S')} {_EVENT_TEXT.get(kind, 'handshake failed')} "
                    f"{self.endpoint}")
            return True
        if kind in (zmq.EVENT_CONNECTED, zmq.EVENT_ACCEPTED):
            self.peer_seen = True
        return time.monotonic() < self._quiet_until and kind in _PEER_CHATTER

    def _close_curve_quietly(self) -> None:
        """No new connections, then wait until the socket monitor has been quiet for
        :data:`CURVE_CLOSE_GRACE_S` (at most 5 s): libzmq aborts the process
        (zap_client.cpp:50) when a handshake sends its ZAP request after its session began to
        close, and a refused peer retries every 0.1 s."""
        try:
            (self.socket.unbind if self._bound else self.socket.disconnect)(self.endpoint)
        except zmq.ZMQError:
            pass
        deadline = time.monotonic() + 5.0
        while time.monotonic() < deadline:
            if not self._monitor.poll(int(CURVE_CLOSE_GRACE_S * 1000)):
                return
            try:
                while True:
                    recv_monitor_message(self._monitor, zmq.NOBLOCK)
            except zmq.Again:
                pass

    def _curve_notices(self, on_event) -> None:
        if self.curve is not None:
            for text in self.curve.notices():
                if on_event is not None:
                    on_event(text)

    def close(self, leave_curve_open: bool = False) -> None:
        """Close both sockets with LINGER 0 (and the private context).

        ``leave_curve_open``: with CURVE, close the socket monitor only and leave the data
        socket (still bound or connected), its context and the ZAP handler to the process's
        exit. libzmq 4.3 aborts the process (zap_client.cpp:50) when a refused peer's retried
        handshake sends its ZAP request while the socket closes, whatever the grace period;
        ``watch`` uses this and then ends with ``os._exit`` once every output is flushed.
        """
        leave = leave_curve_open and self.curve is not None
        if self.curve is not None and not leave:
            self._close_curve_quietly()
        try:
            self.socket.disable_monitor()
        except zmq.ZMQError:
            pass
        self._monitor.close(linger=0)
        if leave:
            # not even unbind/disconnect: ending a session while a refused peer's handshake
            # sends its ZAP request is what aborts (seen with a SUB that connects to a
            # stranger's PUB: "Transport endpoint is not connected (src/zap_client.cpp:50)")
            return
        self.socket.close(linger=0)
        if self.curve is not None:
            time.sleep(CURVE_CLOSE_GRACE_S)
            self.curve.stop()
        if self._own_ctx:
            self._ctx.term()
