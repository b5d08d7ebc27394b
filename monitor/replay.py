"""Feed a recording through the same path as live data (or re-publish it on a socket).

``eddyvigil replay DIR`` reads the frames ``watch --record DIR`` stored and passes each one to
:meth:`eddyvigil.monitor.pipeline.Pipeline.handle_frames`, exactly as the live monitor did, with the
targets and size limit the live monitor used (from ``DIR/monitor-settings.json``, unless
``--targets`` / ``--max-message-mb`` say otherwise). The summaries of a live run and of its
replay are therefore identical line for line. Points still open when the recording ends are
finished ``"complete": false``. With ``--publish ENDPOINT`` the frames are instead re-sent on
a bound PUB (or ``--publish-socket push``) socket, paced the same way, for another monitor.
"""

from __future__ import annotations

import argparse
import json
import sys
import threading
import time
from pathlib import Path

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail
from eddyvigil.monitor.transport import parse_speed, port_number
from eddyvigil.monitor.watch import (
    SETTINGS_FILE,
    StatusPrinter,
    add_sample_policies,
    add_summary_mode,
    install_stop_signals,
    serve_dashboard_while,
    terminal_summary_sink,
)

__all__ = ["add_arguments", "run", "parse_speed", "replay_into", "EPILOG"]

EPILOG = (
    epilog("replay")
    + """
--speed 1 replays in real time (as received), N N times faster, max as fast as possible.
Without --summary the summary JSON lines go to standard output when it is a file or a pipe;
on a terminal one short line per point is shown instead.
"""
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("dir", metavar="DIR", help="a directory written by watch --record")
    p.add_argument(
        "--speed",
        type=parse_speed,
        default=None,
        metavar="1|N|max",
        help="pacing: 1 real time, N times faster, max (default) unpaced",
    )
    p.add_argument(
        "--summary",
        metavar="FILE",
        help="write the summary JSON lines to FILE (default: standard output)",
    )
    add_summary_mode(p)
    p.add_argument(
        "--targets",
        metavar="FILE",
        help="targets file (default: the ones the recording monitor used)",
    )
    p.add_argument(
        "--max-message-mb",
        type=float,
        default=None,
        help="size limit (default: the one the recording monitor used)",
    )
    p.add_argument("--no-dashboard", action="store_true", help="no dashboard; exit at the end")
    p.add_argument("--host", default="127.0.0.1", help="dashboard address (default 127.0.0.1)")
    p.add_argument("--port", type=port_number, default=5006, help="dashboard port (default 5006)")
    p.add_argument(
        "--publish",
        metavar="ENDPOINT",
        help="re-send the frames on a socket bound here instead of analysing them",
    )
    p.add_argument(
        "--publish-socket",
        choices=("pub", "push"),
        default="pub",
        help="socket type for --publish (default pub)",
    )
    p.add_argument(
        "--publish-wait",
        type=float,
        default=1.0,
        metavar="S",
        help="seconds to wait for subscribers before re-sending (default 1)",
    )
    add_sample_policies(p)
    p.add_argument("--quiet", action="store_true", help="no status line")


def _fail(code: int, message: str) -> int:
    return fail("replay", code, message)


def _records(directory: Path, speed: float | None):
    from eddyvigil.monitor.recorder import paced, read_recording

    return paced(read_recording(directory), speed)


def replay_into(pipeline, directory, speed: float | None = None, stop=None) -> int:
    """Pass every recorded message to ``pipeline.handle_frames``; returns the count.

    ``stop``: an optional ``threading.Event`` ending the replay early.
    """
    count = 0
    for record in _records(Path(directory), speed):
        if stop is not None and stop.is_set():
            break
        pipeline.handle_frames(record.frames, record.received_at)
        count += 1
    return count


def load_settings(directory: Path) -> dict:
    path = directory / SETTINGS_FILE
    if not path.is_file():
        return {}
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}


