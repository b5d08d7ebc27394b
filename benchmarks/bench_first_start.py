"""First start after installing: seconds from ``eddyvigil watch`` to a monitor ready to receive.

Each round starts ``eddyvigil watch --bind ... --socket pull --no-dashboard`` with
``NUMBA_CACHE_DIR`` set to an empty temporary folder (a fresh install: nothing compiled yet),
then once more with the same folder (an ordinary later start). Measured in each start:

- ``ready``: until watch says its socket is open ("waiting for the first message"), i.e. a
  publisher can connect and nothing it sends is lost;
- ``first point``: until the summary line of a short stream sent at once (a point, 40
  messages of 2048 x 3 float32 rows, ``end``) is written: the statistics themselves;
- ``exit``: until watch ended by itself after ``end``.

The stream's samples are counted back from the run line (must equal those sent). With
``--dashboard`` the dashboard is served too (no browser) and ``ready`` is the later of the
socket line and the "dashboard at" line.

    python benchmarks/bench_first_start.py [--rounds 2] [--dashboard]
"""

from __future__ import annotations

import argparse
import json
import os
import socket
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import zmq

from eddyvigil.monitor import wire

ROWS, MESSAGES = 2048, 40


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def stream_messages(seed: int = 0) -> list[list]:
    rng = np.random.default_rng(seed)
    msgs = [wire.encode_point("probe-a", "s1", 0, {"id": "P1", "y": 0.0})]
    for i in range(MESSAGES):
        block = (5.0 + rng.standard_normal((ROWS, 3))).astype("<f4")
        msgs.append(wire.encode_samples("probe-a", "s1", i + 1, block, ("u", "v", "w"),
                                        rate_hz=20_000.0, t0=i * ROWS / 20_000.0))
    msgs.append(wire.encode_end("probe-a", "s1", MESSAGES + 1))
    return msgs


def one_start(cache_dir: str, dashboard: bool, workdir: Path, timeout_s: float = 240.0) -> dict:
    port = free_port()
    endpoint = f"tcp://127.0.0.1:{port}"
    summary = workdir / f"summary-{port}.jsonl"
    env = dict(os.environ, NUMBA_CACHE_DIR=cache_dir, PYTHONUNBUFFERED="1")
    args = [sys.executable, "-m", "eddyvigil.monitor", "watch", "--bind", endpoint, "--socket",
            "pull", "--summary", str(summary)]
    args += ["--port", str(free_port())] if dashboard else ["--no-dashboard"]
    err_path = workdir / f"watch-{port}.err"
    t0 = time.monotonic()
    with open(err_path, "wb") as err:
        proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=err, env=env)
    times: dict[str, float] = {}
    ctx = zmq.Context()
    push = ctx.socket(zmq.PUSH)
    push.setsockopt(zmq.LINGER, 2000)
    push.setsockopt(zmq.IMMEDIATE, 1)  # queue only to a connected monitor
    sent = False
    try:
        while time.monotonic() - t0 < timeout_s:
            text = err_path.read_text(errors="replace")
            if "socket" not in times and "waiting for the first message" in text:
                times["socket"] = time.monotonic() - t0
            if "dashboard" not in times and "dashboard at" in text:
                times["dashboard"] = time.monotonic() - t0
            ready = "socket" in times and (not dashboard or "dashboard" in times)
            if ready and not sent:
                times["ready"] = max(times["socket"], times.get("dashboard", 0.0))
                push.connect(endpoint)
                for frames in stream_messages():
                    push.send_multipart(frames, copy=False)  # blocks until the monitor is there
                sent = True
            if sent and "first point" not in times and summary.exists() and \
                    '"kind": "point"' in summary.read_text():
                times["first point"] = time.monotonic() - t0
                if dashboard:
                    proc.terminate()
            if proc.poll() is not None:
                times["exit"] = time.monotonic() - t0
                break
            time.sleep(0.02)
        else:
            proc.kill()
            raise RuntimeError(f"watch did not finish in {timeout_s} s:\n{err_path.read_text()}")
    finally:
        push.close(linger=0)
        ctx.term()
        if proc.poll() is None:
            proc.kill()
            proc.wait(10)
    run = json.loads(summary.read_text().splitlines()[-1])
    times["samples ok"] = run["samples"] == ROWS * MESSAGES
    times["compiled notice"] = "compiling" in err_path.read_text()
    return times


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=2)
    ap.add_argument("--dashboard", action="store_true")
    a = ap.parse_args()
    print(f"load average at start: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    print(f"{'round':>5} {'cache':>6} {'ready s':>8} {'1st point s':>11} {'exit s':>7} "
          f"{'samples ok':>10}")
    with tempfile.TemporaryDirectory() as work:
        for r in range(a.rounds):
            cache = tempfile.mkdtemp(prefix="numba-cache-", dir=work)
            for label in ("empty", "warm"):
                t = one_start(cache, a.dashboard, Path(work))
                nan = float("nan")
                print(f"{r:5d} {label:>6} {t['ready']:8.2f} {t.get('first point', nan):11.2f}"
                      f" {t.get('exit', nan):7.2f} {str(t['samples ok']):>10}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
