"""Faults between real processes: malformed messages, overload, publisher and monitor restarts.

Truth comes from the sender's side (every ``seq`` it sent) and the monitor's own recording
(every message that arrived); statistics against numpy on the delivered blocks (common
practice) or against a clean in-process run of the same data.
"""

from __future__ import annotations

import io
import json
import signal

import numpy as np
import pytest
from conftest import MALFORMED_REASONS, StreamWriter, tcp_endpoint, wait_for, write_messages

from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.recorder import read_recording
from eddyvigil.monitor.summary import missing_fields

pytestmark = pytest.mark.integration  # real sockets or child processes


def read_lines(path) -> list[dict]:
    """The point and run lines (the budget line after each point: tests/test_budget.py)."""
    lines = [json.loads(line) for line in path.read_text().splitlines()]
    return [x for x in lines if x["kind"] != "budget"]


def white_blocks(seed, count, n=4096, mean=(6.0, 0.3, 0.0)):
    rng = np.random.default_rng(seed)
    return [(np.asarray(mean) + rng.standard_normal((n, 3))).astype("<f4") for _ in range(count)]


def recorded_seqs(rec_dir, stream="probe-a") -> list[int]:
    out = []
    for r in read_recording(rec_dir):
        header = json.loads(bytes(r.frames[1]))
        if header.get("stream") == stream:
            out.append(header["seq"])
    return out


@pytest.mark.parametrize(
    "per_reason",
    [3, pytest.param(160, marks=pytest.mark.slow, id="2080-malformed")],
)
def test_malformed_corpus_interleaved_is_counted_and_leaves_statistics_untouched(
    procs, tmp_path, per_reason
):
    # 160 per reason x 13 reasons = 2080 malformed messages through a real monitor process
    limit = 2**20
    w = StreamWriter()
    n_rows = 2000 if per_reason < 10 else 256
    blocks = white_blocks(21, per_reason * len(MALFORMED_REASONS), n=n_rows)
    messages = [w.point("M1", x=0.5)]
    for i, b in enumerate(blocks):
        messages.append(w.malformed(MALFORMED_REASONS[i % len(MALFORMED_REASONS)], b, limit))
        messages.append(w.samples(b))
    messages.append(w.end())
    write_messages(tmp_path / "msgs.bin", messages)
    ep = tcp_endpoint()
    watch = procs.watch_pull(
        ep,
        "--max-message-mb",
        "1",
        "--summary",
        str(tmp_path / "s.jsonl"),
        "--no-dashboard",
        name="watch",
    )
    procs.player(tmp_path / "msgs.bin", ep, "push", "connect")
    assert procs.wait(watch, timeout=90) == 0, procs.output(watch)[1][-3000:]
    point, run = read_lines(tmp_path / "s.jsonl")
    assert missing_fields(point) == [] and missing_fields(run) == []
    assert point["complete"] is True and point["lost_messages"] == 0 and point["gaps"] == 0
    for reason in MALFORMED_REASONS:
        assert point["rejected"][reason] == per_reason, reason
        assert run["rejected"][reason] == per_reason, reason
    assert run["messages"] == len(messages)

    clean = io.StringIO()
    p = Pipeline(summary=clean)
    p.begin_point("probe-a", {"id": "M1", "x": 0.5})
    for b in blocks:
        p.feed("probe-a", b, rate_hz=w.rate_hz)
    p.end("probe-a")
    p.close()
    ref = json.loads(clean.getvalue().splitlines()[0])
    assert [s["name"] for s in ref["statistics"]] == [s["name"] for s in point["statistics"]]
    for a, b in zip(ref["statistics"], point["statistics"], strict=True):
        for key in ("value", "stderr"):
            if a[key] is None:
                assert b[key] is None
            else:
                np.testing.assert_allclose(b[key], a[key], rtol=1e-12, err_msg=a["name"])


def _overload_run(procs, tmp_path, socket_kind):
    w = StreamWriter()
    n_samples = 300
    messages = [w.point("O1")]
    blocks = white_blocks(22, 6, n=16384)
    messages += [w.samples(blocks[i % len(blocks)]) for i in range(n_samples)]
    messages.append(w.end())
    write_messages(tmp_path / "msgs.bin", messages)
    ep = tcp_endpoint()
    rec = tmp_path / "rec"
    sub = "sub" if socket_kind == "pub" else "pull"
    watch = procs.eddyvigil(
        "watch",
        "--connect",
        ep,
        "--socket",
        sub,
        "--rcvhwm",
        "2",
        "--record",
        str(rec),
        "--no-dashboard",
        "--quiet",
        name="watch",
    )
    procs.player(
        tmp_path / "msgs.bin",
        ep,
        "xpub" if socket_kind == "pub" else "push",
        "bind",
        sndhwm=2,
        pause_before_last=3.0,
        linger_ms=1000,
    )
    assert procs.wait(watch, timeout=120) == 0, procs.output(watch)[1][-3000:]
    point, run = read_lines(rec / "summary.jsonl")
    arrived = recorded_seqs(rec)
    return messages, point, run, arrived


