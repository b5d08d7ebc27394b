"""The dashboard server over real HTTP on loopback: hooks, origins, own BokehJS, port in use."""

from __future__ import annotations

import socket
import threading
import urllib.request

import pytest
from bokeh.document import Document

from eddyvigil.monitor.dashboard.app import build_document
from eddyvigil.monitor.dashboard.preview import PreviewRun
from eddyvigil.monitor.dashboard.server import PortInUseError, serve, websocket_origins

pytestmark = pytest.mark.integration  # real sockets or child processes


def _serve_in_thread(**kw):
    """Run ``serve`` in a thread; returns (thread, stop_event, server-info dict, errors)."""
    stop = threading.Event()
    info, errors = {}, []
    ready = threading.Event()

    def on_ready(server):
        info["server"] = server
        ready.set()

    def target():
        try:
            run = PreviewRun()
            serve(lambda: run.snapshot(3.0), port=0, stop_event=stop, on_ready=on_ready, **kw)
        except BaseException as exc:  # noqa: B036 - handed to the test thread
            errors.append(exc)
            ready.set()

    t = threading.Thread(target=target, daemon=True)
    t.start()
    assert ready.wait(20), "server did not come up within 20 s"
    return t, stop, info, errors


def test_serve_runs_hooks_once_serves_its_own_bokehjs_and_stops():
    calls = []
    t, stop, info, errors = _serve_in_thread(on_start=lambda: calls.append("start"),
                                             on_stop=lambda: calls.append("stop"))
    assert not errors
    server = info["server"]
    for _ in range(2):  # two tabs, one server: on_start still runs once
        with urllib.request.urlopen(server.url, timeout=30) as r:
            page = r.read().decode()
        assert r.status == 200
    assert '<script src="/static/js/bokeh.min.js' in page and "cdn" not in page
    with urllib.request.urlopen(server.url + "static/js/bokeh.min.js", timeout=30) as r:
        assert len(r.read()) > 100_000
    stop.set()
    t.join(20)
    assert not t.is_alive()
    assert calls == ["start", "stop"]
    with socket.socket() as s:  # the port is released
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        s.bind(("127.0.0.1", server.port))


def test_a_taken_port_raises_port_in_use_before_anything_starts():
    calls = []
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        with pytest.raises(PortInUseError, match="already in use"):
            serve(lambda: None, port=taken.getsockname()[1], on_start=lambda: calls.append(1))
    assert calls == []


def test_a_failing_on_start_stops_the_server_and_is_raised():
    def boom():
        raise RuntimeError("acquisition could not start")

    t, stop, info, errors = _serve_in_thread(on_start=boom)
    t.join(20)
    assert not t.is_alive()
    stop.set()
    assert len(errors) == 1 and "could not start" in str(errors[0])


def test_websocket_origins_are_only_the_forms_we_serve():
    assert websocket_origins("127.0.0.1", 5006) == ["127.0.0.1:5006", "localhost:5006"]
    assert websocket_origins("10.0.0.5", 80) == ["10.0.0.5:80"]
    assert all("*" not in o for o in websocket_origins("0.0.0.0", 5006))


def test_page_models_carry_the_names_tests_rely_on():
    doc = Document()
    run = PreviewRun(point_s=2.0, points=3)
    build_document(doc, get_snapshot=lambda: run.snapshot(5.0))
    for name in ("verdict", "health", "status", "status_source", "trace", "trace_source",
                 "running_mean", "running_stresses", "halfwidth", "halfwidth_source",
                 "profile_mean", "profile_stresses", "finished", "finished_source"):
        assert doc.get_model_by_name(name) is not None, name
    assert len(doc.session_callbacks) == 1  # ONE periodic callback per page
    assert len(doc.get_model_by_name("finished_source").data["id"]) == 2
    assert "KEEP ACQUIRING" in doc.get_model_by_name("verdict").text


def _patch_doc_fragments() -> list[str]:
    """The text frames of one PATCH-DOC message, as a browser tab sends them."""
    import json

    header = {"msgid": "7", "msgtype": "PATCH-DOC"}
    return [json.dumps(header), json.dumps({}), json.dumps({"events": []})]


def _handler_with_released_session(cls):
    """A websocket handler (no tornado request behind it) whose tab's session was released,
    as Bokeh leaves it after ``on_close``: the connection is kept, its session is None."""
    from bokeh.protocol import Protocol
    from bokeh.protocol.receiver import Receiver
    from bokeh.server.connection import ServerConnection
    from bokeh.server.protocol_handler import ProtocolHandler

    handler = cls.__new__(cls)
    connection = ServerConnection.__new__(ServerConnection)
    connection._session = None
    connection._protocol = Protocol()
    handler.connection = connection
    handler.receiver = Receiver(Protocol())
    handler.handler = ProtocolHandler()
    handler.close_code, handler.close_reason = 1001, None  # what tornado's close sets
    handler.closed_with = []
    handler.close = lambda code=None, reason=None: handler.closed_with.append((code, reason))
    return handler


def test_frames_from_a_released_tab_are_dropped_without_a_server_error(caplog):
    """Issue 16: closing a tab mid-update leaves no server error. Bokeh's own handler, given
    the frames tornado had buffered before the close, logs an AssertionError traceback (the
    case seen in the soak); the dashboard's handler drops them."""
    import asyncio
    import logging

    from bokeh.server.views.ws import WSHandler

    from eddyvigil.monitor.dashboard.server import _ClosedTabWSHandler

    bokeh_own = _handler_with_released_session(WSHandler)
    with caplog.at_level(logging.DEBUG):
        for fragment in _patch_doc_fragments():
            asyncio.run(bokeh_own.on_message(fragment))
    errors = [r for r in caplog.records if r.levelno >= logging.ERROR]
    assert errors and errors[0].exc_info and errors[0].exc_info[0] is AssertionError
    caplog.clear()

    ours = _handler_with_released_session(_ClosedTabWSHandler)
    with caplog.at_level(logging.DEBUG):
        for fragment in _patch_doc_fragments():
            asyncio.run(ours.on_message(fragment))
    assert [r for r in caplog.records if r.levelno >= logging.WARNING] == []
    assert ours.closed_with == []
    assert any("session was released" in r.getMessage() for r in caplog.records)


def test_a_close_after_the_keep_alive_released_the_session_is_no_server_error(caplog):
    """Bokeh's keep-alive ping that finds a socket closed releases the session
    (``client_lost``); tornado's ``on_close`` comes afterwards. Bokeh's own handler then logs
    an AssertionError (5 tracebacks in a 60-minute soak); the dashboard's handler does not."""
    import logging

    from bokeh.server.views.ws import WSHandler

    from eddyvigil.monitor.dashboard.server import _ClosedTabWSHandler

    bokeh_own = _handler_with_released_session(WSHandler)
    with pytest.raises(AssertionError):  # tornado logs this one with its traceback
        bokeh_own.on_close()
    ours = _handler_with_released_session(_ClosedTabWSHandler)
    with caplog.at_level(logging.DEBUG):
        ours.on_close()
    assert [r for r in caplog.records if r.levelno >= logging.WARNING] == []
    assert any("after its session was released" in r.getMessage() for r in caplog.records)


def test_the_server_routes_websockets_through_the_closed_tab_handler():
    from eddyvigil.monitor.dashboard.server import _ClosedTabWSHandler

    t, stop, info, errors = _serve_in_thread()
    try:
        assert not errors
        app = info["server"]._server._tornado
        targets = [rule.target for rule in app.wildcard_router.rules]
        assert _ClosedTabWSHandler in targets
    finally:
        stop.set()
        t.join(20)
