"""Monitor a live stream: statistics per point, summaries, convergence signals, dashboard.

``eddyvigil watch`` connects (or binds) a SUB or PULL socket to a publisher of wire protocol v1,
feeds every message through :class:`eddyvigil.monitor.pipeline.Pipeline`, writes one summary line per
finished point (to ``--summary FILE``, to ``DIR/summary.jsonl`` with ``--record DIR``, or to
standard output when neither is given: JSON lines into a file or pipe, one short sentence per
point on a terminal), optionally records every frame and publishes
``converged`` signals on ``--control``. With the dashboard (default) it serves it on
``--host:--port`` until Ctrl-C; with ``--no-dashboard`` it ends by itself once every stream it
has seen has sent ``end``. A one-line status goes to standard error about once a second
(every 10 s when standard error is not a terminal; never with ``--quiet``) once data flows;
before that, one notice after ``--no-publisher-after`` seconds (15) if nothing arrived.
Exit codes: :mod:`eddyvigil.monitor.exitcodes`.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import sys
import threading
import time
from pathlib import Path

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail
from eddyvigil.monitor.subscriber import DEFAULT_RCVHWM
from eddyvigil.monitor.transport import port_number

__all__ = [
    "add_arguments",
    "run",
    "status_line",
    "StatusPrinter",
    "EPILOG",
    "EXIT_OK",
    "EXIT_ERROR",
    "EXIT_USAGE",
    "EXIT_ENDPOINT",
    "EXIT_TARGETS",
    "EXIT_RECORDING_EXISTS",
    "EXIT_ADDRESS_IN_USE",
    "EXIT_NO_RECORDING",
    "EXIT_CANNOT_WRITE",
    "NO_PUBLISHER_S",
    "SETTINGS_FILE",
]

# The one table lives in monitor/exitcodes.py; these names stay for existing importers.
EXIT_OK = ExitCode.OK
EXIT_ERROR = ExitCode.ERROR
EXIT_USAGE = ExitCode.USAGE
EXIT_ENDPOINT = ExitCode.ENDPOINT
EXIT_TARGETS = ExitCode.INPUT_FILE
EXIT_RECORDING_EXISTS = ExitCode.OUTPUT_EXISTS
EXIT_ADDRESS_IN_USE = ExitCode.ADDRESS_IN_USE
EXIT_NO_RECORDING = ExitCode.NO_RECORDING
EXIT_CANNOT_WRITE = ExitCode.CANNOT_WRITE

#: Seconds without any message before watch says, once, that nobody is publishing.
NO_PUBLISHER_S = 15.0

#: Written into a recording directory: what replay needs to reproduce the live summaries.
SETTINGS_FILE = "monitor-settings.json"


def _default_targets_text() -> str:
    from eddyvigil.stats.targets import Targets

    return Targets.defaults().describe()


EPILOG = (
    epilog("watch")
    + f"""
without --summary or --record the summary JSON lines go to standard output when it is a
file or a pipe; on a terminal one short line per point is shown instead.

