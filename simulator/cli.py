"""Publish synthetic turbulence with known truth over ZeroMQ (built-in wake traverse by default).

The samples follow wire protocol v1; every point's prescribed statistics (and, for the wake,
its k-budget terms) can be written to a JSON truth file with ``--truth``.
"""

from __future__ import annotations

import argparse
import math
import sys

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail
from eddyvigil.monitor.transport import parse_speed as _parse_speed

__all__ = ["add_arguments", "run", "main", "parse_speed", "EPILOG"]

EPILOG = epilog("simulate") + """
speed: 1 = real time (the sample clock is honoured against a monotonic clock), N = N times
real time, max = as fast as the socket takes the messages.

PUB slow joiners: a PUB socket waits up to --wait-peer seconds for a peer to connect, then
--settle seconds more for its subscription to arrive, so the first point message is not lost
in the common case. PUSH needs neither (it blocks until a peer is there).

--follow-control ENDPOINT: SUB-connect to the monitor's control socket and move on as soon as
the current point is reported converged (--point-seconds is then the cap per point).

--truth FILE: JSON with, per point, the prescribed statistics (names as in the summary), the
k-budget terms where the scenario knows them, and where every fault was put (rows, seqs).
Nothing is written unless asked.

Built-in scenarios: wake (default; cylinder wake traverse, Harrier low-speed tunnel), drift
(non-stationary and faulty probe, Kestrel flume), lda (random sampling, Osprey water tunnel),
glitches (lost, malformed messages and a restart). --scenario also takes a path to a TOML file.
"""


def parse_speed(text: str) -> float:
    """``"1"``, ``"N"`` (> 0) or ``"max"`` -> a speed factor (``inf`` for max); the one
    ``--speed`` of :func:`eddyvigil.monitor.transport.parse_speed`."""
    speed = _parse_speed(text)
    return math.inf if speed is None else speed


