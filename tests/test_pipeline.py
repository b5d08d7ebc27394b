"""Pipeline in-process: sequence accounting, rejections, points, summaries, snapshots.

Statistics are checked against numpy population moments (DESIGN §4: divide by N; numpy
reference, common practice); counts against what the test itself sent.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest
from conftest import MALFORMED_REASONS, StreamWriter

from eddyvigil.monitor.pipeline import TRACE_ROWS, Pipeline
from eddyvigil.monitor.summary import POINT_FIELDS, RUN_FIELDS, missing_fields
from eddyvigil.stats.targets import Targets


class FakeClock:
    def __init__(self):
        self.t = 0.0

    def __call__(self):
        return self.t


def blocks(seed: int, count: int, n: int = 4096, mean=(8.0, 0.5, -0.2), std=(1.2, 0.6, 0.5)):
    rng = np.random.default_rng(seed)
    return [
        (np.asarray(mean) + np.asarray(std) * rng.standard_normal((n, 3))).astype("<f4")
        for _ in range(count)
    ]


def lines_of(buf: io.StringIO) -> list[dict]:
    """The point and run lines (the budget line after each point: tests/test_budget.py)."""
    lines = [json.loads(line) for line in buf.getvalue().splitlines()]
    return [x for x in lines if x["kind"] != "budget"]


def stat(line: dict, name: str) -> float:
    return next(s["value"] for s in line["statistics"] if s["name"] == name)


def new_pipeline(**kw):
    buf = io.StringIO()
    return Pipeline(summary=buf, clock=FakeClock(), **kw), buf


def test_statistics_are_numpy_population_moments_and_lines_are_well_formed():
    p, buf = new_pipeline()
    w = StreamWriter()
    data = blocks(1, 6)
    p.handle_frames(w.point("P01", x=0.0, y=0.01, z=0.0))
    for b in data:
        p.handle_frames(w.samples(b))
    p.handle_frames(w.end())
    p.close()
    point, run = lines_of(buf)
    assert missing_fields(point) == [] and missing_fields(run) == []
    assert set(POINT_FIELDS) <= set(point) and list(point)[-1] == "statistics"
    assert set(RUN_FIELDS) <= set(run)
    x = np.concatenate(data).astype(np.float64)
    f = x - x.mean(axis=0)
    assert point["complete"] is True
    assert point["point"] == {"id": "P01", "x": 0.0, "y": 0.01, "z": 0.0}
    assert point["samples"] == x.shape[0]
    assert point["duration_s"] == pytest.approx(x.shape[0] / 1000.0, rel=1e-12)
    assert point["messages"] == 8  # point + 6 samples + end
    np.testing.assert_allclose(stat(point, "U"), x[:, 0].mean(), rtol=1e-12)
    np.testing.assert_allclose(stat(point, "W"), x[:, 2].mean(), rtol=1e-12)
    np.testing.assert_allclose(stat(point, "uu"), np.mean(f[:, 0] ** 2), rtol=1e-10)
    np.testing.assert_allclose(stat(point, "uv"), np.mean(f[:, 0] * f[:, 1]), rtol=1e-9)
    np.testing.assert_allclose(stat(point, "uuv"), np.mean(f[:, 0] ** 2 * f[:, 1]), rtol=1e-7)
    assert run["samples"] == x.shape[0] and run["messages"] == 8 and run["lost"] == 0
    assert run["points"] == 1 and run["streams"] == ["probe-a"]


@pytest.mark.integration
def test_socket_path_and_in_process_api_give_identical_summaries():
    data = blocks(2, 5)
    p1, b1 = new_pipeline()
    w = StreamWriter()
    p1.handle_frames(w.point("A"))
    for b in data:
        p1.handle_frames(w.samples(b))
    p1.handle_frames(w.end())
    p1.close()
    p2, b2 = new_pipeline()
    p2.begin_point("probe-a", {"id": "A"})
    for b in data:
        assert p2.feed("probe-a", b, rate_hz=1000.0) is None
    p2.end("probe-a")
    p2.close()
    l1, l2 = lines_of(b1)[0], lines_of(b2)[0]
    assert l1["statistics"] == l2["statistics"]
    assert l1["samples"] == l2["samples"] and l1["converged_at_s"] == l2["converged_at_s"]


def test_gaps_count_exactly_the_missing_seqs_and_statistics_continue():
    p, buf = new_pipeline()
    w = StreamWriter()
    data = blocks(3, 10)
    p.handle_frames(w.point("P"))
    delivered = []
    for i, b in enumerate(data):
        frames = w.samples(b)
        if i in (2, 3, 7):  # lost on the way: two gaps, three messages
            continue
        delivered.append(b)
        p.handle_frames(frames)
    p.handle_frames(w.end())
    p.close()
    point, run = lines_of(buf)
    assert point["lost_messages"] == 3 and point["gaps"] == 2
    assert run["lost"] == 3
    x = np.concatenate(delivered).astype(np.float64)
    np.testing.assert_allclose(stat(point, "U"), x[:, 0].mean(), rtol=1e-12)
    assert point["samples"] == len(x)


@pytest.mark.parametrize("reason", MALFORMED_REASONS)
def test_each_malformed_message_is_counted_under_its_reason_and_is_no_loss(reason):
    limit = 2**20
    clean, cbuf = new_pipeline(max_message_bytes=limit)
    dirty, dbuf = new_pipeline(max_message_bytes=limit)
    wc, wd = StreamWriter(), StreamWriter()
    data = blocks(4, 4, n=1000)
    for p, w in ((clean, wc), (dirty, wd)):
        p.handle_frames(w.point("P"))
    for b in data:
        clean.handle_frames(wc.samples(b))
        assert dirty.handle_frames(wd.malformed(reason, b, limit_bytes=limit)) == reason
        assert dirty.handle_frames(wd.samples(b)) is None
    for p, w in ((clean, wc), (dirty, wd)):
        p.handle_frames(w.end())
        p.close()
    (pc, _), (pd, rd) = lines_of(cbuf), lines_of(dbuf)
    assert pd["rejected"][reason] == len(data)
    assert sum(pd["rejected"].values()) == len(data)
    assert rd["rejected"][reason] == len(data)
    assert pd["lost_messages"] == 0 and pd["gaps"] == 0
    for a, b in zip(pc["statistics"], pd["statistics"], strict=True):
        assert a["name"] == b["name"]
        if a["value"] is None:
            assert b["value"] is None
        else:
            np.testing.assert_allclose(b["value"], a["value"], rtol=1e-12)


def test_duplicate_seq_is_rejected_and_bad_objects_never_raise():
    p, buf = new_pipeline()
    w = StreamWriter()
    p.handle_frames(w.point("P"))
    frames = w.samples(blocks(5, 1)[0])
    assert p.handle_frames(frames) is None
    assert p.handle_frames(frames) == "duplicate_seq"
    for junk in (None, 42, [b"x"], [object(), object()], [b"", b"", b"", b""], "text"):
        assert p.handle_frames(junk) is not None
    p.close()
    point, run = lines_of(buf)
    assert point["rejected"]["duplicate_seq"] == 1
    assert point["samples"] == 4096
    assert run["messages"] == 3 + 6
    assert sum(run["rejected"].values()) == 1 + 6


def test_garbage_under_ever_new_names_cannot_lock_real_streams_out():
    # A sender of malformed messages, each on a new topic (the soak's garbage sender does
    # this): more names than MAX_STREAMS. Every message is rejected and counted; at most
    # MAX_REJECTED_ONLY such names stay on the board; a real stream that starts afterwards
    # is accepted, and one with accepted messages is never forgotten.
    from eddyvigil.monitor.pipeline import MAX_REJECTED_ONLY, MAX_STREAMS

    p, buf = new_pipeline()
    real = StreamWriter("probe-a")
    p.handle_frames(real.point("P"))
    junk = MAX_STREAMS + 40
    for i in range(junk):
        w = StreamWriter(f"junk-{i}")
        frames = w.malformed("bad_dtype", blocks(1, 1, n=64)[0])
        assert p.handle_frames(frames) == "bad_dtype"
    late = StreamWriter("probe-b")
    assert p.handle_frames(late.point("P")) is None
    assert p.handle_frames(late.samples(blocks(2, 1)[0])) is None
    assert p.handle_frames(real.samples(blocks(3, 1)[0])) is None
    snap = p.publish()
    shown = [n for n in snap.streams if n.startswith("junk-")]
    assert len(shown) <= MAX_REJECTED_ONLY
    assert f"junk-{junk - 1}" in shown  # the most recent stay visible
    assert {"probe-a", "probe-b"} <= set(snap.streams)
    for w in (real, late):
        p.handle_frames(w.end())
    p.close()
    run = lines_of(buf)[-1]
    assert run["rejected"]["bad_dtype"] == junk
    assert run["rejected"].get("too_many_streams", 0) == 0
    assert run["streams"] == ["probe-a", "probe-b"]
    assert run["messages"] == junk + 6


def test_publisher_restart_finishes_point_incomplete_and_starts_fresh():
    p, buf = new_pipeline()
    a = StreamWriter(session="first")
    data = blocks(6, 4)
    p.handle_frames(a.point("P1"))
    p.handle_frames(a.samples(data[0]))
    p.handle_frames(a.samples(data[1]))
    b = StreamWriter(session="second")
    p.handle_frames(b.point("P1"))
    p.handle_frames(b.samples(data[2]))
    p.handle_frames(b.samples(data[3]))
    p.handle_frames(b.end())
    p.close()
    first, second, run = lines_of(buf)
    assert first["complete"] is False and first["session"] == "first"
    assert first["samples"] == 2 * 4096
    assert second["complete"] is True and second["session"] == "second"
    assert second["restarts"] == 1 and second["lost_messages"] == 0
    assert run["restarts"] == 1 and run["points"] == 2


def test_late_messages_of_an_ended_session_are_rejected_not_restarts():
    # PUSH/PULL queues connections fairly (ZeroMQ guide, "fair-queuing"; common practice): a
    # lagging monitor can receive the old connection's last messages after the restarted
    # publisher's first. One restart, the old point untouched, the stragglers counted.
    p, buf = new_pipeline()
    a = StreamWriter(session="first")
    data = blocks(8, 6)
    p.handle_frames(a.point("P1"))
    p.handle_frames(a.samples(data[0]))
    b = StreamWriter(session="second")
    p.handle_frames(b.point("P1"))
    p.handle_frames(b.samples(data[1]))
    assert p.handle_frames(a.samples(data[2])) == "late_session"
    p.handle_frames(b.samples(data[3]))
    assert p.handle_frames(a.samples(data[4])) == "late_session"
    p.handle_frames(b.samples(data[5]))
    p.handle_frames(b.end())
    p.close()
    first, second, run = lines_of(buf)
    assert first["samples"] == 4096 and first["session"] == "first"
    assert second["samples"] == 3 * 4096 and second["rejected"]["late_session"] == 2
    assert sum(second["rejected"].values()) == 2
    assert run["restarts"] == 1 and run["points"] == 2
    assert {k: v for k, v in run["rejected"].items() if v} == {"late_session": 2}
    assert run["messages"] == 9


def test_implicit_point_samples_point_and_shutdown_incomplete():
    p, buf = new_pipeline()
    w = StreamWriter()
    d = blocks(7, 3)
    p.handle_frames(w.samples(d[0]))  # before any point
    frames = w.samples(d[1])
    header = json.loads(frames[1])
    header["point"] = {"id": "Q", "x": 0.1}
    frames[1] = json.dumps(header).encode()
    p.handle_frames(frames)  # a samples header naming a new point starts it
    p.handle_frames(w.samples(d[2]))
    assert not p.all_ended
    p.close()
    p.close()  # idempotent
    implicit, q, run = lines_of(buf)
    assert implicit["point"] == {"id": None} and implicit["complete"] is True
    assert implicit["samples"] == 4096
    assert q["point"] == {"id": "Q", "x": 0.1} and q["complete"] is False
    assert q["samples"] == 2 * 4096
    assert run["kind"] == "run" and run["points"] == 2


def test_layout_change_is_rejected():
    p, buf = new_pipeline()
    p.begin_point("s", {"id": "P"})
    rng = np.random.default_rng(8)
    assert p.feed("s", rng.standard_normal((100, 3)), rate_hz=100.0) is None
    assert p.feed("s", rng.standard_normal((100, 2)), columns=("u", "v"), rate_hz=100.0) == (
        "layout_changed"
    )
    assert p.feed("s", rng.standard_normal((100, 3)), rate_hz=200.0) == "layout_changed"
    assert p.feed("s", np.full((5, 3), np.inf), rate_hz=100.0) == "non_finite"
    p.end("s")
    p.close()
    point = lines_of(buf)[0]
    assert point["rejected"]["layout_changed"] == 2 and point["rejected"]["non_finite"] == 1
    assert point["samples"] == 100


def test_random_sampling_duration_from_time_column_and_steps_back_rejected():
    p, buf = new_pipeline()
    rng = np.random.default_rng(9)
    t = np.cumsum(rng.exponential(1e-3, 3000))
    u = 5.0 + rng.standard_normal((3000, 1))
    p.begin_point("lda", {"id": "R"})
    assert p.feed("lda", u[:1000], columns=("u",), times=t[:1000]) is None
    assert p.feed("lda", u[1000:], columns=("u",), times=t[1000:]) is None
    assert p.feed("lda", u[:10], columns=("u",), times=t[:10]) == "time_backwards"
    p.end("lda")
    p.close()
    point = lines_of(buf)[0]
    assert point["samples"] == 3000
    assert point["duration_s"] == pytest.approx(t[-1] - t[0], rel=1e-12)
    # no weight column: the default fallback weights each sample by the time since the
    # previous arrival (Barnett & Bentley 1974, from memory; the first by the mean gap)
    w = np.r_[(t[999] - t[0]) / 999, np.diff(t)]
    assert point["weighting"] == "arrival"
    np.testing.assert_allclose(stat(point, "U"), np.average(u[:, 0], weights=w), rtol=1e-12)


def test_random_sampling_without_weighting_is_arithmetic():
    p = Pipeline(summary=(buf := io.StringIO()), weighting="none")
    rng = np.random.default_rng(9)
    t = np.cumsum(rng.exponential(1e-3, 3000))
    u = 5.0 + rng.standard_normal((3000, 2))
    p.begin_point("lda", {"id": "R"})
    assert p.feed("lda", u, columns=("u", "v"), times=t) is None
    p.close()
    point = lines_of(buf)[0]
    assert point["weighting"] == "none"
    np.testing.assert_allclose(stat(point, "U"), u[:, 0].mean(), rtol=1e-12)
    np.testing.assert_allclose(stat(point, "uv"), np.cov(u.T, bias=True)[0, 1], rtol=1e-9)


def test_snapshot_is_rebound_frozen_and_bounded(monkeypatch):
    import eddyvigil.monitor.pipeline as pipeline_module

    monkeypatch.setattr(pipeline_module, "HISTORY_ROWS", 32)
    clock = FakeClock()
    # every block alone (no joining, monitor.coalesce), so that each republication after a
    # block finds new statistics and adds a history row: the bound is reached
    p = Pipeline(summary=io.StringIO(), clock=clock, snapshot_interval_s=0.25, coalesce_s=0.0)
    w = StreamWriter(rate_hz=20000.0)
    first = p.snapshot
    p.handle_frames(w.point("P"))
    kept = [first, p.snapshot]  # held, so no id is reused by a freed snapshot
    for b in blocks(10, 150, n=64):
        clock.t += 0.3
        p.handle_frames(w.samples(b))
        kept.append(p.snapshot)
    snap = p.snapshot
    view = snap.streams["probe-a"]
    assert len({id(s) for s in kept}) > 100  # republished as the clock advanced
    assert len(view.trace["t"]) <= TRACE_ROWS and len(view.trace["u"]) == len(view.trace["t"])
    assert np.all(np.diff(view.trace["t"]) > 0)
    assert 0 < len(view.history["duration_s"]) < 32
    assert len(view.history["U"]) == len(view.history["duration_s"])
    with pytest.raises(ValueError):
        view.trace["u"][0] = 1.0
    with pytest.raises(AttributeError):
        view.messages = 0
    assert view.point["id"] == "P" and view.stats is not None
    p.close()


def test_converged_callback_once_per_point_with_acquisition_time():
    calls = []
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.05}}})
    buf = io.StringIO()
    p = Pipeline(targets, summary=buf, clock=FakeClock(), on_converged=lambda *a: calls.append(a))
    w = StreamWriter(rate_hz=10000.0)
    for pid in ("A", "B"):
        p.handle_frames(w.point(pid))
        for b in blocks(11, 40, n=2048):
            p.handle_frames(w.samples(b))
    p.handle_frames(w.end())
    p.close()
    assert [c[1]["id"] for c in calls] == ["A", "B"]
    for stream, _point, at_s, summary in calls:
        assert stream == "probe-a" and summary["complete"] is False
        assert missing_fields(summary) == []
        assert 0 < at_s <= 40 * 2048 / 10000.0
    a, b, _ = lines_of(buf)
    assert a["converged"] is True and a["converged_at_s"] == pytest.approx(calls[0][2])


def test_trace_is_the_thinned_latest_samples_and_a_held_snapshot_keeps_its_own():
    """The display trace: every stride-th sample of each message (stride = ceil(n / 256)),
    at most TRACE_ROWS rows, the newest last, times from t0 + index / rate; a snapshot
    already published keeps its values while later messages arrive."""
    from eddyvigil.monitor.pipeline import TRACE_ROWS_PER_MESSAGE

    clock = FakeClock()
    p = Pipeline(summary=io.StringIO(), clock=clock, snapshot_interval_s=0.0)
    w = StreamWriter(rate_hz=1000.0)
    p.handle_frames(w.point("P"))
    rng = np.random.default_rng(5)
    sent = [rng.standard_normal((1000, 3)).astype(np.float32) for _ in range(30)]
    held = None
    for i, b in enumerate(sent):
        p.handle_frames(w.samples(b))
        if i == 10:
            held = p.snapshot.streams["probe-a"].trace
            held_copy = {k: v.copy() for k, v in held.items()}
    stride = -(-1000 // TRACE_ROWS_PER_MESSAGE)
    expect_u = np.concatenate([b[::stride, 0] for b in sent])[-TRACE_ROWS:]
    expect_t = np.concatenate(
        [(i * 1000 + np.arange(0, 1000, stride)) / 1000.0 for i in range(len(sent))]
    )[-TRACE_ROWS:]
    trace = p.snapshot.streams["probe-a"].trace
    assert np.array_equal(trace["u"], expect_u.astype(np.float64))
    assert np.allclose(trace["t"], expect_t, rtol=0, atol=1e-9)
    for k, v in held_copy.items():
        assert np.array_equal(held[k], v), k
    p.close()