default targets (without --targets FILE):
{_default_targets_text()}
"""
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    where = p.add_mutually_exclusive_group(required=True)
    where.add_argument(
        "--connect", metavar="ENDPOINT", help="connect to a publisher, e.g. tcp://127.0.0.1:5555"
    )
    where.add_argument("--bind", metavar="ENDPOINT", help="bind and let publishers connect")
    p.add_argument(
        "--socket",
        choices=("sub", "pull"),
        default="sub",
        help="SUB (default; drops when behind, counted as gaps) or PULL (back-pressure)",
    )
    p.add_argument(
        "--stream",
        metavar="NAME",
        action="append",
        default=[],
        help="only this stream (repeatable; SUB topic filter)",
    )
    p.add_argument("--record", metavar="DIR", help="record every received frame into DIR")
    p.add_argument(
        "--append", action="store_true", help="add to an existing recording and summary file"
    )
    p.add_argument("--summary", metavar="FILE", help="write the summary JSON lines to FILE")
    add_summary_mode(p)
    p.add_argument("--targets", metavar="FILE", help="targets file (TOML); defaults below")
    p.add_argument("--points", metavar="FILE",
                   help="the traverse's [[points]] (TOML, as `plan --points`), for the campaign "
                   "ETA (default: the plan the publisher announces, if it does)")
    p.add_argument("--control", metavar="ENDPOINT", help="bind a PUB here for 'converged' signals")
    p.add_argument(
        "--no-dashboard",
        action="store_true",
        help="no dashboard; exit once every stream seen has sent 'end'",
    )
    p.add_argument("--host", default="127.0.0.1", help="dashboard address (default 127.0.0.1)")
    p.add_argument("--port", type=port_number, default=5006, help="dashboard port (default 5006)")
    p.add_argument(
        "--no-publisher-after",
        type=float,
        default=NO_PUBLISHER_S,
        metavar="S",
        help="say once that nobody publishes after S s without a message "
        f"(default {NO_PUBLISHER_S:g})",
    )
    p.add_argument(
        "--max-message-mb",
        type=float,
        default=256.0,
        help="reject messages larger than this (MiB, default 256)",
    )
    p.add_argument(
        "--rcvhwm",
        type=int,
        default=DEFAULT_RCVHWM,
        help=f"receive queue depth in messages (default {DEFAULT_RCVHWM})",
    )
    add_sample_policies(p)
    p.add_argument("--quiet", action="store_true", help="no status line")
    curve = p.add_argument_group(
        "CURVE (encryption and publisher authentication; watch is the CURVE server)"
    )
    curve.add_argument(
        "--curve-secret",
        metavar="FILE",
        help="the monitor's key pair, e.g. DIR/monitor.key_secret from `eddyvigil keys DIR`",
    )
    curve.add_argument(
        "--curve-allow",
        metavar="KEYDIR",
        help="accept only publishers whose public key (*.key) is in KEYDIR (read at start)",
    )


def add_sample_policies(p: argparse.ArgumentParser) -> None:
    """``--quality`` and ``--weighting``: what is done to the samples (watch and replay)."""
    p.add_argument(  # signal-quality policy (README, Signal quality)
        "--quality",
        choices=("flag", "exclude"),
        default="flag",
        help="flag: count spikes/dropouts/clipping and warn (default); exclude: replace spikes "
        "and dropout samples by linear interpolation before the statistics",
    )
    p.add_argument(  # random sampling without a weight column (DESIGN §10, README)
        "--weighting",
        choices=("arrival", "none"),
        default="arrival",
        help="random sampling (t column) without a weight column: arrival = weight each sample "
        "by the time since the previous one (default), none = arithmetic (velocity-biased)",
    )


def add_summary_mode(p: argparse.ArgumentParser) -> None:
    """``--summary-mode`` (watch and replay)."""
    p.add_argument(
        "--summary-mode",
        choices=("new", "append", "overwrite"),
        default=None,
        help="if --summary FILE exists: new (default) refuses, append adds, overwrite replaces"
        " (--append implies append)",
    )


def _fail(code: int, message: str) -> int:
    return fail("watch", code, message)


def no_publisher_notice(
    endpoint: str, bind: bool, socket: str, peer_seen: bool, seconds: float
) -> str:
    """The one plain notice when nothing has arrived for ``seconds``."""
    if peer_seen:
        return (
            f"a peer is connected at {endpoint} but nothing arrived in {seconds:g} s. Check: "
            "is it sending yet? do the socket types pair (PUB with --socket sub, PUSH with "
            "--socket pull)? does --stream name a stream it publishes?"
        )
    side = (
        "watch binds here, so the publisher must connect to this address"
        if bind
        else "watch connects here, so the publisher must bind this address"
    )
    pair = "PUB" if socket == "sub" else "PUSH"
    return (
        f"nobody is publishing at {endpoint}: nothing arrived and no peer connected in "
        f"{seconds:g} s. Check: is the publisher started? {side}; it must use a {pair} "
        f"socket (--socket {socket}); are the host and port right, and is no firewall between "
        "the machines? (watch keeps listening)"
    )


def load_targets(path: str | None):
    """Targets from a file (or defaults); raises ``eddyvigil.stats.targets.TargetsError``."""
    from eddyvigil.stats.targets import Targets

    return Targets.defaults() if path is None else Targets.from_toml(path)


def _fmt_count(n: float) -> str:
    for unit, div in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if abs(n) >= div:
            return f"{n / div:.3g}{unit}"
    return f"{n:.0f}"


def status_line(snapshot) -> str:
    """One line per run: per stream its point, samples, received rate (``monitor.rate``),
    lost and rejected messages, and the point's verdict (``stats.verdict``: the same words as
    the dashboard's banner and the summary's ``"verdict"``), then the traverse's campaign
    ETA where the positions to come are known (``monitor.campaign.campaign_text``)."""
    from eddyvigil.monitor.campaign import campaign_text
    from eddyvigil.monitor.rate import format_rate
    from eddyvigil.stats.verdict import point_verdict

    parts = []
    for name, sv in snapshot.streams.items():
        if sv.ended and sv.stats is None:
            n = len(sv.finished)
            parts.append(f"{name}: finished, {n} point{'s' * (n != 1)} (the publisher sent end)")
            continue
        campaign = campaign_text(sv.campaign)
        pid = sv.point.get("id") if sv.point else None
        samples = sv.stats.samples if sv.stats is not None else 0
        label = f"{name} {pid}" if pid is not None else f"{name} -"
        text = (
            f"{label}: {_fmt_count(samples)} samples {format_rate(sv.received_rate_hz)} "
            f"lost {sv.lost_messages} rej {sum(sv.rejected.values())}"
        )
        from eddyvigil.monitor.pipeline import quality_note  # quality counts, if any

        text += quality_note(getattr(sv, "quality", None))
        if sv.point is not None and pid is None and samples:
            text += " [data before any point message: counted under point null]"
        if getattr(sv, "random_sampling", None):
            from eddyvigil.monitor.random_sampling import random_sampling_status

            text += " " + random_sampling_status(sv.random_sampling)
        if sv.stats is not None:
            text += " " + point_verdict(sv.stats).text()
        if campaign:
            text += f"; {campaign}"
        parts.append(text)
    return " | ".join(parts) or "waiting for data"


#: Transport events that, once every stream has sent ``end``, are the normal ending.
_AFTER_END = ("closed", "disconnect")


class StatusPrinter:
    """Rewrites one status line on a terminal, or prints one every ``plain_interval_s``
    when it changed (a finished run is not repeated).

    ``ended()``, when given, says whether every stream seen has sent ``end``; a peer closing
    its connection after that is the normal ending and is not printed as a transport alarm.
    """

    def __init__(self, stream=sys.stderr, quiet: bool = False, plain_interval_s: float = 10.0,
                 ended=None):
        self._stream = stream
        self._quiet = quiet
        self._tty = bool(getattr(stream, "isatty", lambda: False)())
        self._plain_interval = plain_interval_s
        self._last = -float("inf")
        self._last_line = None
        self._pending = None
        self._ended = ended if ended is not None else (lambda: False)

    def tick(self, snapshot) -> None:
        if self._quiet:
            return
        line = status_line(snapshot)
        self._pending = line
        if self._tty:
            self._stream.write("\r" + line[:200] + "\x1b[K")
            self._stream.flush()
        elif line != self._last_line and time.monotonic() - self._last >= self._plain_interval:
            self._last = time.monotonic()
            self._last_line = line
            print(line, file=self._stream, flush=True)

    def event(self, text: str) -> None:
        if self._quiet:
            return
        if any(word in text.lower() for word in _AFTER_END) and self._ended():
            return  # the run has ended: the status line already says so, calmly
        prefix = "\r\x1b[K" if self._tty else ""
        print(f"{prefix}eddyvigil: transport: {text}", file=self._stream, flush=True)

    def done(self) -> None:
        """The end of the run: a terminal gets its newline, a log the latest line once."""
        if self._quiet:
            return
        if self._tty:
            self._stream.write("\n")
            self._stream.flush()
        elif self._pending is not None and self._pending != self._last_line:
            self._last_line = self._pending
            print(self._pending, file=self._stream, flush=True)


def start_kernel_warmup(quiet: bool = False, notice_after_s: float = 5.0):
    """Start loading the statistics kernels in the background (see ``stats/warmup.py``).

    The socket opens meanwhile; messages are kept in order until the kernels are ready. On
    the first start after installing they compile for about 20 s; loading them later takes
    well under 2 s. A notice is shown only when ``ready`` takes longer than
    ``notice_after_s``, i.e. when they are really being compiled. Returns the
    :class:`eddyvigil.stats.warmup.KernelWarmup` (``ready``, ``done`` events).
    """
    from eddyvigil.stats.warmup import KernelWarmup

    warm = KernelWarmup()

    def notice():
        if not warm.ready.wait(notice_after_s):
            print(
                "eddyvigil: compiling the statistics kernels (once after installing: about 20 s"
                "); messages arriving meanwhile are kept in order and counted after it",
                file=sys.stderr,
                flush=True,
            )

    if not quiet:
        threading.Thread(target=notice, name="eddyvigil-warmup-notice", daemon=True).start()
    return warm.start()


def write_settings(directory: Path, targets, max_message_bytes: int) -> None:
    """What a replay needs to reproduce this run's summaries."""
    (directory / SETTINGS_FILE).write_text(
        json.dumps(
            {"v": 1, "targets": targets.to_dict(), "max_message_bytes": max_message_bytes}, indent=1
        )
        + "\n",
        encoding="utf-8",
    )


