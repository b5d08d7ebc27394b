"""Recorder and recording reader: round trips, rolling, manifest, append, damage detection, pacing.

The file format is checked by an independent parser written here from the layout documented in
``monitor/recorder.py``, with ``zlib.crc32`` (the standard CRC-32 of ISO 3309 / ITU-T V.42) as
the reference for the checksums.
"""

from __future__ import annotations

import json
import struct
import time
import zlib

import numpy as np
import pytest
import zmq

from eddyvigil.monitor import wire
from eddyvigil.monitor.recorder import (
    FILE_MAGIC,
    RECORD_MARK,
    Recorder,
    RecordingExistsError,
    holds_recording,
    paced,
    read_recording,
    recording_files,
)


def _messages(seed: int, count: int):
    """(frames, received_at, reason) triples: samples, points, ends and rejected junk."""
    rng = np.random.default_rng(seed)
    out = []
    t = 1_700_000_000.0
    for i in range(count):
        t += float(rng.exponential(0.01))
        k = i % 5
        if k == 0:
            out.append((wire.encode_point("probe-a", "s", i, {"id": f"P{i}"}), t, None))
        elif k == 4:
            junk = [bytes(rng.integers(0, 256, int(rng.integers(0, 40)), dtype=np.uint8))]
            out.append((junk * int(rng.integers(1, 4)), t, "bad_frames"))
        else:
            n = int(rng.integers(1, 500))
            data = rng.normal(size=(n, 2)).astype("<f4" if k == 1 else "<f8")
            frames = wire.encode_samples("probe-a", "s", i, data, ["u", "v"], rate_hz=1e4, t0=0.0)
            out.append((frames, t, None))
    return out


def _as_bytes(frames):
    return [bytes(memoryview(f).cast("B")) for f in frames]


def _independent_parse(path):
    """Parse a frame file straight from the documented layout (no code shared with the reader)."""
    raw = path.read_bytes()
    magic, version, reserved = struct.unpack_from("<8sII", raw, 0)
    assert (magic, version, reserved) == (b"EVRECORD", 1, 0)
    pos, records = 16, []
    while pos < len(raw):
        mark, length, crc = struct.unpack_from("<4sQI", raw, pos)
        assert mark == RECORD_MARK
        body = raw[pos + 16 : pos + 16 + length]
        assert zlib.crc32(struct.pack("<Q", length) + body) == crc
        at, rlen = struct.unpack_from("<dH", body, 0)
        reason = body[10 : 10 + rlen].decode() or None
        (count,) = struct.unpack_from("<I", body, 10 + rlen)
        p, frames = 14 + rlen, []
        for _ in range(count):
            (flen,) = struct.unpack_from("<Q", body, p)
            frames.append(body[p + 8 : p + 8 + flen])
            p += 8 + flen
        assert p == length
        records.append((at, frames, reason))
        pos += 16 + length
    return records


def test_round_trip_every_frame_exactly(tmp_path):
    msgs = _messages(1, 60)
    with Recorder(tmp_path / "rec") as rec:
        for frames, at, reason in msgs:
            rec.write(frames, at, reason)
    problems = []
    got = list(read_recording(tmp_path / "rec", problems))
    assert problems == []
    assert len(got) == len(msgs)
    for r, (frames, at, reason) in zip(got, msgs, strict=True):
        assert r.received_at == at and r.rejected_reason == reason
        assert r.frames == _as_bytes(frames)
    # and the bytes on disk follow the documented layout
    (path,) = recording_files(tmp_path / "rec")
    assert [(a, f, r) for a, f, r in _independent_parse(path)] == [
        (at, _as_bytes(frames), reason) for frames, at, reason in msgs
    ]


def test_recorded_samples_decode_to_what_was_sent(tmp_path):
    rng = np.random.default_rng(7)
    data = rng.normal(size=(1024, 3)).astype("<f4")
    with Recorder(tmp_path / "r") as rec:
        rec.write(wire.encode_samples("p", "s", 0, data, "uvw", rate_hz=1e3, t0=0.0), 1.0)
    (r,) = read_recording(tmp_path / "r")
    msg = wire.decode(r.frames)
    np.testing.assert_array_equal(msg.data, data)


def test_zmq_frames_and_non_byte_buffers_are_recorded(tmp_path):
    arr = np.arange(12, dtype=np.float64).reshape(4, 3)
    with Recorder(tmp_path / "z") as rec:
        rec.write([zmq.Frame(b"topic"), zmq.Frame(b"{}"), arr], 2.5, "bad_json")
        rec.write([bytearray(b"mutable"), memoryview(b"view")], 3.5)
    a, b = read_recording(tmp_path / "z")
    assert a.frames == [b"topic", b"{}", arr.tobytes()] and a.rejected_reason == "bad_json"
    assert b.frames == [b"mutable", b"view"] and b.rejected_reason is None