@pytest.mark.slow
def test_pub_sub_overload_reports_exactly_the_messages_lost(procs, tmp_path):
    messages, point, run, arrived = _overload_run(procs, tmp_path, "pub")
    sent = len(messages)  # seqs 0 .. sent-1, all sent after the subscription arrived
    assert arrived[0] == 0 and arrived[-1] == sent - 1 and arrived == sorted(set(arrived))
    truly_lost = sent - len(arrived)
    assert truly_lost > 0, "the publisher did not outrun the monitor; no loss to count"
    assert point["lost_messages"] == truly_lost and run["lost"] == truly_lost
    assert point["messages"] == len(arrived) and point["complete"] is True


@pytest.mark.slow
def test_push_pull_under_the_same_load_loses_nothing(procs, tmp_path):
    messages, point, run, arrived = _overload_run(procs, tmp_path, "push")
    assert arrived == list(range(len(messages)))
    assert point["lost_messages"] == 0 and run["lost"] == 0
    assert point["samples"] == 300 * 16384


def test_publisher_restart_mid_run(procs, tmp_path):
    first = StreamWriter(session="before")
    blocks = white_blocks(23, 20, n=2048)
    m1 = [first.point("R1")] + [first.samples(b) for b in blocks[:8]]  # then it dies, no end
    second = StreamWriter(session="after")
    m2 = [second.point("R1")] + [second.samples(b) for b in blocks[8:]] + [second.end()]
    write_messages(tmp_path / "m1.bin", m1)
    write_messages(tmp_path / "m2.bin", m2)
    ep = tcp_endpoint()
    watch = procs.watch_pull(
        ep,
        "--summary",
        str(tmp_path / "s.jsonl"),
        "--no-dashboard",
        "--quiet",
        name="watch",
    )
    p1 = procs.player(tmp_path / "m1.bin", ep, "push", "connect", name="p1")
    assert procs.wait(p1, timeout=60) == 0
    procs.player(tmp_path / "m2.bin", ep, "push", "connect", name="p2")
    assert procs.wait(watch, timeout=60) == 0, procs.output(watch)[1][-3000:]
    a, b, run = read_lines(tmp_path / "s.jsonl")
    assert (a["session"], a["complete"], a["samples"]) == ("before", False, 8 * 2048)
    assert (b["session"], b["complete"], b["samples"]) == ("after", True, 12 * 2048)
    assert b["restarts"] == 1 and run["restarts"] == 1 and run["lost"] == 0
    x = np.concatenate(blocks[8:]).astype(np.float64)
    u_mean = next(s["value"] for s in b["statistics"] if s["name"] == "U")
    np.testing.assert_allclose(u_mean, x[:, 0].mean(), rtol=1e-12)


@pytest.mark.slow
def test_monitor_restart_mid_run(procs, tmp_path):
    w = StreamWriter()
    per_point = 40
    truth = {}
    messages = []
    for k, pid in enumerate(("A", "B", "C", "D")):
        blocks = white_blocks(30 + k, per_point, n=1024)
        truth[pid] = np.concatenate(blocks).astype(np.float64)
        messages += [w.point(pid)] + [w.samples(b) for b in blocks]
    messages.append(w.end())
    write_messages(tmp_path / "msgs.bin", messages)
    ep = tcp_endpoint()
    rec1 = tmp_path / "rec1"
    m1 = procs.eddyvigil(
        "watch", "--connect", ep, "--record", str(rec1), "--no-dashboard", "--quiet", name="m1"
    )
    procs.player(
        tmp_path / "msgs.bin",
        ep,
        "xpub",
        "bind",
        pause_every=1,
        pause_s=0.03,
        pause_before_last=1.0,
    )
    wait_for(lambda: len(list(read_recording(rec1))) > 10, timeout=60, what="first monitor data")
    assert procs.interrupt(m1, signal.SIGTERM) == 0
    m2 = procs.eddyvigil(
        "watch",
        "--connect",
        ep,
        "--summary",
        str(tmp_path / "s2.jsonl"),
        "--no-dashboard",
        "--quiet",
        name="m2",
    )
    assert procs.wait(m2, timeout=90) == 0, procs.output(m2)[1][-3000:]
    first = read_lines(rec1 / "summary.jsonl")
    # the point the first monitor was in when stopped is incomplete; any before it are whole
    # (how far it got depends on the machine's load)
    assert first[-1]["kind"] == "run" and first[-2]["complete"] is False
    assert all(p["complete"] for p in first[:-2])
    lines = read_lines(tmp_path / "s2.jsonl")
    points, run = lines[:-1], lines[-1]
    assert run["lost"] == 0  # joining mid-session is not a loss
    # the last point was ended by `end`; it is D, or an implicit point if the second monitor
    # only joined after D's point message (a heavily loaded machine)
    assert points[-1]["complete"] is True and points[-1]["point"]["id"] in ("D", None)
    for p in points[1:]:  # every point after the one it joined in is whole
        x = truth[p["point"]["id"]]
        assert p["complete"] and p["samples"] == len(x)
        u_mean = next(s["value"] for s in p["statistics"] if s["name"] == "U")
        np.testing.assert_allclose(u_mean, x[:, 0].mean(), rtol=1e-12)
