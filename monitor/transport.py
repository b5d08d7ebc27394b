"""Opening ZeroMQ sockets, waiting for slow joiners, pacing and the ``--speed`` option.

One place for what the monitor (``watch``), the re-publisher (``replay --publish``), the
control socket, the simulator and the demo all need from the transport:

- :func:`check_endpoint`: the form of an endpoint, checked before anything starts. For
  ``tcp://HOST:PORT`` the port must be 1-65535 (``*`` only when binding: any free port) and
  the host an IPv4 address, a bracketed IPv6 address, a host name (resolved when connecting,
  so an unknown host is said at once) or ``*`` when binding.
- :func:`open_socket`: a socket of a named type, LINGER 0 unless asked otherwise, bound or
  connected, ZeroMQ's errors turned into :class:`EndpointError` / :class:`AddressInUseError`.
- :func:`wait_for_peer` and :func:`settle`: a PUB drops what it sends before a subscriber
  has connected and subscribed (the "slow joiner"); a publisher waits for the first peer
  (ZeroMQ socket monitor) and then a moment for its subscription to arrive.
- :func:`parse_speed` and :class:`Pacer`: ``--speed 1|N|max``, one meaning everywhere: a
  message stamped ``t`` seconds after the first is sent (or fed) ``t / speed`` seconds after
  it; ``max`` does not wait.
"""

from __future__ import annotations

import argparse
import errno
import ipaddress
import re
import socket as _socket
import time
from collections.abc import Callable

import zmq
import zmq.utils.monitor

__all__ = [
    "EndpointError",
    "AddressInUseError",
    "SOCKET_TYPES",
    "TRANSPORTS",
    "check_endpoint",
    "open_socket",
    "wait_for_peer",
    "settle",
    "parse_speed",
    "Pacer",
    "open_publisher",
    "port_number",
    "tcp_port_taken",
]

#: Transports ZeroMQ knows.
TRANSPORTS = ("tcp", "ipc", "inproc", "pgm", "epgm", "ws", "wss", "vmci")
#: Socket type names used on the command line.
SOCKET_TYPES = {"sub": zmq.SUB, "pull": zmq.PULL, "pub": zmq.PUB, "push": zmq.PUSH}

_HOSTNAME = re.compile(r"^(?=.{1,253}$)[A-Za-z0-9]([A-Za-z0-9-]{0,61}[A-Za-z0-9])?"
                       r"(\.[A-Za-z0-9]([A-Za-z0-9-]{0,61}[A-Za-z0-9])?)*\.?$")


class EndpointError(Exception):
    """The endpoint cannot be used (malformed, bad port or host, cannot bind or connect)."""


class AddressInUseError(EndpointError):
    """Binding to an address some other program already holds."""


def _check_host(host: str, endpoint: str, *, bind: bool, resolve: bool, port: str) -> None:
    if host == "*":
        if not bind:
            raise EndpointError(f"endpoint {endpoint!r}: '*' (every interface) is only for "
                                "binding; to connect, give the publisher's host name or address")
        return
    if host.startswith("[") and host.endswith("]"):
        try:
            ipaddress.IPv6Address(host[1:-1])
        except ValueError:
            raise EndpointError(f"endpoint {endpoint!r}: {host} is not an IPv6 address") from None
        return
    try:
        ipaddress.IPv4Address(host)
        return
    except ValueError:
        pass
    if re.fullmatch(r"[0-9.]+", host) or not _HOSTNAME.match(host):
        raise EndpointError(f"endpoint {endpoint!r}: {host!r} is not a host name or address")
    if resolve and not bind:
        try:
            _socket.getaddrinfo(host, int(port), type=_socket.SOCK_STREAM)
        except (OSError, UnicodeError):
            raise EndpointError(
                f"endpoint {endpoint!r}: unknown host {host!r} (check the spelling, or give "
                "the publisher's address)"
            ) from None


