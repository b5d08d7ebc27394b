"""Simulator, monitor and dashboard on one machine in one go, on a built-in scenario.

``eddyvigil demo`` starts two child processes on free loopback endpoints: ``eddyvigil
simulate`` (a PUB that moves its invented traverse on when told) and ``eddyvigil watch`` (which
connects to it, serves the dashboard and publishes ``converged`` on a control socket that the
simulator follows). The monitor runs as a subprocess, exactly as a user would start it, so the
demo exercises the real command line. The demo prints the dashboard URL, opens a browser
unless ``--no-browser``, reports each converged point, and on Ctrl-C/SIGTERM stops both
children (the monitor first, so it writes its summaries), kills anything left of their process
trees and releases every port.
"""

from __future__ import annotations

import argparse
import os
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail
from eddyvigil.monitor.transport import parse_speed, tcp_port_taken

__all__ = ["add_arguments", "run", "free_port", "EPILOG"]

EPILOG = epilog("demo") + """
examples:
  eddyvigil demo                       # open the dashboard in the default browser
  eddyvigil demo --no-browser --port 5010 --speed 4
"""

#: Seconds allowed for each child to stop after being asked before it is killed.
STOP_GRACE_S = 10.0
#: Seconds the dashboard gets to come up.
STARTUP_S = 120.0  # the first start after installing compiles the kernels (~20 s)
#: Seconds of start-up after which the demo says why it takes long.
SLOW_START_S = 6.0