def install_stop_signals(stop) -> None:
    """SIGINT and SIGTERM call ``stop()`` (main thread only)."""

    def handler(signum, frame):
        stop()

    signal.signal(signal.SIGINT, handler)
    signal.signal(signal.SIGTERM, handler)


def run(args: argparse.Namespace) -> int:
    """``eddyvigil watch``; with CURVE the process ends here by ``os._exit`` after flushing
    (libzmq can abort while closing a CURVE socket that a refused peer keeps dialling: the
    socket is left to the exit, see Subscriber.close)."""
    left_open: list = []  # set when a CURVE socket was left to the exit
    code = _run(args, left_open)
    if left_open:
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(int(code))
    return code


def _run(args: argparse.Namespace, left_open: list) -> int:
    from eddyvigil.monitor.outputs import (
        OutputRefused,
        check_record_dir,
        check_summary_file,
        open_summary_file,
        summary_mode,
    )
    from eddyvigil.monitor.subscriber import AddressInUseError, Subscriber, SubscriberError
    from eddyvigil.monitor.transport import check_endpoint, tcp_port_taken
    from eddyvigil.stats.targets import TargetsError

    try:
        targets = load_targets(args.targets)
    except TargetsError as exc:
        return _fail(ExitCode.INPUT_FILE, str(exc))
    points = None
    if getattr(args, "points", None):
        from eddyvigil.monitor.campaign import read_points

        try:
            points = read_points(args.points)
        except OSError as exc:
            return _fail(ExitCode.INPUT_FILE, f"cannot read {args.points}: {exc.strerror}")
        except ValueError as exc:
            return _fail(ExitCode.INPUT_FILE, f"{args.points}: {exc}")
    if not args.max_message_mb > 0:
        return _fail(ExitCode.USAGE, "--max-message-mb must be positive")
    if not args.no_publisher_after > 0:
        return _fail(ExitCode.USAGE, "--no-publisher-after must be positive")
    max_bytes = int(args.max_message_mb * 2**20)
    endpoint = args.connect or args.bind
    try:
        check_endpoint(endpoint, bind=args.bind is not None)
        if args.control:
            check_endpoint(args.control, bind=True)
    except SubscriberError as exc:
        return _fail(ExitCode.ENDPOINT, str(exc))
    curve = None
    if (args.curve_secret is None) != (args.curve_allow is None):
        return _fail(ExitCode.USAGE, "--curve-secret and --curve-allow go together")
    if args.curve_secret is not None:
        from eddyvigil.monitor.keys import Gatekeeper, KeyFileError

        try:
            curve = Gatekeeper(args.curve_secret, args.curve_allow)
        except KeyFileError as exc:
            return _fail(ExitCode.INPUT_FILE, str(exc))
    mode = summary_mode(args.summary_mode, args.append)
    try:
        if args.summary:
            check_summary_file(args.summary, mode)
        if args.record:
            check_record_dir(args.record, args.append)
    except OutputRefused as exc:
        return _fail(exc.code, str(exc))
    if not args.no_dashboard:
        why = tcp_port_taken(args.host, args.port)
        if why is not None:
            code = ExitCode.ADDRESS_IN_USE if "in use" in why else ExitCode.ENDPOINT
            return _fail(code, f"dashboard: {why}; choose another with --port / --host")

    warm = start_kernel_warmup(quiet=args.quiet)
    # numba and scipy are loaded (once, by the warm-up thread) before the socket opens, so the
    # receiving loop starts right after it: what arrives is read in order of arrival, not left
    # in ZeroMQ's per-peer queues (PULL would then take them from each peer in turn)
    warm.imported.wait()
    closers = []
    try:
        try:
            sub = Subscriber(
                endpoint,
                bind=args.bind is not None,
                socket=args.socket,
                streams=args.stream,
                max_message_bytes=max_bytes,
                rcvhwm=args.rcvhwm,
                curve=curve,
            )
        except AddressInUseError as exc:
            return _fail(ExitCode.ADDRESS_IN_USE, str(exc))
        except SubscriberError as exc:
            return _fail(ExitCode.ENDPOINT, str(exc))
        # with CURVE the data socket is left to the process's exit (Subscriber.close; run())
        def close_sub():
            sub.close(leave_curve_open=curve is not None)
            if curve is not None:
                left_open.append(sub)

        closers.append(close_sub)
        control = None
        if args.control:
            from eddyvigil.monitor.control import ControlPublisher

            try:
                control = ControlPublisher(args.control)
            except AddressInUseError as exc:
                return _fail(ExitCode.ADDRESS_IN_USE, f"--control {exc}")
            except SubscriberError as exc:
                return _fail(ExitCode.ENDPOINT, f"--control {exc}")
            closers.append(control.close)
        recorder = None
        sinks = []
        try:
            if args.summary:
                summary_file = open_summary_file(args.summary, mode)
                closers.append(summary_file.close)
                sinks.append(summary_file)
            if args.record:
                from eddyvigil.monitor.recorder import Recorder, RecordingExistsError

                try:
                    recorder = Recorder(args.record, append=args.append)
                except RecordingExistsError as exc:
                    return _fail(ExitCode.OUTPUT_EXISTS, f"{exc}; add --append to add to it")
                except OSError as exc:
                    return _fail(ExitCode.CANNOT_WRITE, f"--record {args.record}: {exc.strerror}")
                closers.append(recorder.close)
                write_settings(Path(args.record), targets, max_bytes)
                record_summary = open_summary_file(
                    Path(args.record) / "summary.jsonl", "append" if args.append else "overwrite"
                )
                closers.append(record_summary.close)
                sinks.append(record_summary)
        except OutputRefused as exc:
            return _fail(exc.code, str(exc))
        if not sinks:
            sinks = [terminal_summary_sink("watch", args.quiet)]

        from eddyvigil.monitor.pipeline import Pipeline
        from eddyvigil.monitor.summary import SummaryWriter

        writer = SummaryWriter(sinks)
        pipeline = Pipeline(
            targets,
            summary=writer,
            on_converged=control,
            recorder=recorder,
            max_message_bytes=max_bytes,
            quality=args.quality,
            weighting=args.weighting,
            points=points,
        )
        status = StatusPrinter(quiet=args.quiet, ended=lambda: pipeline.all_ended)
        started = time.monotonic()
        silence = {"said": False}
        if not args.quiet:
            verb = "bound at" if args.bind else "connecting to"
            secured = (f" (CURVE: {len(curve.allowed)} publisher key(s) allowed)"
                       if curve is not None else "")
            print(
                f"eddyvigil watch: {args.socket.upper()} socket {verb} {endpoint}{secured}; "
                "waiting for the first message",
                file=sys.stderr,
                flush=True,
            )

        def on_frames(frames, received_at):
            pipeline.handle_frames(frames, received_at)
            if args.no_dashboard and pipeline.all_ended:
                sub.stop()

        pipeline.refused_peers = sub.refused_peers

        def on_event(text):
            pipeline.refused_peers = sub.refused_peers
            status.event(text)
            pipeline.transport_event(text)

        def on_tick():
            pipeline.publish()
            if sub.messages == 0:
                # before any message: no "waiting" status every 10 s, but one plain notice
                if not silence["said"] and time.monotonic() - started >= args.no_publisher_after:
                    silence["said"] = True
                    text = no_publisher_notice(
                        endpoint, args.bind is not None, args.socket, sub.peer_seen,
                        args.no_publisher_after,
                    )
                    pipeline.transport_event(text)
                    if not args.quiet:
                        print(f"eddyvigil watch: {text}", file=sys.stderr, flush=True)
                return
            status.tick(pipeline.snapshot)

        def acquire():
            sub.run(on_frames, on_event=on_event, on_tick=on_tick, ready=warm.ready)

        if args.no_dashboard:
            install_stop_signals(sub.stop)
            acquire()
        else:
            code = serve_dashboard_while(args, pipeline, acquire, sub.stop, "eddyvigil watch")
            if code:
                return code
        status.done()
        pipeline.refused_peers = sub.refused_peers
        pipeline.close()
        if recorder is not None:
            recorder.flush()
        return ExitCode.OK
    finally:
        for close in reversed(closers):
            close()