def check_endpoint(endpoint: str, *, bind: bool = False, resolve: bool = True) -> str:
    """Check an endpoint's form (and, when connecting over TCP, resolve its host); returns it.

    >>> check_endpoint("tcp://127.0.0.1:5555")
    'tcp://127.0.0.1:5555'
    >>> for bad in ("127.0.0.1:5555", "tcp://127.0.0.1:99999", "tcp://*:5555"):
    ...     try:
    ...         check_endpoint(bad)
    ...     except EndpointError as exc:
    ...         print(str(exc)[:60])
    endpoint '127.0.0.1:5555' has no transport; write it like tc
    endpoint 'tcp://127.0.0.1:99999': port 99999 is outside 1-65
    endpoint 'tcp://*:5555': '*' (every interface) is only for b
    """
    if not isinstance(endpoint, str):
        raise EndpointError(f"endpoint must be text, not {type(endpoint).__name__}")
    transport, sep, rest = endpoint.partition("://")
    if not sep:
        raise EndpointError(
            f"endpoint {endpoint!r} has no transport; write it like tcp://127.0.0.1:5555 "
            "or ipc:///tmp/probe.sock"
        )
    if transport not in TRANSPORTS:
        raise EndpointError(f"endpoint {endpoint!r}: unknown transport {transport!r}")
    if not rest:
        raise EndpointError(f"endpoint {endpoint!r} has no address")
    if transport in ("tcp", "ws", "wss"):
        address = rest.split(";")[-1]  # ZeroMQ's "source;destination" form
        address = address.split("/", 1)[0] if transport != "tcp" else address
        host, colon, port = address.rpartition(":")
        if not colon or not host:
            raise EndpointError(
                f"endpoint {endpoint!r} needs a host and a port, like tcp://127.0.0.1:5555"
            )
        if port == "*" and bind:
            return endpoint
        if not port.isdigit() or not 1 <= int(port) <= 65535:
            raise EndpointError(f"endpoint {endpoint!r}: port {port} is outside 1-65535"
                                if port.isdigit() else
                                f"endpoint {endpoint!r}: port {port!r} is not a number 1-65535")
        _check_host(host, endpoint, bind=bind, resolve=resolve, port=port)
    return endpoint


def open_socket(ctx: zmq.Context, socket_type: int | str, endpoint: str, *, bind: bool,
                linger_ms: int = 0, options: dict | None = None) -> zmq.Socket:
    """A socket of ``socket_type`` (``zmq.SUB`` or ``"sub"``...), bound or connected.

    LINGER is ``linger_ms`` (0: closing never waits for queued messages); ``options``
    (``{zmq.SNDHWM: 1000}``...) are set before the bind/connect. ZeroMQ's errors become
    :class:`AddressInUseError` or :class:`EndpointError` with a readable message.
    """
    check_endpoint(endpoint, bind=bind)
    kind = SOCKET_TYPES[socket_type] if isinstance(socket_type, str) else socket_type
    sock = ctx.socket(kind)
    sock.setsockopt(zmq.LINGER, int(linger_ms))
    try:
        for opt, value in (options or {}).items():
            sock.setsockopt(opt, value)
        if bind:
            sock.bind(endpoint)
        else:
            sock.connect(endpoint)
    except zmq.ZMQError as exc:
        sock.close(linger=0)
        if exc.errno == zmq.EADDRINUSE:
            raise AddressInUseError(f"{endpoint}: address already in use") from None
        verb = "bind" if bind else "connect"
        raise EndpointError(f"cannot {verb} {endpoint}: {exc.strerror}") from None
    return sock


def wait_for_peer(monitor_socket: zmq.Socket, timeout_s: float, stop=lambda: False,
                  events: int = zmq.EVENT_ACCEPTED | zmq.EVENT_CONNECTED) -> bool:
    """Wait for a peer on a socket monitor made *before* the bind/connect; False on timeout.

    ``monitor_socket`` comes from ``sock.get_monitor_socket(EVENT_ACCEPTED | EVENT_CONNECTED)``
    (attached first, so an immediate connection is not missed); ``stop()`` ends the wait early.
    ``events``: the events that count as "a peer is there" (a CURVE client waits for
    ``EVENT_HANDSHAKE_SUCCEEDED``: a peer that refuses our key is no peer).
    """
    deadline = time.monotonic() + timeout_s
    while not stop() and (left := deadline - time.monotonic()) > 0:
        if monitor_socket.poll(int(min(left, 0.2) * 1000) + 1):
            ev = zmq.utils.monitor.recv_monitor_message(monitor_socket)
            if ev["event"] & events:
                return True
    return False


