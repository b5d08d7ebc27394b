"""A real publisher process (``python -m eddyvigil.simulator.cli``) talking to a plain pyzmq receiver.

Every message is decoded with :func:`eddyvigil.monitor.wire.decode`; every loop is bounded in count and
time; every socket is closed with linger 0 and the child process is always reaped.
"""

from __future__ import annotations

import json
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import zmq

from eddyvigil.monitor import wire
from eddyvigil.monitor.exitcodes import ExitCode
from eddyvigil.simulator.scenario import load_scenario

pytestmark = pytest.mark.integration  # real sockets or child processes

ROOT = Path(__file__).resolve().parents[1]


def _spawn(*args):
    return subprocess.Popen(
        [sys.executable, "-m", "eddyvigil.simulator.cli", "--quiet", *args],
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
    )


def _reap(proc, timeout=30.0):
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate(timeout=10)
    return proc.returncode, err.decode(errors="replace")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _receive(sock, *, max_messages=20_000, max_seconds=60.0):
    """Decode messages until ``end`` (or the bounds); return the decoded list."""
    got = []
    deadline = time.monotonic() + max_seconds
    for _ in range(max_messages):
        left = deadline - time.monotonic()
        if left <= 0 or not sock.poll(int(min(left, 20.0) * 1000)):
            break
        msg = wire.decode(sock.recv_multipart(copy=False))
        got.append(msg)
        if isinstance(msg, wire.EndMessage):
            break
    return got


@pytest.fixture
def ctx():
    c = zmq.Context()
    yield c
    c.term()



def _bound_sub(ctx, topic: bytes):
    """A SUB socket bound on a free loopback port (the publisher under test connects)."""
    sub = ctx.socket(zmq.SUB)
    sub.setsockopt(zmq.LINGER, 0)
    sub.setsockopt(zmq.SUBSCRIBE, topic)
    return sub, sub.bind_to_random_port("tcp://127.0.0.1")

def test_pub_publisher_sends_the_whole_traverse(ctx, tmp_path):
    sub, port = _bound_sub(ctx, b"probe-a")
    truth_file = tmp_path / "truth.json"
    proc = _spawn(
        "--connect",
        f"tcp://127.0.0.1:{port}",
        "--speed",
        "max",
        "--point-seconds",
        "0.25",
        "--block",
        "100",
        "--seed",
        "3",
        "--truth",
        str(truth_file),
    )
    try:
        msgs = _receive(sub)
    finally:
        sub.close(linger=0)
        code, err = _reap(proc)
    assert code == 0, err
    assert not [m for m in msgs if isinstance(m, wire.Rejection)]
    assert isinstance(msgs[-1], wire.EndMessage)
    sessions = {m.session for m in msgs}
    assert len(sessions) == 1
    assert [m.seq for m in msgs] == list(range(len(msgs)))  # nothing lost, from 0
    points = [m.point["id"] for m in msgs if isinstance(m, wire.PointMessage)]
    assert points == [f"P{i:02d}" for i in range(1, 10)]
    # each point message announces the traverse to come (monitor.campaign; README)
    plans = [m.header["traverse"] for m in msgs if isinstance(m, wire.PointMessage)]
    assert [(t["index"], t["of"], t["limit_s"]) for t in plans] == [(i, 9, 0.25) for i in range(9)]
    assert [[r["id"] for r in t["remaining"]] for t in plans] == [points[i + 1:] for i in range(9)]
    assert plans[0]["remaining"][0]["y"] == load_scenario("wake").points[1].y
    # 0.25 s of rows per point, uniform rate, t0 continuing across points
    sc = load_scenario("wake")
    rate, rows = sc.rate_hz, round(0.25 * sc.rate_hz)
    samples = [m for m in msgs if isinstance(m, wire.SamplesMessage)]
    assert sum(m.n for m in samples) == 9 * rows
    assert all(m.rate_hz == rate and m.columns == ("u", "v", "w") for m in samples)
    np.testing.assert_allclose([m.t0 for m in samples], np.arange(len(samples)) * 100 / rate)
    # the received samples are the in-process generator's, same seed (point i: seed [3, i])
    seed0 = int(np.random.SeedSequence([3, 0]).generate_state(2)[0])
    first = np.concatenate([m.velocity for m in samples[:10]])
    np.testing.assert_array_equal(first, sc.make_generator(sc.points[0], seed0).next_block(1000))
    truth = json.loads(truth_file.read_text())
    assert truth["complete"] and truth["sessions"] == [msgs[0].session]
    assert [p["point"]["id"] for p in truth["points"]] == points
    assert all(p["rows"] == rows and p["ended_by"] == "time" for p in truth["points"])
    assert {"production", "turbulent_transport", "dissipation", "residual"} <= set(
        truth["points"][0]["budget"]
    )