def test_writable_buffers_are_copied_at_write(tmp_path):
    buf = bytearray(b"before")
    with Recorder(tmp_path / "w") as rec:
        rec.write([buf], 1.0)
        buf[:] = b"AFTER!"
    (r,) = read_recording(tmp_path / "w")
    assert r.frames == [b"before"]


def test_rolls_by_size_without_splitting_records(tmp_path):
    msgs = _messages(2, 120)
    with Recorder(tmp_path / "roll", roll_bytes=8_000) as rec:
        for frames, at, reason in msgs:
            rec.write(frames, at, reason)
    files = recording_files(tmp_path / "roll")
    assert len(files) > 3
    manifest = json.loads((tmp_path / "roll" / "manifest.json").read_text())
    assert [f["name"] for f in manifest["files"]] == [p.name for p in files]
    total = 0
    for entry, path in zip(manifest["files"], files, strict=True):
        records = _independent_parse(path)  # every file parses whole on its own
        assert entry["records"] == len(records) and entry["bytes"] == path.stat().st_size
        assert path.stat().st_size <= 8_000 or len(records) == 1
        total += len(records)
    assert total == len(msgs)
    got = list(read_recording(tmp_path / "roll"))
    assert [r.received_at for r in got] == [at for _, at, _ in msgs]


def test_manifest_counts(tmp_path):
    msgs = _messages(3, 50)
    with Recorder(tmp_path / "m") as rec:
        for frames, at, reason in msgs:
            rec.write(frames, at, reason)
    m = json.loads((tmp_path / "m" / "manifest.json").read_text())
    assert m["format_version"] == 1 and m["eddyvigil_version"] and m["created"] and m["closed"]
    rejected = sum(1 for _, _, r in msgs if r)
    assert m["counts"] == {
        "records": 50,
        "accepted": 50 - rejected,
        "rejected": {"bad_frames": rejected},
    }


def test_refuses_existing_recording_unless_append(tmp_path):
    d = tmp_path / "rec"
    with Recorder(d) as rec:
        rec.write([b"a", b"b"], 1.0)
    assert holds_recording(d)
    with pytest.raises(RecordingExistsError, match="already holds a recording"):
        Recorder(d)
    with Recorder(d, append=True) as rec:
        rec.write([b"c"], 2.0, "bad_frames")
    assert [p.name for p in recording_files(d)] == ["frames-000001.evr", "frames-000002.evr"]
    assert [r.frames for r in read_recording(d)] == [[b"a", b"b"], [b"c"]]
    m = json.loads((d / "manifest.json").read_text())
    assert m["counts"]["records"] == 2 and len(m["appended"]) == 1


def test_a_directory_without_recording_is_used(tmp_path):
    (tmp_path / "notes.txt").write_text("facility log")
    with Recorder(tmp_path) as rec:
        rec.write([b"x"], 1.0)
    assert len(list(read_recording(tmp_path))) == 1


def test_quiet_stream_is_flushed_by_the_timer(tmp_path):
    rec = Recorder(tmp_path / "q", flush_interval_s=0.05)
    try:
        rec.write([b"lonely"], 1.0)
        path = rec.path
        deadline = time.monotonic() + 10.0
        for _ in range(1000):  # bounded: the timer must write it without another write()
            if rec.records_flushed == 1 or time.monotonic() > deadline:
                break
            time.sleep(0.01)
        assert rec.records_flushed == 1
        assert path.stat().st_size > 16
    finally:
        rec.close()


def test_write_after_close_is_refused(tmp_path):
    rec = Recorder(tmp_path / "c")
    rec.close()
    rec.close()  # idempotent
    with pytest.raises(ValueError):
        rec.write([b"x"], 1.0)


# ----------------------------------------------------------------------------- damage


def _record_file(tmp_path, count=30, seed=4):
    msgs = _messages(seed, count)
    with Recorder(tmp_path / "d") as rec:
        for frames, at, reason in msgs:
            rec.write(frames, at, reason)
    (path,) = recording_files(tmp_path / "d")
    return msgs, path


def _record_offsets(path):
    raw = path.read_bytes()
    pos, offsets = 16, []
    while pos < len(raw):
        offsets.append(pos)
        pos += 16 + struct.unpack_from("<Q", raw, pos + 4)[0]
    return offsets


