"""A recording process killed with SIGKILL mid-stream: what was flushed is read back intact.

A real child process receives on a real ZeroMQ PULL socket and records with
:class:`eddyvigil.monitor.recorder.Recorder`; after every write it reports on stdout how many records it
has handed to the operating system. The test kills it with SIGKILL while messages are still
arriving, then reads the recording: every record up to the last reported flush must come back
byte for byte, in order, and nothing that was never sent. A kill cannot be timed to land inside a
write, so the torn write it could leave (as a power loss would) is then made explicitly by cutting
the last file inside its last record: the reader must skip exactly that record and report it.
"""

from __future__ import annotations

import os
import selectors
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
import zmq

from eddyvigil.monitor import wire
from eddyvigil.monitor.recorder import read_recording, recording_files

pytestmark = pytest.mark.integration  # real sockets or child processes

CHILD = r"""
import sys, time, zmq
from eddyvigil.monitor.recorder import Recorder
endpoint, directory = sys.argv[1], sys.argv[2]
ctx = zmq.Context()
sock = ctx.socket(zmq.PULL)
sock.setsockopt(zmq.LINGER, 0)
sock.connect(endpoint)
rec = Recorder(directory, flush_interval_s=0.02, chunk_bytes=64 * 1024)
print("ready", flush=True)
deadline = time.monotonic() + 60
while time.monotonic() < deadline:
    if not sock.poll(50):
        rec.flush()
        print("idle", rec.records, rec.records_flushed, flush=True)
        continue
    frames = sock.recv_multipart(copy=False)
    rec.write(frames, time.time())
    print("wrote", rec.records, rec.records_flushed, flush=True)
    time.sleep(0.002)  # a receiver slower than the sender, so the kill lands mid-stream
"""


def _message(i: int):
    rng = np.random.default_rng(i)
    data = rng.normal(size=(512, 3)).astype("<f4")
    return wire.encode_samples("probe-k", "sess", i, data, ["u", "v", "w"], rate_hz=1e4, t0=0.0)


def _bytes(frames):
    return [bytes(memoryview(f).cast("B")) for f in frames]


@pytest.mark.slow
def test_sigkill_mid_stream_keeps_every_flushed_record(tmp_path):
    directory = tmp_path / "rec"
    ctx = zmq.Context()
    push = ctx.socket(zmq.PUSH)
    push.setsockopt(zmq.LINGER, 0)
    push.setsockopt(zmq.SNDHWM, 10_000)
    push.setsockopt(zmq.SNDTIMEO, 10_000)  # a send never blocks the test for ever
    port = push.bind_to_random_port("tcp://127.0.0.1")
    child = subprocess.Popen(
        [sys.executable, "-c", CHILD, f"tcp://127.0.0.1:{port}", str(directory)],
        stdout=subprocess.PIPE,
    )
    sel = selectors.DefaultSelector()
    sel.register(child.stdout, selectors.EVENT_READ)
    last_flushed = 0
    written = 0
    sent = 0
    try:
        deadline = time.monotonic() + 60.0

        pending = b""
        ready = False

        def read_lines(timeout):
            # os.read on the pipe (no Python-side buffering that select cannot see)
            nonlocal last_flushed, written, pending, ready
            for _ in range(1000):
                if not sel.select(timeout):
                    return
                chunk = os.read(child.stdout.fileno(), 65536)
                if not chunk:
                    return
                pending += chunk
                *lines, pending = pending.split(b"\n")
                for line in lines:
                    parts = line.split()
                    ready = ready or line == b"ready"
                    if parts and parts[0] in (b"wrote", b"idle"):
                        written, last_flushed = int(parts[1]), int(parts[2])
                timeout = 0

        for _ in range(1000):
            read_lines(0.05)
            if ready or time.monotonic() > deadline:
                break
        # first half: everything is sent, received and flushed
        for i in range(300):
            push.send_multipart(_message(i), copy=False)
            sent += 1
        for _ in range(2000):
            read_lines(0.05)
            if last_flushed >= 300 or time.monotonic() > deadline:
                break
        assert ready and last_flushed == 300
        # second half: kill while the stream is still coming in
        for i in range(300, 1500):
            push.send_multipart(_message(i), copy=False)
            sent += 1
        for _ in range(20_000):
            read_lines(0.01)
            if written >= 500 or time.monotonic() > deadline:
                break
        os.kill(child.pid, signal.SIGKILL)
        child.wait(timeout=30)
        read_lines(0)  # the dead child's last lines, up to end of file
    finally:
        if child.poll() is None:
            child.kill()
            child.wait(timeout=30)
        sel.close()
        child.stdout.close()
        push.close(linger=0)
        ctx.term()

    assert child.returncode == -signal.SIGKILL
    assert sent > written > 300, "the kill did not land mid-stream"
    problems = []
    got = list(read_recording(directory, problems))
    assert len(got) >= last_flushed > 300
    assert len(got) <= written
    for i, rec in enumerate(got):  # a prefix of what was sent, byte for byte
        assert rec.frames == _bytes(_message(i)), i
        assert rec.rejected_reason is None
    assert all(p.kind == "torn_tail" for p in problems)

    # The torn write a crash can leave: cut inside the last record.
    path = recording_files(directory)[-1]
    raw = path.read_bytes()
    pos, last = 16, 16
    for _ in range(100_000):  # walk the record lengths to the end of the last whole record
        if pos + 16 > len(raw):
            break
        size = 16 + int.from_bytes(raw[pos + 4 : pos + 12], "little")
        if pos + size > len(raw):
            break
        last, pos = pos, pos + size
    path.write_bytes(raw[: last + (pos - last) // 2])
    problems = []
    again = list(read_recording(directory, problems))
    assert len(again) == len(got) - 1
    assert [p.kind for p in problems] == ["torn_tail"]
    for i, rec in enumerate(again):
        assert rec.frames == got[i].frames
