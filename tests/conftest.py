"""Shared test helpers: free ports, child processes that are always cleaned up, a frame player.

The frame player is a tiny publisher run in its own process: the test writes the exact
multipart messages to send into a file (so it knows every ``seq`` it sent) and the player sends
them over a real ZeroMQ socket. Every loop here is bounded in count and in time, and every
socket is closed with LINGER 0.
"""

from __future__ import annotations

import os
import signal
import socket
import struct
import subprocess
import sys
import time
from pathlib import Path

import pytest

TESTS_DIR = Path(__file__).resolve().parent
REPO_DIR = TESTS_DIR.parent


def free_port() -> int:
    """A TCP port on 127.0.0.1 that was free a moment ago."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def tcp_endpoint() -> str:
    return f"tcp://127.0.0.1:{free_port()}"


def write_messages(path: Path, messages) -> None:
    """Store multipart messages (lists of bytes-like frames) for :func:`player_main`."""
    with open(path, "wb") as f:
        for frames in messages:
            f.write(struct.pack("<I", len(frames)))
            for fr in frames:
                b = bytes(memoryview(fr).cast("B")) if not isinstance(fr, bytes) else fr
                f.write(struct.pack("<Q", len(b)))
                f.write(b)


def read_messages(path: Path) -> list[list[bytes]]:
    out = []
    with open(path, "rb") as f:
        data = f.read()
    pos = 0
    while pos < len(data):
        (k,) = struct.unpack_from("<I", data, pos)
        pos += 4
        frames = []
        for _ in range(k):
            (n,) = struct.unpack_from("<Q", data, pos)
            pos += 8
            frames.append(data[pos : pos + n])
            pos += n
        out.append(frames)
    return out


def player_main(argv: list[str]) -> int:
    """Send the messages of a file over ZeroMQ (run as a child process by :func:`start_player`).

    argv: ``FILE ENDPOINT SOCKET MODE [key=value ...]`` with SOCKET ``pub|push|xpub``, MODE
    ``bind|connect``; keys: ``sndhwm``, ``start`` (first index), ``stop`` (index to stop before,
    exiting without further messages, like a crash), ``pause_every``/``pause_s``,
    ``pause_before_last`` (s), ``delay_s`` (before the first message), ``linger_ms`` (how long
    to let the last messages drain).
    ``xpub`` waits (at most 10 s) until a subscriber has subscribed before sending.
    """
    import zmq

    path, endpoint, kind, mode, *rest = argv
    opts = dict(kv.split("=", 1) for kv in rest)
    messages = read_messages(Path(path))
    ctx = zmq.Context()
    sock = ctx.socket({"pub": zmq.PUB, "push": zmq.PUSH, "xpub": zmq.XPUB}[kind])
    sock.setsockopt(zmq.LINGER, 0)
    sock.setsockopt(zmq.SNDHWM, int(opts.get("sndhwm", 1000)))
    if kind == "push":  # queue only to a connected peer, so that LINGER 0 loses nothing queued
        sock.setsockopt(zmq.IMMEDIATE, 1)
    (sock.bind if mode == "bind" else sock.connect)(endpoint)
    try:
        if kind == "xpub":
            if not sock.poll(10_000, zmq.POLLIN):
                print("player: no subscriber within 10 s", file=sys.stderr)
                return 3
            sock.recv()
        elif kind == "pub":
            time.sleep(float(opts.get("join_s", 0.5)))
        elif not sock.poll(30_000, zmq.POLLOUT):
            print("player: no peer within 30 s", file=sys.stderr)
            return 3
        time.sleep(float(opts.get("delay_s", 0.0)))
        start, stop = int(opts.get("start", 0)), int(opts.get("stop", len(messages)))
        pause_every = int(opts.get("pause_every", 0))
        pause_s = float(opts.get("pause_s", 0.0))
        before_last = float(opts.get("pause_before_last", 0.0))
        for i in range(start, min(stop, len(messages))):
            if pause_every and i > start and (i - start) % pause_every == 0:
                time.sleep(pause_s)
            if i == len(messages) - 1 and before_last:
                time.sleep(before_last)
            sock.send_multipart(messages[i], copy=False)
        time.sleep(float(opts.get("linger_ms", 500)) / 1000.0)
    finally:
        sock.close(linger=0)
        ctx.term()
    return 0


class Processes:
    """Child processes of one test, terminated and reaped at teardown (bounded waits)."""

    def __init__(self, tmp_path: Path):
        self.tmp_path = tmp_path
        self.procs: list[subprocess.Popen] = []

    def start(self, args: list[str], name: str = "proc", **kw) -> subprocess.Popen:
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join([str(REPO_DIR), str(TESTS_DIR)])
        env.setdefault("PYTHONUNBUFFERED", "1")
        out = open(self.tmp_path / f"{name}.out", "wb")  # noqa: SIM115
        err = open(self.tmp_path / f"{name}.err", "wb")  # noqa: SIM115
        p = subprocess.Popen(args, stdout=out, stderr=err, env=env, cwd=self.tmp_path, **kw)
        out.close()
        err.close()
        p.name = name
        self.procs.append(p)
        return p

    def eddyvigil(self, *args: str, name: str = "eddyvigil") -> subprocess.Popen:
        return self.start([sys.executable, "-m", "eddyvigil.monitor", *args], name=name)

    def watch_pull(self, endpoint: str, *args: str, name: str = "watch") -> subprocess.Popen:
        """``eddyvigil watch`` with a PULL socket bound at ``endpoint`` (back-pressure, no loss)."""
        return self.eddyvigil("watch", "--bind", endpoint, "--socket", "pull", *args, name=name)

    def player(
        self, messages_file: Path, endpoint: str, kind: str, mode: str, name="player", **opts
    ) -> subprocess.Popen:
        code = "import sys, conftest; sys.exit(conftest.player_main(sys.argv[1:]))"
        args = [sys.executable, "-c", code, str(messages_file), endpoint, kind, mode]
        args += [f"{k}={v}" for k, v in opts.items()]
        return self.start(args, name=name)

    def output(self, p: subprocess.Popen) -> tuple[str, str]:
        out = (self.tmp_path / f"{p.name}.out").read_text(errors="replace")
        err = (self.tmp_path / f"{p.name}.err").read_text(errors="replace")
        return out, err

    def wait(self, p: subprocess.Popen, timeout: float = 60.0) -> int:
        try:
            return p.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            p.kill()
            p.wait(timeout=10)
            report = "\n".join(
                f"--- {q.name} (exit {q.poll()}) stderr:\n{self.output(q)[1][-1500:]}"
                for q in self.procs
            )
            raise AssertionError(f"{p.name} did not finish in {timeout} s\n{report}") from None

    def interrupt(self, p: subprocess.Popen, sig=signal.SIGTERM, timeout: float = 30.0) -> int:
        p.send_signal(sig)
        return self.wait(p, timeout)

    def cleanup(self) -> None:
        for p in self.procs:
            if p.poll() is None:
                p.kill()
                try:
                    p.wait(timeout=10)
                except subprocess.TimeoutExpired:
                    pass


@pytest.fixture
def procs(tmp_path):
    """Start child processes with ``procs.start`` / ``procs.eddyvigil`` / ``procs.player``."""
    ps = Processes(tmp_path)
    yield ps
    ps.cleanup()


def wait_for(predicate, timeout: float = 30.0, interval: float = 0.05, what: str = "condition"):
    """Poll ``predicate()`` until true, at most ``timeout`` s (and a bounded number of times)."""
    deadline = time.monotonic() + timeout
    for _ in range(int(timeout / interval) + 1):
        value = predicate()
        if value:
            return value
        if time.monotonic() > deadline:
            break
        time.sleep(interval)
    raise AssertionError(f"timed out after {timeout} s waiting for {what}")


def subscribed_socket(control, topic: bytes = b""):
    """``(context, SUB socket)`` connected to a ControlPublisher whose subscription has arrived.

    PUB drops until the subscription reaches it, so hellos are sent (bounded) until one comes
    through, then drained. The caller closes the socket (LINGER 0) and terms the context."""
    import zmq

    ctx = zmq.Context()
    sub = ctx.socket(zmq.SUB)
    sub.setsockopt(zmq.LINGER, 0)
    sub.setsockopt(zmq.SUBSCRIBE, topic)
    sub.connect(control.endpoint)

    def joined():
        control.send(topic.decode() or "hello", {"id": "hello"}, 0.0, {})
        return sub.poll(100)

    wait_for(joined, timeout=10, what="the control subscription")
    while sub.poll(200):
        sub.recv_multipart()
    return ctx, sub


# --------------------------------------------------------------------------- wire messages


class StreamWriter:
    """Builds the messages of one publisher session, numbering ``seq`` as a publisher must.

    Every message built, good or deliberately broken, takes the next ``seq`` (DESIGN §2).
    """

    def __init__(self, stream: str = "probe-a", session: str = "s1", rate_hz: float = 1000.0):
        self.stream, self.session, self.rate_hz = stream, session, rate_hz
        self.seq = 0
        self.t0 = 0.0

    def _next(self) -> int:
        self.seq += 1
        return self.seq - 1

    def point(self, pid: str, **coords) -> list[bytes]:
        from eddyvigil.monitor import wire

        return wire.encode_point(self.stream, self.session, self._next(), {"id": pid, **coords})

    def samples(self, block, columns=("u", "v", "w")) -> list:
        from eddyvigil.monitor import wire

        frames = wire.encode_samples(
            self.stream,
            self.session,
            self._next(),
            block,
            columns,
            rate_hz=self.rate_hz,
            t0=self.t0,
        )
        self.t0 += len(block) / self.rate_hz
        return [bytes(memoryview(f).cast("B")) if not isinstance(f, bytes) else f for f in frames]

    def end(self) -> list[bytes]:
        from eddyvigil.monitor import wire

        return wire.encode_end(self.stream, self.session, self._next())

    def malformed(self, reason: str, block, limit_bytes: int | None = None) -> list[bytes]:
        """A message the wire must reject under ``reason`` (it takes a ``seq`` all the same)."""
        import json

        import numpy as np

        seq = self._next()
        header = {
            "v": 1,
            "kind": "samples",
            "stream": self.stream,
            "session": self.session,
            "seq": seq,
            "columns": ["u", "v", "w"],
            "dtype": "<f4",
            "n": len(block),
            "rate_hz": self.rate_hz,
            "t0": self.t0,
            "units": "m/s",
        }
        data = np.ascontiguousarray(block, dtype="<f4")
        topic = self.stream.encode()
        if reason == "bad_frames":
            return [topic, json.dumps(header).encode()]
        if reason == "bad_json":
            return [
                topic,
                b'{"v": 1, "kind": "samples", "seq": ' + str(seq).encode(),
                data.tobytes(),
            ]
        if reason == "missing_field":
            del header["dtype"]
        elif reason == "bad_version":
            header["v"] = 2
        elif reason == "bad_kind":
            header["kind"] = "sample"
        elif reason == "bad_field":
            header["n"] = str(len(block))
        elif reason == "stream_mismatch":
            header["stream"] = self.stream + "-other"
        elif reason == "bad_dtype":
            header["dtype"] = "<i4"
        elif reason == "bad_shape":
            header["n"] = len(block) + 1
        elif reason == "non_finite":
            data = data.copy()
            data[len(data) // 2, 1] = np.nan
        elif reason in ("time_backwards", "bad_weight"):
            col = "t" if reason == "time_backwards" else "weight"
            extra = (
                np.arange(len(block))[::-1] / self.rate_hz if col == "t" else -np.ones(len(block))
            )
            data = np.ascontiguousarray(np.column_stack([data, extra]), dtype="<f4")
            header["columns"] = ["u", "v", "w", col]
        elif reason == "too_large":
            n = (limit_bytes // 12) + 1000
            data = np.zeros((n, 3), dtype="<f4")
            header["n"] = n
        else:
            raise ValueError(reason)
        return [topic, json.dumps(header).encode(), data.tobytes()]


MALFORMED_REASONS = (
    "bad_frames",
    "bad_json",
    "missing_field",
    "bad_version",
    "bad_kind",
    "bad_field",
    "stream_mismatch",
    "bad_dtype",
    "bad_shape",
    "non_finite",
    "time_backwards",
    "bad_weight",
    "too_large",
)
