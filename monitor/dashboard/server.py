"""The dashboard's Bokeh server: one application at ``/``, loopback by default, no CDN.

:func:`serve` blocks until SIGINT/SIGTERM or until its ``stop_event`` is set;
:class:`DashboardServer` is the same server as an object (``start`` / ``run`` / ``stop``) for
callers that manage threads themselves (tests, the benchmark).

Acquisition never lives in page code: ``on_start()`` runs once per server from Bokeh's
``on_server_loaded`` hook and ``on_stop()`` from ``on_server_unloaded``; every browser tab only
*reads* ``get_snapshot()`` in one periodic callback (see :mod:`eddyvigil.monitor.dashboard.app`).

Bokeh's JavaScript is always served by this server itself (an offline facility has no CDN),
whatever ``BOKEH_RESOURCES`` says, and websocket origins are limited to the host:port forms
this server answers on.
"""

from __future__ import annotations

import asyncio
import errno
import functools
import logging
import signal
import socket
import threading
from collections.abc import Callable
from urllib.parse import urljoin

from bokeh.application import Application
from bokeh.application.handlers.function import FunctionHandler
from bokeh.application.handlers.lifecycle import LifecycleHandler
from bokeh.resources import Resources
from bokeh.server.server import BaseServer
from bokeh.server.tornado import BokehTornado
from bokeh.server.views.static_handler import StaticHandler
from bokeh.server.views.ws import WSHandler
from tornado.httpserver import HTTPServer
from tornado.ioloop import IOLoop

from eddyvigil.monitor.dashboard.app import build_document
from eddyvigil.monitor.state import RunSnapshot

log = logging.getLogger(__name__)

__all__ = ["serve", "DashboardServer", "PortInUseError", "websocket_origins"]

#: How often ``serve`` looks at its ``stop_event`` (ms).
_STOP_POLL_MS = 200
#: A closed tab's session (and its periodic callback) is dropped this soon (ms); Bokeh's
#: defaults keep it computing views for 15-32 s after the tab went away.
UNUSED_SESSION_LIFETIME_MS = 2000
CHECK_UNUSED_SESSIONS_MS = 1000


class _ClosedTabNoise(logging.Filter):
    """Drop Bokeh's "Failed sending message as connection was closed".

    Between a tab closing and tornado reporting the close, every update the session sends
    fails and Bokeh logs one warning each (8-51 lines per closed tab seen in use); Bokeh's own
    comment there says the close is handled anyway. Nothing else is filtered.
    """

    def filter(self, record: logging.LogRecord) -> bool:
        return "connection was closed" not in record.getMessage()


def _quiet_closed_tabs() -> None:
    logger = logging.getLogger("bokeh.server.views.ws")
    if not any(isinstance(f, _ClosedTabNoise) for f in logger.filters):
        logger.addFilter(_ClosedTabNoise())


class PortInUseError(OSError):
    """The dashboard's port is already taken (the CLI maps this to an exit code)."""


def websocket_origins(host: str, port: int) -> list[str]:
    """The ``host:port`` forms a page served by us may open its websocket from.

    A loopback server answers as ``127.0.0.1``, ``localhost`` (and ``[::1]`` when bound there);
    a server bound to a named interface answers on that name only. A wildcard bind
    (``0.0.0.0``) is a deliberate choice to serve the network; its origins are still listed
    explicitly, never ``*``.

    >>> websocket_origins("127.0.0.1", 5006)
    ['127.0.0.1:5006', 'localhost:5006']
    >>> websocket_origins("lab-pc.example", 8000)
    ['lab-pc.example:8000']
    """
    loopback = {"127.0.0.1", "localhost", "::1", ""}
    if host in loopback:
        names = ["127.0.0.1", "localhost"] + (["[::1]"] if host == "::1" else [])
    elif host in ("0.0.0.0", "::"):
        names = ["127.0.0.1", "localhost", socket.gethostname(), socket.getfqdn()]
    else:
        names = [host]
    out: list[str] = []
    for name in names:
        entry = f"{name}:{port}"
        if entry not in out:
            out.append(entry)
    return out


def _listen(host: str, port: int) -> socket.socket:
    """A listening, non-blocking TCP socket (closed again if anything fails)."""
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.create_server((host or "127.0.0.1", port), family=family, backlog=128)
    sock.setblocking(False)
    return sock


