"""``eddyvigil demo`` end to end: real child processes, real sockets, clean shutdown on SIGINT."""

from __future__ import annotations

import os
import selectors
import signal
import socket
import subprocess
import sys
import time
import urllib.request

import psutil
import pytest

from eddyvigil.monitor.demo import free_port
from eddyvigil.monitor.watch import EXIT_ADDRESS_IN_USE

pytestmark = pytest.mark.integration  # real sockets or child processes


def _read_lines_until(proc, want: str, timeout_s: float) -> list[str]:
    """Lines of ``proc.stdout`` up to the first containing ``want`` (bounded in time)."""
    sel = selectors.DefaultSelector()
    sel.register(proc.stdout, selectors.EVENT_READ)
    lines: list[str] = []
    deadline = time.monotonic() + timeout_s
    try:
        for _ in range(100_000):
            left = deadline - time.monotonic()
            if left <= 0 or proc.poll() is not None:
                break
            if not sel.select(timeout=min(left, 0.5)):
                continue
            line = proc.stdout.readline()
            if not line:
                break
            lines.append(line.rstrip("\n"))
            if want in line:
                return lines
    finally:
        sel.close()
    raise AssertionError(f"no line with {want!r} within {timeout_s} s; got: {lines}")


@pytest.mark.slow
def test_demo_serves_converges_and_stops_cleanly():
    port = free_port()
    proc = subprocess.Popen(
        [sys.executable, "-m", "eddyvigil.monitor", "demo", "--no-browser", "--port", str(port),
         "--speed", "4", "--seed", "3"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        env=dict(os.environ, PYTHONUNBUFFERED="1"))
    try:
        lines = _read_lines_until(proc, "dashboard at", timeout_s=150)  # > demo STARTUP_S
        url = f"http://127.0.0.1:{port}/"
        assert url in lines[-1]
        with urllib.request.urlopen(url, timeout=30) as r:
            page = r.read().decode()
        assert r.status == 200 and "/static/js/bokeh" in page and "cdn.bokeh.org" not in page
        children = psutil.Process(proc.pid).children(recursive=True)
        assert len(children) >= 2, "the demo should run the simulator and the monitor"
        converged = _read_lines_until(proc, "converged after", timeout_s=120)
        assert "point P" in converged[-1]

        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=40)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate(timeout=10)
    assert proc.returncode == 0, err
    assert "stopped; summaries in" in out
    gone, alive = psutil.wait_procs(children, timeout=5)
    assert not alive, f"processes left behind: {[p.pid for p in alive]}"
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        s.bind(("127.0.0.1", port))  # the dashboard port is released


def test_demo_reports_a_dashboard_port_in_use():
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen(1)
        port = taken.getsockname()[1]
        proc = subprocess.run(
            [sys.executable, "-m", "eddyvigil.monitor", "demo", "--no-browser", "--port", str(port)],
            capture_output=True, text=True, timeout=120)
    assert proc.returncode == EXIT_ADDRESS_IN_USE, proc.stderr
    assert "already in use" in proc.stderr and "--port" in proc.stderr