@pytest.mark.parametrize("where", ["body", "length", "mark", "crc"])
def test_corrupt_byte_mid_file_is_detected_and_skipped(tmp_path, where):
    msgs, path = _record_file(tmp_path)
    offsets = _record_offsets(path)
    victim = 13
    shift = {"mark": 1, "length": 6, "crc": 13, "body": 16 + 5}[where]
    raw = bytearray(path.read_bytes())
    raw[offsets[victim] + shift] ^= 0x5A
    path.write_bytes(bytes(raw))
    problems = []
    got = list(read_recording(path.parent, problems))
    assert [r.received_at for r in got] == [at for i, (_, at, _) in enumerate(msgs) if i != victim]
    assert len(problems) == 1 and problems[0].kind == "corrupt"
    assert problems[0].offset == offsets[victim]


def test_torn_tail_at_every_cut_inside_the_last_record(tmp_path):
    msgs, path = _record_file(tmp_path, count=8)
    raw = path.read_bytes()
    last = _record_offsets(path)[-1]
    for cut in range(last + 1, len(raw)):
        path.write_bytes(raw[:cut])
        problems = []
        got = list(read_recording(path.parent, problems))
        assert len(got) == len(msgs) - 1, cut
        assert [p.kind for p in problems] == ["torn_tail"], cut
    path.write_bytes(raw[:last])  # a clean cut at a record boundary is no damage
    problems = []
    assert len(list(read_recording(path.parent, problems))) == len(msgs) - 1 and not problems


def test_damaged_file_header_and_foreign_files(tmp_path):
    msgs, path = _record_file(tmp_path, count=5)
    path.write_bytes(b"NOTOURS!" + path.read_bytes()[8:])
    problems = []
    assert list(read_recording(path.parent, problems)) == []
    assert problems[0].kind == "bad_file"
    path.write_bytes(FILE_MAGIC[:5])
    problems = []
    assert list(read_recording(path.parent, problems)) == []
    assert problems[0].kind == "torn_tail"


def test_corruption_in_an_earlier_file_keeps_later_files(tmp_path):
    msgs = _messages(5, 60)
    with Recorder(tmp_path / "r", roll_bytes=6_000) as rec:
        for frames, at, reason in msgs:
            rec.write(frames, at, reason)
    files = recording_files(tmp_path / "r")
    raw = files[0].read_bytes()
    files[0].write_bytes(raw[:-3])  # the end of a finished file is lost: corrupt, not torn
    problems = []
    got = list(read_recording(tmp_path / "r", problems))
    assert len(got) == len(msgs) - 1
    assert [p.kind for p in problems] == ["corrupt"] and problems[0].file == files[0].name


def test_reading_a_missing_directory_yields_nothing(tmp_path):
    assert list(read_recording(tmp_path / "absent")) == []


# ----------------------------------------------------------------------------- pacing


class _FakeClock:
    def __init__(self):
        self.now = 100.0
        self.sleeps = []

    def clock(self):
        return self.now

    def sleep(self, s):
        self.sleeps.append(s)
        self.now += s


def _records(times):
    from eddyvigil.monitor.recorder import Record

    return [Record(t, [b"x"], None) for t in times]


def test_paced_follows_recorded_time_over_speed():
    fake = _FakeClock()
    out = list(paced(_records([10.0, 10.5, 11.0, 13.0]), 2.0, clock=fake.clock, sleep=fake.sleep))
    assert len(out) == 4
    np.testing.assert_allclose(fake.sleeps, [0.25, 0.25, 1.0])  # half the recorded gaps
    np.testing.assert_allclose(fake.now - 100.0, 1.5)


def test_paced_never_waits_when_the_consumer_is_slow_or_speed_is_none():
    fake = _FakeClock()

    def slow_consumer():
        for r in paced(_records([0.0, 1.0, 2.0]), 1.0, clock=fake.clock, sleep=fake.sleep):
            fake.now += 5.0  # processing takes longer than the recording did
            yield r

    assert len(list(slow_consumer())) == 3 and fake.sleeps == []
    out = list(paced(_records([0.0, 100.0]), None, clock=fake.clock, sleep=fake.sleep))
    assert len(out) == 2 and fake.sleeps == []


def test_paced_ignores_a_clock_set_back_and_rejects_bad_speed():
    fake = _FakeClock()
    list(paced(_records([50.0, 40.0, 41.0]), 1.0, clock=fake.clock, sleep=fake.sleep))
    np.testing.assert_allclose(fake.sleeps, [1.0])
    with pytest.raises(ValueError):
        list(paced(_records([1.0]), 0.0))