def open_publisher(ctx: zmq.Context, socket_type: str, endpoint: str, *, bind: bool,
                   wait_peer_s: float = 0.0, settle_s: float = 0.0, stop=lambda: False,
                   linger_ms: int = 0, options: dict | None = None) -> tuple[zmq.Socket, bool]:
    """Open a PUB/PUSH socket and, for PUB, wait out the slow joiner; returns (socket, peer).

    PUB: wait at most ``wait_peer_s`` for a first peer to connect (with CURVE client keys in
    ``options``: to complete the handshake), then ``settle_s`` for its subscription to arrive. PUSH needs neither (it holds messages until a peer is there).
    ``peer`` is False when no peer came within ``wait_peer_s`` (the caller says so).
    """
    kind = SOCKET_TYPES[socket_type]
    watch_peer = kind == zmq.PUB and wait_peer_s > 0
    if not watch_peer:
        sock = open_socket(ctx, kind, endpoint, bind=bind, linger_ms=linger_ms, options=options)
        peer = True
    else:
        check_endpoint(endpoint, bind=bind)
        sock = ctx.socket(kind)
        curve = zmq.CURVE_SERVERKEY in (options or {})
        events = (zmq.EVENT_HANDSHAKE_SUCCEEDED if curve
                  else zmq.EVENT_ACCEPTED | zmq.EVENT_CONNECTED)
        mon = sock.get_monitor_socket(events)
        try:
            sock.setsockopt(zmq.LINGER, int(linger_ms))
            for opt, value in (options or {}).items():
                sock.setsockopt(opt, value)
            try:
                (sock.bind if bind else sock.connect)(endpoint)
            except zmq.ZMQError as exc:
                sock.disable_monitor()
                mon.close(linger=0)
                sock.close(linger=0)
                if exc.errno == zmq.EADDRINUSE:
                    raise AddressInUseError(f"{endpoint}: address already in use") from None
                verb = "bind" if bind else "connect"
                raise EndpointError(f"cannot {verb} {endpoint}: {exc.strerror}") from None
            peer = wait_for_peer(mon, wait_peer_s, stop, events)
        finally:
            if not sock.closed:
                sock.disable_monitor()
            mon.close(linger=0)
    if kind == zmq.PUB:
        settle(settle_s, stop)
    return sock, peer


def settle(seconds: float, stop=lambda: False) -> None:
    """Sleep ``seconds`` in short steps (a subscription on its way), ending early on ``stop()``."""
    end = time.monotonic() + max(0.0, seconds)
    while not stop() and (left := end - time.monotonic()) > 0:
        time.sleep(min(left, 0.1))


def parse_speed(text: str) -> float | None:
    """``--speed``: ``"max"`` -> None (no pacing); a positive finite number -> that factor.

    >>> parse_speed("max"), parse_speed("4")
    (None, 4.0)
    """
    if text.strip().lower() == "max":
        return None
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"speed must be a positive number or 'max', not {text!r}"
        ) from None
    if not (value > 0 and value != float("inf")):
        raise argparse.ArgumentTypeError(f"speed must be a positive number or 'max', not {text!r}")
    return value


class Pacer:
    """Holds messages to their own clock divided by ``speed`` (None: never waits).

    The first :meth:`wait` is on time by definition (set-up costs before it do not count);
    a later one at stream time ``t`` returns ``(t - t_first) / speed`` seconds after it, on a
    monotonic clock, so sleeping errors never add up. With ``stop`` it sleeps in steps of at
    most ``step_s`` and returns early once ``stop()`` is true.
    """

    def __init__(self, speed: float | None, *, clock=time.monotonic, sleep=time.sleep,
                 step_s: float = 0.25):
        if speed is not None and not speed > 0:
            raise ValueError("speed must be positive, or None for as fast as possible")
        self.speed = None if speed is None or speed == float("inf") else float(speed)
        self._clock, self._sleep, self._step = clock, sleep, step_s
        self._origin: float | None = None

    def wait(self, t_s: float, stop: Callable[[], bool] | None = None) -> None:
        if self.speed is None:
            return
        if self._origin is None:
            self._origin = self._clock() - t_s / self.speed
            return
        due = self._origin + t_s / self.speed
        if stop is None:
            if (left := due - self._clock()) > 0:
                self._sleep(left)
            return
        while not stop() and (left := due - self._clock()) > 0:
            self._sleep(min(left, self._step))


def port_number(text: str) -> int:
    """argparse type of a TCP port option: an integer 1-65535.

    >>> port_number("5006")
    5006
    """
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"port must be a whole number 1-65535, not {text!r}"
        ) from None
    if not 1 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"port {value} is outside 1-65535")
    return value


def tcp_port_taken(host: str, port: int) -> str | None:
    """Why ``host:port`` cannot be listened on right now (None if it can): a quick check made
    before a slow start-up, so that a port in use is said at once."""
    try:
        with _socket.socket(_socket.AF_INET6 if ":" in host else _socket.AF_INET,
                            _socket.SOCK_STREAM) as s:
            # as the dashboard's server does: a port in TIME_WAIT is free, a listening one not
            s.setsockopt(_socket.SOL_SOCKET, _socket.SO_REUSEADDR, 1)
            s.bind((host, port))
    except _socket.gaierror:
        return f"unknown host {host!r}"
    except OSError as exc:
        if exc.errno == errno.EADDRINUSE:
            return f"port {port} on {host} is already in use"
        return f"cannot listen on {host}:{port}: {exc.strerror}"
    return None