@pytest.mark.slow
def test_push_publisher_faults_are_seen_as_recorded(ctx, tmp_path):
    port = _free_port()
    truth_file = tmp_path / "truth.json"
    proc = _spawn(
        "--bind",
        f"tcp://127.0.0.1:{port}",
        "--socket",
        "push",
        "--scenario",
        "glitches",
        "--speed",
        "max",
        "--block",
        "40",
        "--point-seconds",
        "2",
        "--truth",
        str(truth_file),
    )
    pull = ctx.socket(zmq.PULL)
    pull.setsockopt(zmq.LINGER, 0)
    pull.connect(f"tcp://127.0.0.1:{port}")
    try:
        msgs = _receive(pull)
    finally:
        pull.close(linger=0)
        code, err = _reap(proc)
    assert code == 0, err
    truth = json.loads(truth_file.read_text())["messages"]
    rejected = [m for m in msgs if isinstance(m, wire.Rejection)]
    assert [r.reason for r in rejected] == [m["reason"] for m in truth["malformed"]]
    assert len(rejected) == 12
    # restart: a second session whose first message is a point message with seq 0
    assert len(truth["restarts"]) == 1
    new = truth["restarts"][0]["session"]
    firsts = [m for m in msgs if getattr(m, "session", None) == new]
    assert isinstance(firsts[0], wire.PointMessage) and firsts[0].seq == 0
    # every seq of every session is accounted for: received (accepted or rejected with a
    # readable seq), malformed beyond reading, or lost as the truth says
    for session in {m["session"] for m in truth["malformed"]} | {new}:
        seen = {m.seq for m in msgs if getattr(m, "session", None) == session and m.seq is not None}
        unreadable = {
            m["seq"]
            for m in truth["malformed"]
            if m["session"] == session and m["kind"] == "bad_json"
        }
        lost = {m["seq"] for m in truth["lost"] if m["session"] == session}
        assert not (seen & lost)
        assert seen | unreadable | lost == set(range(max(seen) + 1))
    assert truth["lost"]  # 2 % of ~600 messages
    assert isinstance(msgs[-1], wire.EndMessage)


def test_follow_control_moves_on_when_converged(ctx, tmp_path):
    sub, port = _bound_sub(ctx, b"")
    control = ctx.socket(zmq.PUB)
    control.setsockopt(zmq.LINGER, 0)
    cport = control.bind_to_random_port("tcp://127.0.0.1")
    truth_file = tmp_path / "truth.json"
    proc = _spawn(
        "--connect",
        f"tcp://127.0.0.1:{port}",
        "--scenario",
        "drift",
        "--speed",
        "4",
        "--point-seconds",
        "20",
        "--follow-control",
        f"tcp://127.0.0.1:{cport}",
        "--truth",
        str(truth_file),
    )
    msgs, current, per_point = [], None, 0
    deadline = time.monotonic() + 60.0
    try:
        for _ in range(5000):
            if time.monotonic() > deadline or not sub.poll(10_000):
                break
            m = wire.decode(sub.recv_multipart())
            msgs.append(m)
            if isinstance(m, wire.EndMessage):
                break
            if isinstance(m, wire.PointMessage):
                current, per_point = m.point, 0
            elif isinstance(m, wire.SamplesMessage):
                per_point += 1
                if per_point >= 3:  # "converged" after a few messages, repeated until it moves
                    body = {
                        "v": 1,
                        "kind": "converged",
                        "stream": m.stream,
                        "point": current,
                        "at_s": m.t0,
                        "summary": {},
                    }
                    control.send_multipart([m.stream.encode(), json.dumps(body).encode()])
    finally:
        sub.close(linger=0)
        control.close(linger=0)
        code, err = _reap(proc)
    assert code == 0, err
    assert isinstance(msgs[-1], wire.EndMessage)
    points = json.loads(truth_file.read_text())["points"]
    assert [p["point"]["id"] for p in points] == ["K1-clean", "K2-drift", "K3-spikes", "K4-rails"]
    assert all(p["ended_by"] == "converged" for p in points)
    assert all(p["rows"] < 20 * 2000 for p in points)
    assert points[1]["stationary"] is False and points[0]["stationary"] is True


