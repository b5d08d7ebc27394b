"""Simulator figures: generation rate in process, publishing rate at --speed max over loopback,
and pacing error at real time (--speed 1) over a given duration.

Usage: python benchmarks/bench_simulator.py [--duration 30] [--skip-pacing]

Prints figures only; nothing is asserted (timings depend on the machine and its load).
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import zmq

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from eddyvigil.monitor import wire  # noqa: E402
from eddyvigil.simulator.signals import OUGenerator, VonKarmanGenerator  # noqa: E402

R = np.array([[1.0, -0.3, 0.0], [-0.3, 0.5, 0.05], [0.0, 0.05, 0.4]])


def bench_generators(n: int = 10_000_000, block: int = 1_000_000) -> None:
    for name, g in [
        ("OUGenerator (3 comp.)", OUGenerator([10.0, 0, 0], R, 0.005, 4000.0, seed=1)),
        ("OUGenerator skewed", OUGenerator([10.0, 0, 0], R, 0.005, 4000.0, seed=1, skew=0.1)),
        ("VonKarmanGenerator", VonKarmanGenerator([10.0, 0, 0], R, 0.025, 4000.0, seed=1)),
    ]:
        g.next_block(1000)  # compile / warm up
        best = 0.0
        for _ in range(3):
            t = time.perf_counter()
            left = n
            while left > 0:
                g.next_block(min(block, left))
                left -= block
            best = max(best, n / (time.perf_counter() - t))
        print(f"{name:28s} {best / 1e6:8.1f} M samples/s (best of 3, {n:,} samples)")


def _publisher(port: int, *args: str) -> subprocess.Popen:
    return subprocess.Popen(
        [
            sys.executable,
            "-m",
            "eddyvigil.simulator.cli",
            "--quiet",
            "--connect",
            f"tcp://127.0.0.1:{port}",
            *args,
        ],
        cwd=ROOT,
    )


def _drain(sock, max_seconds: float):
    """(arrival monotonic time, stream time at the end of the message, rows) per samples message."""
    rec = []
    deadline = time.monotonic() + max_seconds
    while time.monotonic() < deadline:
        if not sock.poll(5000 if rec else 30_000):  # the first wait covers the child's start
            break
        msg = wire.decode(sock.recv_multipart(copy=False))
        now = time.monotonic()
        if isinstance(msg, wire.SamplesMessage):
            rec.append((now, msg.t0 + msg.n / msg.rate_hz, msg.n))
        elif isinstance(msg, wire.EndMessage):
            break
    return np.array(rec)


def bench_max_speed(seconds_of_data: float = 60.0, socket_type: str = "push") -> None:
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PULL if socket_type == "push" else zmq.SUB)
    sock.setsockopt(zmq.LINGER, 0)
    if socket_type == "pub":
        sock.setsockopt(zmq.SUBSCRIBE, b"")
    port = sock.bind_to_random_port("tcp://127.0.0.1")
    per_point = seconds_of_data / 9
    proc = _publisher(
        port,
        "--socket",
        socket_type,
        "--speed",
        "max",
        "--point-seconds",
        f"{per_point}",
        "--block",
        "4000",
    )
    try:
        rec = _drain(sock, 300.0)
    finally:
        sock.close(linger=0)
        proc.wait(60)
        ctx.term()
    if len(rec) < 2:
        print(f"--speed max, {socket_type.upper()}: fewer than 2 messages received")
        return
    rows = rec[:, 2].sum()
    span = rec[-1, 0] - rec[0, 0]
    expected = seconds_of_data * 4000
    print(
        f"--speed max, {socket_type.upper():4s} over loopback: {rows / span / 1e6:6.2f} M rows/s "
        f"(3 x float64 per row, 4000-row messages; {rows:,.0f} of {expected:,.0f} rows received)"
    )


def bench_pacing(duration_s: float) -> None:
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PULL)
    sock.setsockopt(zmq.LINGER, 0)
    port = sock.bind_to_random_port("tcp://127.0.0.1")
    proc = _publisher(
        port, "--socket", "push", "--speed", "1", "--point-seconds", f"{duration_s / 9}"
    )
    try:
        rec = _drain(sock, duration_s + 60.0)
    finally:
        sock.close(linger=0)
        proc.wait(60)
        ctx.term()
    wall = rec[:, 0] - rec[0, 0]
    stream = rec[:, 1] - rec[0, 1]
    lag = wall - stream
    err = (wall[-1] - stream[-1]) / stream[-1]
    print(
        f"pacing at --speed 1 over {stream[-1]:.1f} s of data: clock error {100 * err:+.3f} % "
        f"({1e3 * (wall[-1] - stream[-1]):+.1f} ms at the end); arrival - schedule: "
        f"median {1e3 * np.median(lag):+.2f} ms, p99 {1e3 * np.percentile(lag, 99):+.2f} ms, "
        f"max |.| {1e3 * np.max(np.abs(lag)):.2f} ms over {len(rec)} messages"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument(
        "--duration", type=float, default=30.0, help="pacing run length, s (default 30)"
    )
    ap.add_argument("--skip-pacing", action="store_true")
    ap.add_argument(
        "--max-seconds-of-data",
        type=float,
        default=1800.0,
        help="data sent at --speed max, in seconds of sample clock (default 1800)",
    )
    a = ap.parse_args()
    bench_generators()
    bench_max_speed(a.max_seconds_of_data, "push")
    bench_max_speed(a.max_seconds_of_data, "pub")
    if not a.skip_pacing:
        bench_pacing(a.duration)


if __name__ == "__main__":
    main()