def run(args: argparse.Namespace) -> int:
    from eddyvigil.monitor.outputs import (
        OutputRefused,
        check_summary_file,
        open_summary_file,
        summary_mode,
    )
    from eddyvigil.monitor.recorder import holds_recording
    from eddyvigil.monitor.transport import EndpointError, check_endpoint, tcp_port_taken
    from eddyvigil.stats.targets import Targets, TargetsError

    directory = Path(args.dir)
    if not directory.is_dir():
        return _fail(ExitCode.NO_RECORDING, f"{directory}: no such folder")
    if not holds_recording(directory):
        return _fail(
            ExitCode.NO_RECORDING, f"{directory} holds no recording (made by watch --record)"
        )
    settings = load_settings(directory)
    try:
        if args.targets:
            targets = Targets.from_toml(args.targets)
        elif "targets" in settings:
            targets = Targets.from_dict(settings["targets"], source=str(directory / SETTINGS_FILE))
        else:
            targets = Targets.defaults()
    except TargetsError as exc:
        return _fail(ExitCode.INPUT_FILE, str(exc))
    if args.max_message_mb is not None:
        if not args.max_message_mb > 0:
            return _fail(ExitCode.USAGE, "--max-message-mb must be positive")
        max_bytes = int(args.max_message_mb * 2**20)
    else:
        from eddyvigil.monitor.wire import DEFAULT_MAX_MESSAGE_BYTES

        max_bytes = int(settings.get("max_message_bytes", DEFAULT_MAX_MESSAGE_BYTES))

    if args.publish:
        try:
            check_endpoint(args.publish, bind=True)
        except EndpointError as exc:
            return _fail(ExitCode.ENDPOINT, str(exc))
        return _republish(args, directory)

    mode = summary_mode(args.summary_mode, False)
    try:
        if args.summary:
            check_summary_file(args.summary, mode)
    except OutputRefused as exc:
        return _fail(exc.code, str(exc))
    if not args.no_dashboard:
        why = tcp_port_taken(args.host, args.port)
        if why is not None:
            code = ExitCode.ADDRESS_IN_USE if "in use" in why else ExitCode.ENDPOINT
            return _fail(code, f"dashboard: {why}; choose another with --port / --host")

    from eddyvigil.monitor.pipeline import Pipeline

    try:
        summary = open_summary_file(args.summary, mode) if args.summary else None
    except OutputRefused as exc:
        return _fail(exc.code, str(exc))
    try:
        sink = summary if summary is not None else terminal_summary_sink("replay", args.quiet)
        pipeline = Pipeline(
            targets,
            summary=sink,
            max_message_bytes=max_bytes,
            quality=args.quality,
            weighting=args.weighting,
        )
        stop = threading.Event()
        status = StatusPrinter(quiet=args.quiet)
        if args.no_dashboard:
            install_stop_signals(stop.set)
            replay_into(pipeline, directory, args.speed, stop)
            pipeline.close()
            status.tick(pipeline.snapshot)
            status.done()
            return ExitCode.OK

        def work():
            replay_into(pipeline, directory, args.speed, stop)
            pipeline.close()

        code = serve_dashboard_while(args, pipeline, work, stop.set, "eddyvigil replay")
        if code:
            return code  # the replay never started: no summary lines at all
        pipeline.close()  # idempotent: a replay stopped early still writes its run line
        return ExitCode.OK
    finally:
        if summary is not None:
            summary.close()


def _republish(args, directory: Path) -> int:
    import zmq

    from eddyvigil.monitor.transport import AddressInUseError, EndpointError, open_publisher

    ctx = zmq.Context()
    kind = zmq.PUB if args.publish_socket == "pub" else zmq.PUSH
    stop = threading.Event()
    install_stop_signals(stop.set)
    try:
        # PUB: let subscribers connect and subscribe for --publish-wait seconds
        sock, _ = open_publisher(ctx, args.publish_socket, args.publish, bind=True,
                                 settle_s=max(0.0, args.publish_wait), stop=stop.is_set)
    except AddressInUseError as exc:
        ctx.term()
        return _fail(ExitCode.ADDRESS_IN_USE, str(exc))
    except EndpointError as exc:
        ctx.term()
        return _fail(ExitCode.ENDPOINT, str(exc))
    sent = 0
    try:
        for record in _records(directory, args.speed):
            if stop.is_set():
                break
            while not stop.is_set():
                try:
                    sock.send_multipart(
                        list(record.frames), zmq.NOBLOCK if kind == zmq.PUSH else 0, copy=False
                    )
                    break
                except zmq.Again:  # PUSH with no peer yet / peer behind: wait, stay stoppable
                    time.sleep(0.01)
            sent += 1
    finally:
        # unlike the monitor's own sockets, a re-publisher lingers briefly so that the last
        # queued messages still reach a connected peer
        sock.close(linger=0 if stop.is_set() else 2000)
        ctx.term()
    if not args.quiet:
        print(f"eddyvigil replay: re-sent {sent} messages", file=sys.stderr)
    return ExitCode.OK
