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

from eddyvigil.monitor.watch import (
    EXIT_ADDRESS_IN_USE,
    EXIT_ENDPOINT,
    EXIT_NO_RECORDING,
    EXIT_OK,
    EXIT_TARGETS,
    EXIT_USAGE,
    SETTINGS_FILE,
    StatusPrinter,
    install_stop_signals,
    serve_dashboard_while,
)

__all__ = ["add_arguments", "run", "parse_speed", "replay_into", "EPILOG"]

EPILOG = """\
exit codes:
  0  the recording was replayed to its end (or Ctrl-C / SIGTERM)
  1  unexpected error
  2  bad command line (e.g. --speed 0)
  3  bad --publish endpoint
  4  targets file unreadable or malformed
  6  --publish address or dashboard --port already in use
  7  DIR holds no recording

--speed 1 replays in real time (as received), N N times faster, max as fast as possible.
"""


def parse_speed(text: str) -> float | None:
    """``"max"`` -> None (no pacing); a positive number -> that factor.

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
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"speed must be a positive number or 'max', not {text!r}")
    return value


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
    p.add_argument("--port", type=int, default=5006, help="dashboard port (default 5006)")
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
    p.add_argument(  # signal-quality policy (README, Signal quality)
        "--quality",
        choices=("flag", "exclude"),
        default="flag",
        help="flag: count spikes/dropouts/clipping and warn (default); exclude: replace spikes "
        "and dropout samples by linear interpolation before the statistics",
    )
    p.add_argument("--quiet", action="store_true", help="no status line")


def _fail(code: int, message: str) -> int:
    print(f"eddyvigil replay: {message}", file=sys.stderr)
    return code


def _records(directory: Path, speed: float | None):
    from eddyvigil.monitor.recorder import paced, read_recording

    records = read_recording(directory)
    return records if speed is None else paced(records, speed)


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
    from eddyvigil.stats.targets import Targets, TargetsError

    directory = Path(args.dir)
    if not directory.is_dir():
        return _fail(EXIT_NO_RECORDING, f"{directory}: no such directory")
    settings = load_settings(directory)
    try:
        if args.targets:
            targets = Targets.from_toml(args.targets)
        elif "targets" in settings:
            targets = Targets.from_dict(settings["targets"], source=str(directory / SETTINGS_FILE))
        else:
            targets = Targets.defaults()
    except TargetsError as exc:
        return _fail(EXIT_TARGETS, str(exc))
    if args.max_message_mb is not None:
        if not args.max_message_mb > 0:
            return _fail(EXIT_USAGE, "--max-message-mb must be positive")
        max_bytes = int(args.max_message_mb * 2**20)
    else:
        from eddyvigil.monitor.wire import DEFAULT_MAX_MESSAGE_BYTES

        max_bytes = int(settings.get("max_message_bytes", DEFAULT_MAX_MESSAGE_BYTES))

    from eddyvigil.monitor.recorder import holds_recording

    if not holds_recording(directory):
        return _fail(EXIT_NO_RECORDING, f"{directory} holds no recording (made by watch --record)")

    if args.publish:
        return _republish(args, directory)

    from eddyvigil.monitor.pipeline import Pipeline

    summary = args.summary if args.summary else sys.stdout
    pipeline = Pipeline(
        targets, summary=summary, max_message_bytes=max_bytes, quality=args.quality
    )
    stop = threading.Event()
    status = StatusPrinter(quiet=args.quiet)
    if args.no_dashboard:
        install_stop_signals(stop.set)
        replay_into(pipeline, directory, args.speed, stop)
        pipeline.close()
        status.tick(pipeline.snapshot)
        status.done()
        return EXIT_OK

    def work():
        replay_into(pipeline, directory, args.speed, stop)
        pipeline.close()

    code = serve_dashboard_while(args, pipeline, work, stop.set, "eddyvigil replay")
    pipeline.close()  # idempotent: a replay stopped early still writes its run line
    return code


def _republish(args, directory: Path) -> int:
    import zmq

    from eddyvigil.monitor.subscriber import AddressInUseError, SubscriberError, open_socket

    ctx = zmq.Context()
    kind = zmq.PUB if args.publish_socket == "pub" else zmq.PUSH
    try:
        sock = open_socket(ctx, kind, args.publish, bind=True)
    except AddressInUseError as exc:
        ctx.term()
        return _fail(EXIT_ADDRESS_IN_USE, str(exc))
    except SubscriberError as exc:
        ctx.term()
        return _fail(EXIT_ENDPOINT, str(exc))
    stop = threading.Event()
    install_stop_signals(stop.set)
    sent = 0
    try:
        if kind == zmq.PUB:
            stop.wait(max(0.0, args.publish_wait))  # let subscribers connect and subscribe
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
    return EXIT_OK