def terminal_summary_sink(command: str, quiet: bool):
    """Standard output as the summary sink: JSON lines into a file or pipe; on a terminal one
    short line per point (and a note that nothing is kept)."""
    if not sys.stdout.isatty():
        return sys.stdout
    from eddyvigil.monitor.outputs import TerminalSummary

    if not quiet:
        print(
            f"eddyvigil {command}: no --summary FILE"
            + (" or --record DIR" if command == "watch" else "")
            + ": the summary is not kept; one line per finished point follows here",
            file=sys.stderr,
            flush=True,
        )
    return TerminalSummary(sys.stdout)


def serve_dashboard_while(args, pipeline, work, stop, title: str) -> int:
    """Serve the dashboard on this (main) thread; ``work`` runs in a thread that the server
    starts once it is up (never in per-page code); ``stop()`` when the server goes down.
    Returns an exit code (address in use is mapped here, for watch and replay alike; the
    message names the command: ``title`` is ``"eddyvigil COMMAND"``). A nonzero code means
    ``work`` never ran."""
    from eddyvigil.monitor.dashboard.server import PortInUseError, serve

    thread = threading.Thread(target=work, name="eddyvigil-acquisition", daemon=True)

    def on_ready(server):
        if not args.quiet:
            print(f"eddyvigil: dashboard at {server.url}", file=sys.stderr, flush=True)

    try:
        serve(
            lambda: pipeline.snapshot,
            host=args.host,
            port=args.port,
            on_start=thread.start,
            on_stop=stop,
            title=title,
            on_ready=on_ready,
        )
    except PortInUseError as exc:
        return fail(title.split()[-1], ExitCode.ADDRESS_IN_USE, str(exc))
    finally:
        stop()
        if thread.is_alive():
            thread.join(timeout=10.0)
    return 0
