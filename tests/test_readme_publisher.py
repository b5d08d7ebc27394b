"""The README's copy-and-paste publisher really talks to `eddyvigil watch` (real processes)."""

import json
import queue
import re
import socket
import subprocess
import sys
import threading
from pathlib import Path

import pytest

pytestmark = pytest.mark.integration  # real sockets or child processes

ROOT = Path(__file__).resolve().parents[1]


def readme_publisher() -> str:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, flags=re.S)
    pubs = [b for b in blocks if "zmq.PUB" in b]
    assert len(pubs) == 1, "README should hold exactly one publisher example"
    return pubs[0]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_readme_publisher_is_about_twenty_lines():
    code = readme_publisher()
    lines = [ln for ln in code.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    assert len(lines) <= 25


def test_readme_publisher_feeds_watch(tmp_path):
    port = free_port()
    code = readme_publisher().replace("tcp://127.0.0.1:5556", f"tcp://127.0.0.1:{port}")
    assert f":{port}" in code
    summary = tmp_path / "summary.jsonl"
    watch = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "eddyvigil.monitor",
            "watch",
            "--connect",
            f"tcp://127.0.0.1:{port}",
            "--no-dashboard",
            "--summary",
            str(summary),
        ],
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )
    lines: queue.Queue = queue.Queue()
    reader = threading.Thread(target=lambda: [lines.put(ln) for ln in watch.stderr], daemon=True)
    reader.start()
    try:
        # the monitor must be subscribed before a PUB publisher starts (README says so too):
        # wait for its first status or transport line (bounded). On a fresh clone the kernels
        # compile first (~20 s) and a notice says so; no socket is open until they are done.
        while "preparing the statistics kernels" in lines.get(timeout=120):
            pass
        pub = subprocess.run(
            [sys.executable, "-c", code], cwd=tmp_path, timeout=60, capture_output=True, text=True
        )
        assert pub.returncode == 0, pub.stderr
        assert watch.wait(timeout=60) == 0
    finally:
        if watch.poll() is None:
            watch.kill()
            watch.wait()
        reader.join(timeout=10)  # ends at EOF once the process is gone
        watch.stderr.close()
    lines = [json.loads(ln) for ln in summary.read_text().splitlines()]
    point = next(ln for ln in lines if ln["kind"] == "point")
    run = next(ln for ln in lines if ln["kind"] == "run")
    assert point["point"]["id"] == "P01" and point["complete"] is True
    assert point["samples"] == 40 * 4096
    assert point["lost_messages"] == 0 and sum(point["rejected"].values()) == 0
    assert run["samples"] == 40 * 4096
    names = [s["name"] for s in point["statistics"]]
    assert names[:3] == ["U", "V", "W"] and "uvw" in names