def _positive_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not an integer: {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError("must be >= 1")
    return v


def _positive_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not (v > 0 and math.isfinite(v)):
        raise argparse.ArgumentTypeError("must be > 0")
    return v


def add_arguments(parser: argparse.ArgumentParser) -> None:
    where = parser.add_mutually_exclusive_group(required=True)
    where.add_argument(
        "--bind", metavar="ENDPOINT", help="bind the socket here (e.g. tcp://127.0.0.1:5556)"
    )
    where.add_argument(
        "--connect", metavar="ENDPOINT", help="connect the socket to a bound monitor"
    )
    parser.add_argument(
        "--socket", choices=("pub", "push"), default="pub", help="socket type (default pub)"
    )
    parser.add_argument(
        "--scenario",
        default="wake",
        metavar="NAME|PATH",
        help="built-in scenario name or TOML file (default wake)",
    )
    parser.add_argument(
        "--rate",
        type=_positive_float,
        metavar="HZ",
        help="rows per second (the mean data rate for random sampling)",
    )
    parser.add_argument(
        "--speed",
        type=parse_speed,
        default=1.0,
        metavar="1|N|max",
        help="pacing relative to real time (default 1)",
    )
    parser.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    parser.add_argument(
        "--follow-control",
        metavar="ENDPOINT",
        help="monitor control socket: next point when the current one converged",
    )
    parser.add_argument(
        "--block",
        type=_positive_int,
        metavar="N",
        help="rows per samples message (default: 50 ms of data)",
    )
    parser.add_argument(
        "--point-seconds",
        type=_positive_float,
        metavar="S",
        help="time per point, the cap with --follow-control (default: the scenario's)",
    )
    parser.add_argument(
        "--plan", metavar="PLAN.toml",
        help="record length per point from `eddyvigil plan` (already measured + planned "
        "seconds; points the plan does not name keep --point-seconds)",
    )
    parser.add_argument(
        "--truth", metavar="FILE", help="write the truth of every point to FILE (JSON)"
    )
    parser.add_argument(
        "--settle",
        type=float,
        default=0.3,
        metavar="S",
        help="PUB only: wait after a peer connected (default 0.3 s)",
    )
    parser.add_argument(
        "--wait-peer",
        type=float,
        default=5.0,
        metavar="S",
        help="PUB only: wait at most S for a peer to connect (default 5 s)",
    )
    parser.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    curve = parser.add_argument_group("CURVE (the monitor is the CURVE server)")
    curve.add_argument(
        "--curve-secret",
        metavar="FILE",
        help="this publisher's key pair, e.g. DIR/publisher.key_secret from `eddyvigil keys DIR`",
    )
    curve.add_argument(
        "--curve-server-key",
        metavar="FILE",
        help="the monitor's public key, e.g. DIR/monitor.key",
    )


def run(args: argparse.Namespace) -> int:
    from eddyvigil.monitor.transport import AddressInUseError, EndpointError, check_endpoint
    from eddyvigil.simulator.publisher import Publisher, PublisherOptions
    from eddyvigil.simulator.scenario import ScenarioError, load_scenario

    def _fail(code, message):
        return fail("simulate", code, message)

    from eddyvigil.simulator.fields import FIELD_SCENARIOS

    if args.scenario in FIELD_SCENARIOS:  # a rake or PIV field (simulator/fields.py)
        from eddyvigil.simulator.fields import run_field

        return run_field(args)

    try:
        scenario = load_scenario(args.scenario).with_rate(args.rate)
    except ScenarioError as e:
        return _fail(ExitCode.INPUT_FILE, str(e))
    plan_seconds = None
    if getattr(args, "plan", None):
        from eddyvigil.monitor.plan_cmd import read_plan_seconds

        try:
            plan_seconds = read_plan_seconds(args.plan)
        except (OSError, ValueError) as e:
            return _fail(ExitCode.INPUT_FILE, f"--plan {args.plan}: {e}")
    endpoint = args.bind or args.connect
    try:
        check_endpoint(endpoint, bind=args.bind is not None)
        if args.follow_control:
            check_endpoint(args.follow_control)
    except EndpointError as e:
        return _fail(ExitCode.ENDPOINT, str(e))
    if args.truth:
        from eddyvigil.monitor.outputs import OutputRefused, check_summary_file

        try:  # the same checks as a summary file, but an existing truth file is replaced
            check_summary_file(args.truth, "overwrite")
        except OutputRefused as e:
            return _fail(e.code, str(e).replace("--summary", "--truth"))
    curve = None
    if (args.curve_secret is None) != (args.curve_server_key is None):
        return _fail(ExitCode.USAGE, "--curve-secret and --curve-server-key go together")
    if args.curve_secret is not None:
        from eddyvigil.monitor.keys import KeyFileError, client_options, load_public, load_secret

        try:
            curve = client_options(*load_secret(args.curve_secret),
                                   load_public(args.curve_server_key))
        except KeyFileError as e:
            return _fail(ExitCode.INPUT_FILE, str(e))
    opts = PublisherOptions(
        endpoint=endpoint,
        bind=args.bind is not None,
        socket_type=args.socket,
        speed=args.speed,
        seed=args.seed,
        block=args.block,
        point_seconds=args.point_seconds,
        plan_seconds=plan_seconds,
        follow_control=args.follow_control,
        truth_path=args.truth,
        settle_s=max(0.0, args.settle),
        wait_peer_s=max(0.0, args.wait_peer),
        quiet=args.quiet,
        curve=curve,
    )
    try:
        code = Publisher(scenario, opts).run()
    except KeyboardInterrupt:  # Ctrl-C before the publisher's own handler was installed
        return ExitCode.STOPPED
    except AddressInUseError as e:
        return _fail(ExitCode.ADDRESS_IN_USE, str(e))
    except EndpointError as e:
        return _fail(ExitCode.ENDPOINT, str(e))
    except OSError as e:
        return _fail(ExitCode.CANNOT_WRITE, f"cannot write --truth {args.truth}: {e.strerror or e}")
    except ValueError as e:
        return _fail(ExitCode.USAGE, str(e))
    return ExitCode.STOPPED if code == ExitCode.STOPPED else code


def main(argv: list[str] | None = None) -> int:
    """``python -m eddyvigil.simulator.cli ...``: the same command without the ``eddyvigil`` wrapper."""
    parser = argparse.ArgumentParser(
        prog="eddyvigil simulate",
        description=__doc__.splitlines()[0],
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_arguments(parser)
    return run(parser.parse_args(argv))


if __name__ == "__main__":
    sys.exit(main())