class _ClosedTabWSHandler(WSHandler):
    """Bokeh's websocket handler, quiet about a tab whose session was already released.

    Bokeh releases a tab's session (``client_lost`` detaches it from the connection) in two
    places: when tornado reports the close (``on_close``) and when its keep-alive ping finds the
    socket closed. Afterwards two things still reach the handler and meet
    ``ServerConnection.session`` with no session, where Bokeh logs an ``AssertionError``
    traceback: frames tornado had read before the close (a PATCH-DOC; seen 2 times in a
    45-minute soak with three tabs coming and going), and tornado's own ``on_close`` after the
    ping released the session (seen 5 times in the next 60-minute soak). Neither has a
    document to change or anybody to tell, so both end here with a debug line.
    """

    def _released(self) -> bool:
        connection = self.connection
        return connection is not None and getattr(connection, "_session", True) is None

    async def on_message(self, fragment: str | bytes) -> None:
        if self._released():
            log.debug("dropped a websocket frame from a tab whose session was released")
            return None
        return await super().on_message(fragment)

    def on_close(self) -> None:
        if self._released():
            log.debug("websocket closed after its session was released (keep-alive ping)")
            return None
        return super().on_close()


class _OwnResourcesTornado(BokehTornado):
    """BokehTornado that always serves BokehJS itself (never a CDN, whatever the environment),
    with websocket routes that drop frames from released tabs (:class:`_ClosedTabWSHandler`)."""

    def __init__(self, *args, **kwargs) -> None:
        super().__init__(*args, **kwargs)
        swapped = 0
        for rule in self.wildcard_router.rules:
            if rule.target is WSHandler:
                rule.target = _ClosedTabWSHandler
                swapped += 1
        if swapped == 0:  # a Bokeh release that routes differently: keep working, say so
            log.warning("dashboard: Bokeh's websocket route was not found; closed tabs may log "
                        "AssertionError tracebacks")

    def resources(self, absolute_url: str | bool | None = None) -> Resources:
        if absolute_url is True:
            absolute_url = self._absolute_url
        if absolute_url is None or absolute_url is False:
            absolute_url = "/"
        root_url = urljoin(absolute_url, self._prefix)
        return Resources(mode="server", root_url=root_url,
                         path_versioner=StaticHandler.append_version)


class _Hooks(LifecycleHandler):
    """Runs the caller's start/stop callbacks once per server; keeps the first failure."""

    def __init__(self, on_start: Callable[[], None] | None, on_stop: Callable[[], None] | None,
                 failed: Callable[[BaseException], None]):
        super().__init__()
        self._start = on_start
        self._stop = on_stop
        self._report_failure = failed
        self._on_server_loaded = self._loaded
        self._on_server_unloaded = self._unloaded

    def _loaded(self, _context) -> None:
        if self._start is None:
            return
        try:
            self._start()
        except BaseException as exc:  # noqa: B036 - re-raised by serve() after the loop stops
            self._report_failure(exc)

    def _unloaded(self, _context) -> None:
        if self._stop is None:
            return
        try:
            self._stop()
        except BaseException as exc:  # noqa: B036
            self._report_failure(exc)