def test_random_sampling_over_the_wire(ctx):
    pull = ctx.socket(zmq.PULL)
    pull.setsockopt(zmq.LINGER, 0)
    port = pull.bind_to_random_port("tcp://127.0.0.1")
    proc = _spawn(
        "--connect",
        f"tcp://127.0.0.1:{port}",
        "--socket",
        "push",
        "--scenario",
        "lda",
        "--speed",
        "max",
        "--point-seconds",
        "1",
    )
    try:
        msgs = _receive(pull)
    finally:
        pull.close(linger=0)
        code, err = _reap(proc)
    assert code == 0, err
    samples = [m for m in msgs if isinstance(m, wire.SamplesMessage)]
    assert samples and not [m for m in msgs if isinstance(m, wire.Rejection)]
    assert all(m.rate_hz is None and m.columns == ("u", "v", "t", "weight") for m in samples)
    t = np.concatenate([m.times for m in samples])
    assert np.all(np.diff(t) > 0) and t[-1] < 3.0
    assert np.all(np.concatenate([m.weights for m in samples]) > 0)
    # ~1000 arrivals per second per point (Poisson, 3 points of 1 s)
    assert 2500 < t.size < 3500


@pytest.mark.parametrize(
    "args, words, expected",
    [
        (["--scenario", "tornado"], "no built-in scenario", ExitCode.INPUT_FILE),
        (["--speed", "fast"], "speed", ExitCode.USAGE),
        (["--bind", "nonsense://x"], "unknown transport", ExitCode.ENDPOINT),
        (["--bind", "tcp://127.0.0.1:70000"], "outside 1-65535", ExitCode.ENDPOINT),
    ],
)
def test_cli_refuses_bad_arguments(args, words, expected):
    """Codes of the one table (monitor/exitcodes.py), the same as watch's for the same fault."""
    if args[0] != "--bind":
        args = ["--connect", "tcp://127.0.0.1:1", *args]
    proc = _spawn(*args)
    code, err = _reap(proc, timeout=30)
    assert code == expected
    assert words in err and "Traceback" not in err


def test_sigterm_mid_point_still_sends_end(ctx, tmp_path):
    sub, port = _bound_sub(ctx, b"")
    truth_file = tmp_path / "truth.json"
    proc = _spawn(
        "--connect",
        f"tcp://127.0.0.1:{port}",
        "--speed",
        "1",
        "--scenario",
        "drift",
        "--truth",
        str(truth_file),
    )
    msgs = []
    try:
        for _ in range(200):
            if not sub.poll(30_000):
                break
            m = wire.decode(sub.recv_multipart())
            msgs.append(m)
            if isinstance(m, wire.SamplesMessage) and len(msgs) == 5:
                proc.terminate()
            if isinstance(m, wire.EndMessage):
                break
    finally:
        sub.close(linger=0)
        code, err = _reap(proc)
    assert code == 130, err
    assert isinstance(msgs[-1], wire.EndMessage)
    truth = json.loads(truth_file.read_text())
    assert truth["complete"] is False
    assert truth["points"][0]["ended_by"] == "stopped"


def test_sigint_stops_a_push_publisher_nobody_reads(tmp_path):
    port = _free_port()
    proc = _spawn("--bind", f"tcp://127.0.0.1:{port}", "--socket", "push", "--speed", "max")
    # The publisher installs its SIGINT handler before it binds: once the port takes a plain TCP
    # connection (not a ZeroMQ peer, so PUSH still has nobody to send to), the handler is in
    # place, whatever the machine's load made the start-up cost.
    deadline = time.monotonic() + 60.0
    while time.monotonic() < deadline and proc.poll() is None:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=0.5).close()
            break
        except OSError:
            time.sleep(0.1)
    time.sleep(0.5)  # and it blocks on the first send (no peer)
    proc.send_signal(2)
    code, err = _reap(proc, timeout=20)
    assert code == 130, err