def free_port(host: str = "127.0.0.1") -> int:
    """A TCP port that was free a moment ago on ``host`` (the OS picks it)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((host, 0))
        return int(s.getsockname()[1])


def _speed(text: str) -> str:
    """``--speed``, checked as everywhere (transport.parse_speed), passed on as text."""
    parse_speed(text)
    return text.strip().lower()


def _port(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"port must be a whole number, not {text!r}") from None
    if not 0 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"port {value} is outside 1-65535 (0: a free one)")
    return value


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--no-browser", action="store_true", help="do not open a web browser")
    p.add_argument("--port", type=_port, default=5006,
                   help="dashboard port on 127.0.0.1 (default 5006; 0 picks a free one)")
    p.add_argument("--scenario", default=None, metavar="NAME",
                   help="simulator scenario (default: the simulator's built-in traverse)")
    p.add_argument("--speed", type=_speed, default="1", metavar="1|N|max",
                   help="simulated time per wall-clock second (default 1)")
    p.add_argument("--seed", type=int, default=0, help="random seed of the simulator (default 0)")
    p.add_argument("--summary", metavar="FILE",
                   help="summary JSON lines here (default: summary.jsonl in a temporary folder)")
    p.add_argument("--summary-mode", choices=("new", "append", "overwrite"), default="new",
                   help="if --summary FILE exists: new (default) refuses, append, overwrite")


def _wait_for_dashboard(host: str, port: int, children: list[subprocess.Popen],
                        stop: threading.Event) -> bool:
    """True once the dashboard port accepts connections (False if a child died or on stop).

    A TCP connect, not a page request: every page request makes a Bokeh session.
    """
    start = time.monotonic()
    deadline = start + STARTUP_S
    said = False
    for _ in range(int(STARTUP_S / 0.2) + 1):
        if not said and time.monotonic() - start > SLOW_START_S:
            said = True  # only a real compile takes this long (loading the cache: 1-2 s)
            print("eddyvigil demo: still starting: the first start after installing compiles "
                  "the statistics kernels (about 20 s)", flush=True)
        if stop.is_set() or any(c.poll() is not None for c in children):
            return False
        try:
            with socket.create_connection((host, port), timeout=1.0):
                return True
        except OSError:
            pass
        if time.monotonic() > deadline:
            return False
        time.sleep(0.2)
    return False


def _listen_control(endpoint: str, stop: threading.Event) -> None:
    """Print one line per ``converged`` signal of the monitor (DESIGN §6)."""
    import json

    import zmq

    from eddyvigil.monitor.transport import open_socket

    sub = open_socket(zmq.Context.instance(), "sub", endpoint, bind=False,
                      options={zmq.SUBSCRIBE: b""})
    try:
        while not stop.is_set():
            if not sub.poll(200):
                continue
            frames = sub.recv_multipart()
            try:
                msg = json.loads(frames[-1])
                pid = msg.get("point", {}).get("id", "?")
                said = "withdrawn" if msg.get("kind") == "withdrawn" else "converged"
                print(f"eddyvigil demo: {frames[0].decode(errors='replace')} point {pid} "
                      f"{said} after {float(msg.get('at_s', float('nan'))):.1f} s of data",
                      flush=True)
            except (ValueError, AttributeError, TypeError):
                print("eddyvigil demo: unreadable control message ignored", flush=True)
    finally:
        sub.close(linger=0)


def _stop_children(children: list[subprocess.Popen]) -> None:
    """Ask each child to stop, wait, then kill whatever is left of their process trees."""
    import psutil

    tree = []
    for c in children:
        try:
            p = psutil.Process(c.pid)
            tree += [p] + p.children(recursive=True)
        except psutil.NoSuchProcess:
            pass
    for c, sig in zip(children, (signal.SIGINT, signal.SIGTERM), strict=False):
        if c.poll() is None:
            try:
                c.send_signal(sig)
            except ProcessLookupError:
                pass
        try:
            c.wait(STOP_GRACE_S)
        except subprocess.TimeoutExpired:
            print(f"eddyvigil demo: {c.args[3]} did not stop in {STOP_GRACE_S:.0f} s; killed",
                  file=sys.stderr)
    _, alive = psutil.wait_procs(tree, timeout=1.0)
    for p in alive:
        try:
            p.kill()
        except psutil.NoSuchProcess:
            pass
    psutil.wait_procs(alive, timeout=5.0)
    for c in children:
        if c.poll() is None:
            c.kill()
            c.wait(5.0)


def run(args: argparse.Namespace) -> int:
    from eddyvigil.monitor.outputs import OutputRefused, check_summary_file
    from eddyvigil.simulator.scenario import ScenarioError, load_scenario

    host = "127.0.0.1"
    port = args.port if args.port else free_port(host)
    why = tcp_port_taken(host, port)
    if why is not None:
        return fail("demo", ExitCode.ADDRESS_IN_USE,
                    f"could not start: dashboard {why}; choose another with --port")
    if args.summary:
        try:
            check_summary_file(args.summary, args.summary_mode)
        except OutputRefused as exc:
            return fail("demo", exc.code, str(exc))
    if args.scenario:
        try:
            load_scenario(args.scenario)
        except ScenarioError as exc:
            return fail("demo", ExitCode.INPUT_FILE, str(exc))
    data = f"tcp://{host}:{free_port(host)}"
    control = f"tcp://{host}:{free_port(host)}"
    url = f"http://{host}:{port}/"
    workdir = tempfile.mkdtemp(prefix="eddyvigil-demo-")
    summary = args.summary or str(Path(workdir) / "summary.jsonl")

    exe = [sys.executable, "-m", "eddyvigil.monitor"]
    watch = exe + ["watch", "--connect", data, "--control", control, "--port", str(port),
                   "--host", host, "--summary", summary, "--summary-mode", args.summary_mode,
                   "--quiet"]
    simulate = exe + ["simulate", "--bind", data, "--socket", "pub", "--speed", args.speed,
                      "--seed", str(args.seed), "--follow-control", control,
                      "--wait-peer", "120", "--quiet"]
    if args.scenario:
        simulate += ["--scenario", args.scenario]

    stop = threading.Event()

    def on_signal(_sig, _frame):
        stop.set()

    previous = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
    children: list[subprocess.Popen] = []
    listener = threading.Thread(target=_listen_control, args=(control, stop), daemon=True)
    code = 0
    try:
        # Own sessions: a Ctrl-C at the terminal reaches the demo only, which then stops the
        # children in order (the monitor first, so it writes its summaries).
        env = dict(os.environ, BOKEH_RESOURCES="server")
        print("eddyvigil demo: starting the monitor and the simulated facility", flush=True)
        children.append(subprocess.Popen(watch, start_new_session=True, env=env))
        children.append(subprocess.Popen(simulate, start_new_session=True, env=env))
        listener.start()
        if not _wait_for_dashboard(host, port, children, stop):
            if not stop.is_set():
                bad = [c for c in children if c.poll() is not None]
                why = (f"{bad[0].args[3]} exited with code {bad[0].returncode}" if bad
                       else f"no dashboard at {url} within {STARTUP_S:.0f} s")
                print(f"eddyvigil demo: could not start: {why}", file=sys.stderr)
                code = bad[0].returncode or 1 if bad else 1
            return code
        print(f"eddyvigil demo: dashboard at {url}", flush=True)
        print(f"eddyvigil demo: data {data}, control {control}, summary {summary}", flush=True)
        print("eddyvigil demo: Ctrl-C to stop", flush=True)
        if not args.no_browser:
            try:
                import webbrowser

                webbrowser.open(url)
            except Exception as exc:  # no browser here is fine: the URL is printed
                print(f"eddyvigil demo: could not open a browser ({exc})", file=sys.stderr)
        announced = False
        while not stop.wait(0.2):
            if children[0].poll() is not None:
                print(f"eddyvigil demo: the monitor exited with code {children[0].returncode}",
                      file=sys.stderr)
                code = children[0].returncode or 1
                break
            if children[1].poll() is not None and not announced:
                announced = True
                print("eddyvigil demo: the traverse is finished; the dashboard stays up until "
                      "Ctrl-C", flush=True)
    finally:
        stop.set()
        _stop_children(children)
        if listener.is_alive():
            listener.join(5.0)
        for s, h in previous.items():
            signal.signal(s, h)
        print(f"eddyvigil demo: stopped; summaries in {summary}", flush=True)
    return code