class DashboardServer:
    """The dashboard on one port, on the calling thread's own event loop.

    Parameters
    ----------
    get_snapshot
        Returns the latest :class:`eddyvigil.monitor.state.RunSnapshot`; called by every open page about
        four times a second, from the server's thread. It must be cheap and never block.
    host, port
        Where to listen. ``port=0`` picks a free port (read it back from :attr:`port`).
    on_start, on_stop
        Called once when the server has loaded / once when it unloads.
    title
        The browser tab's title.

    Raises
    ------
    PortInUseError
        At construction, when the port is taken.
    """

    def __init__(self, get_snapshot: Callable[[], RunSnapshot], *, host: str = "127.0.0.1",
                 port: int = 5006, on_start: Callable[[], None] | None = None,
                 on_stop: Callable[[], None] | None = None, title: str = "eddyvigil"):
        self.host = host
        self.error: BaseException | None = None
        try:
            sockets = [_listen(host, port)]
        except OSError as exc:
            if exc.errno == errno.EADDRINUSE:
                raise PortInUseError(errno.EADDRINUSE,
                                     f"dashboard port {port} on {host} is already in use; "
                                     f"choose another with --port") from exc
            raise
        self.port = int(sockets[0].getsockname()[1])
        # Each server owns a fresh event loop, current in the thread that built it (the HTTP
        # server registers its sockets on it); build, run and close it on one thread.
        self._loop = asyncio.new_event_loop()
        asyncio.set_event_loop(self._loop)
        try:
            page = functools.partial(build_document, get_snapshot=get_snapshot, title=title)
            application = Application(FunctionHandler(page),
                                      _Hooks(on_start, on_stop, self._record_failure))
            url_host = f"[{host}]" if ":" in host else host
            tornado_app = _OwnResourcesTornado(
                {"/": application},
                extra_websocket_origins=websocket_origins(host, self.port),
                absolute_url=f"http://{url_host}:{self.port}",
                # The dashboard only reads: no large messages from the browser are expected.
                websocket_max_message_size_bytes=4 * 1024 * 1024,
                unused_session_lifetime_milliseconds=UNUSED_SESSION_LIFETIME_MS,
                check_unused_sessions_milliseconds=CHECK_UNUSED_SESSIONS_MS,
            )
            _quiet_closed_tabs()
            http_server = HTTPServer(tornado_app, xheaders=False)
            http_server.add_sockets(sockets)
        except Exception:
            for s in sockets:
                s.close()
            asyncio.set_event_loop(None)
            self._loop.close()
            raise
        self._sockets = sockets
        self._server = BaseServer(IOLoop.current(), tornado_app, http_server)
        self._started = False
        self._stopping = False

    @property
    def url(self) -> str:
        """Address of the dashboard page."""
        host = "127.0.0.1" if self.host in ("", "0.0.0.0", "::") else self.host
        if ":" in host:
            host = f"[{host}]"
        return f"http://{host}:{self.port}/"

    @property
    def session_count(self) -> int:
        """Browser sessions the server holds now (a closed tab's goes within a few seconds)."""
        return sum(len(list(ctx.sessions))
                   for ctx in self._server._tornado._applications.values())

    @property
    def io_loop(self) -> IOLoop:
        return self._server.io_loop

    def _record_failure(self, exc: BaseException) -> None:
        if self.error is None:
            self.error = exc
        self.stop()

    def start(self) -> None:
        """Install the server on the event loop (does not block); runs ``on_start`` soon after."""
        if not self._started:
            self._started = True
            self._server.start()

    def run(self) -> None:
        """Start if needed and block in the event loop until :meth:`stop`."""
        self.start()
        self.io_loop.start()

    def stop(self) -> None:
        """Stop serving and end :meth:`run`; safe to call from any thread, more than once."""
        if self._stopping:
            return
        self._stopping = True
        self.io_loop.add_callback(self._shutdown)

    def _shutdown(self) -> None:
        if self._started:
            self._server.stop(wait=False)  # runs on_stop through on_server_unloaded
        else:
            self._server._http.stop()
        for s in self._sockets:
            s.close()
        self.io_loop.stop()

    def close(self) -> None:
        """Release the loop after :meth:`run` returned (the port is already closed)."""
        self.io_loop.close(all_fds=True)
        asyncio.set_event_loop(None)


def serve(get_snapshot: Callable[[], RunSnapshot], *, host: str = "127.0.0.1", port: int = 5006,
          on_start: Callable[[], None] | None = None, on_stop: Callable[[], None] | None = None,
          title: str = "eddyvigil", stop_event: threading.Event | None = None,
          on_ready: Callable[[DashboardServer], None] | None = None) -> None:
    """Run the dashboard until SIGINT/SIGTERM (main thread) or until ``stop_event`` is set.

    Parameters
    ----------
    get_snapshot
        Returns the latest :class:`eddyvigil.monitor.state.RunSnapshot` (a cheap attribute read).
    host, port
        Where to listen; ``port=0`` picks a free one (see ``on_ready``).
    on_start, on_stop
        Called once per server: from Bokeh's ``on_server_loaded`` / ``on_server_unloaded``.
        An exception raised by either stops the server and is re-raised here.
    title
        The browser tab's title.
    stop_event
        Setting it from any thread ends ``serve`` (checked five times a second).
    on_ready
        Called once with the :class:`DashboardServer` (``.url``, ``.port``, ``.stop()``) before
        the loop starts, e.g. to print the URL.

    Raises
    ------
    PortInUseError
        When the port is taken (nothing was started: ``on_start`` has not run).
    """
    server = DashboardServer(get_snapshot, host=host, port=port, on_start=on_start,
                             on_stop=on_stop, title=title)
    loop = server._loop
    in_main = threading.current_thread() is threading.main_thread()
    signals = (signal.SIGINT, signal.SIGTERM)
    if in_main:
        for sig in signals:
            loop.add_signal_handler(sig, server.stop)
    if stop_event is not None:
        def poll() -> None:
            if stop_event.is_set():
                server.stop()

        from tornado.ioloop import PeriodicCallback

        PeriodicCallback(poll, _STOP_POLL_MS).start()
    try:
        server.start()
        if on_ready is not None:
            on_ready(server)
        server.run()
    finally:
        if in_main:
            for sig in signals:
                loop.remove_signal_handler(sig)
        server.close()
    if server.error is not None:
        raise server.error
