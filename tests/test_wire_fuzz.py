"""Bad input never crashes the decoder: a generated corpus of malformed messages, one family per
rejection reason, each classified under the expected reason; and hypothesis-fuzzed frames (random
bytes, random JSON, mutated valid messages) that must decode to a message or a Rejection.

The expected reason of every corpus entry follows from the rules of DESIGN §2.
"""

from __future__ import annotations

import json
from collections import Counter

import numpy as np
import pytest
import zmq
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from eddyvigil.monitor import wire

PER_REASON = 160  # x 13 reasons = 2080 malformed messages


def _frames(header: dict, payload=None, topic=None) -> list:
    t = (topic if topic is not None else str(header.get("stream", "p"))).encode("utf-8")
    h = json.dumps(header).encode("utf-8")  # allow_nan: NaN/Infinity reach the decoder on purpose
    return [t, h] if payload is None else [t, h, payload]


def _valid_samples(rng, *, t_col=False, w_col=False):
    n = int(rng.integers(1, 200))
    dtype = str(rng.choice(["<f4", "<f8"]))
    cols = ["u", "v", "w"][: int(rng.integers(1, 4))]
    data = rng.normal(5.0, 1.0, size=(n, len(cols)))
    if t_col:
        cols = cols + ["t"]
        data = np.column_stack([data, np.cumsum(rng.exponential(1e-3, size=n))])
    if w_col:
        cols = cols + ["weight"]
        data = np.column_stack([data, rng.exponential(1e-4, size=n)])
    header = {
        "v": 1,
        "kind": "samples",
        "stream": f"probe-{int(rng.integers(0, 9))}",
        "session": "s" + str(int(rng.integers(0, 1000))),
        "seq": int(rng.integers(0, 10**6)),
        "columns": cols,
        "dtype": dtype,
        "n": n,
        "rate_hz": None if t_col else float(rng.uniform(100, 1e5)),
        "t0": float(rng.uniform(0, 100)),
        "units": "m/s",
    }
    return header, np.ascontiguousarray(data.astype(dtype))


def _valid_point(rng):
    return {
        "v": 1,
        "kind": "point",
        "stream": "probe-a",
        "session": "s1",
        "seq": int(rng.integers(0, 1000)),
        "point": {"id": f"P{int(rng.integers(0, 99)):02d}", "x": 0.0, "y": 0.01, "z": 0.0},
    }


def _valid_end(rng):
    return {"v": 1, "kind": "end", "stream": "probe-a", "session": "s1", "seq": 5}


def _any_valid(rng):
    k = int(rng.integers(0, 3))
    if k == 0:
        h, d = _valid_samples(rng, t_col=bool(rng.integers(0, 2)), w_col=bool(rng.integers(0, 2)))
        return h, d
    return (_valid_point(rng) if k == 1 else _valid_end(rng)), None


def _pick(rng, options):
    return options[int(rng.integers(0, len(options)))]


# One generator per reason: rng -> (frames, max_message_bytes)


def gen_too_large(rng):
    h, d = _valid_samples(rng)
    f = _frames(h, d)
    total = sum(memoryview(x).nbytes for x in f)
    return f, int(rng.integers(1, total))


def gen_bad_frames(rng):
    h, d = _any_valid(rng)
    f = _frames(h, d)
    case = int(rng.integers(0, 6))
    if case == 0:
        return f[:1], None  # header missing
    if case == 1:
        return [], None
    if case == 2:  # one frame too many or too few for the kind
        return (f[:2] if d is not None else f + [b"\x00" * 8]), None
    if case == 3:
        return [b"\xff\xfe" + bytes(rng.integers(128, 256, 3, dtype=np.uint8))] + f[1:], None
    if case == 4:
        return [f[0], _pick(rng, [None, 17, "text", 3.5, object()])] + f[2:], None
    return _pick(rng, [None, 42, 1.5]), None  # not a sequence at all


def gen_bad_json(rng):
    h, d = _any_valid(rng)
    f = _frames(h, d)
    raw = f[1]
    case = int(rng.integers(0, 5))
    if case == 0:
        bad = raw[: int(rng.integers(0, len(raw) - 1))]
    elif case == 1:
        bad = b"\xc3\x28" + raw  # invalid UTF-8
    elif case == 2:
        bad = json.dumps(_pick(rng, [[1, 2], "text", 3, None, True])).encode()
    elif case == 3:
        bad = raw.decode().encode("utf-16")
    else:
        bad = b"{'single': 'quotes'}"
    f[1] = bad
    return f, None


def gen_missing_field(rng):
    h, d = _any_valid(rng)
    required = ["v", "kind", "stream", "session", "seq"]
    if h["kind"] == "samples":
        required += ["columns", "dtype", "n", "t0"]
        if "t" not in h["columns"]:
            required.append("rate_hz")
    elif h["kind"] == "point":
        required += ["point", "point.id"]
    name = _pick(rng, required)
    if name == "point.id":
        del h["point"]["id"]
    else:
        del h[name]
    return _frames(h, d, topic="probe-a" if name == "stream" else None), None


def gen_bad_version(rng):
    h, d = _any_valid(rng)
    h["v"] = _pick(rng, [0, 2, 99, -1, "1", 1.0, True, None, [1]])
    return _frames(h, d), None


def gen_bad_kind(rng):
    h, d = _any_valid(rng)
    h["kind"] = _pick(rng, ["sample", "END", "", "points", 3, None, ["end"], {"k": 1}])
    return _frames(h, d), None


def gen_bad_field(rng):
    h, d = _valid_samples(rng)
    topic = None
    case = int(rng.integers(0, 14))
    if case == 0:
        h["seq"] = _pick(rng, [-1, True, 1.5, "3", None])
    elif case == 1:
        h["n"] = _pick(rng, [0, -4, True, float(h["n"]), str(h["n"]), None])
    elif case == 2:
        h["session"] = _pick(rng, ["", 5, None, ["s"]])
    elif case == 3:
        h["stream"], topic = _pick(rng, [5, None, ""]), "probe-a"
    elif case == 4:
        h["columns"] = _pick(rng, [[], ["u", "u"], ["u", 3], [""], "uvw", None, ["t"], ["weight"]])
    elif case == 5:
        h["t0"] = _pick(rng, [float("nan"), float("inf"), "0", True, None])
    elif case == 6:
        h["rate_hz"] = _pick(rng, [0.0, -5.0, float("inf"), float("nan"), "1e3", True, None])
    elif case == 7:
        h["units"] = _pick(rng, [3, None, ["m/s"]])
    elif case == 8:
        h["point"] = _pick(rng, ["P01", 3, ["P01"]])
    elif case == 9:
        h["point"] = {"id": _pick(rng, [3, "", None])}
    elif case == 10:
        h["point"] = {"id": "P1", _pick(rng, ["x", "y", "z"]): _pick(rng, ["0", True, None])}
    elif case == 11:
        h["point"] = {"id": "P1", "nu": _pick(rng, [0.0, -1e-6, "1e-6", float("inf")])}
    elif case == 12:
        h["point"] = {"id": "P1", "note": _pick(rng, [1, None, ["a"]])}
    else:
        p = _valid_point(rng)
        p["point"] = _pick(rng, [None, "P3", 7, {"id": 7}])
        return _frames(p), None
    return _frames(h, d, topic=topic), None


def gen_stream_mismatch(rng):
    h, d = _any_valid(rng)
    return _frames(h, d, topic=h["stream"] + _pick(rng, ["x", "-2", " ", "é"])), None


def gen_bad_dtype(rng):
    h, d = _valid_samples(rng)
    h["dtype"] = _pick(rng, ["<f2", ">f4", ">f8", "float32", "<i4", "f8", "|u1", 4, None, ["<f4"]])
    return _frames(h, d), None


def gen_bad_shape(rng):
    h, d = _valid_samples(rng)
    raw = d.tobytes()
    case = int(rng.integers(0, 4))
    if case == 0:
        raw = raw[: -int(rng.integers(1, min(len(raw), 16) + 1))]
    elif case == 1:
        raw = raw + bytes(int(rng.integers(1, 64)))
    elif case == 2:
        h["n"] = h["n"] + int(rng.integers(1, 10))
    else:  # the bytes of a different dtype
        h["dtype"] = "<f8" if h["dtype"] == "<f4" else "<f4"
    return _frames(h, raw), None


def gen_non_finite(rng):
    h, d = _valid_samples(rng, t_col=bool(rng.integers(0, 2)))
    d.reshape(-1)[int(rng.integers(0, d.size))] = _pick(rng, [np.nan, np.inf, -np.inf])
    return _frames(h, d), None


def gen_time_backwards(rng):
    h, d = _valid_samples(rng, t_col=True)
    if h["n"] < 2:
        h, d = _valid_samples(rng, t_col=True)
    while d.shape[0] < 2:
        h, d = _valid_samples(rng, t_col=True)
    i = int(rng.integers(1, d.shape[0]))
    tc = h["columns"].index("t")
    d[i, tc] = d[i - 1, tc] - abs(float(rng.normal(1e-3, 1e-4))) - 1e-3
    return _frames(h, d), None


def gen_bad_weight(rng):
    h, d = _valid_samples(rng, w_col=True)
    d[int(rng.integers(0, d.shape[0])), -1] = -float(rng.uniform(1e-6, 1.0))
    return _frames(h, d), None


GENERATORS = {
    "too_large": gen_too_large,
    "bad_frames": gen_bad_frames,
    "bad_json": gen_bad_json,
    "missing_field": gen_missing_field,
    "bad_version": gen_bad_version,
    "bad_kind": gen_bad_kind,
    "bad_field": gen_bad_field,
    "stream_mismatch": gen_stream_mismatch,
    "bad_dtype": gen_bad_dtype,
    "bad_shape": gen_bad_shape,
    "non_finite": gen_non_finite,
    "time_backwards": gen_time_backwards,
    "bad_weight": gen_bad_weight,
}


def test_every_reason_has_a_generator():
    assert set(GENERATORS) == set(wire.REJECTION_REASONS)


def test_malformed_corpus_is_classified():
    rng = np.random.default_rng(20240611)
    counts: Counter = Counter()
    for expected, gen in GENERATORS.items():
        for i in range(PER_REASON):
            frames, limit = gen(rng)
            got = wire.decode(
                frames, limit if limit is not None else wire.DEFAULT_MAX_MESSAGE_BYTES
            )
            assert isinstance(got, wire.Rejection), (expected, i, frames)
            assert got.reason == expected, (expected, i, got)
            assert not got.detail.startswith("undecodable"), got  # no unforeseen path taken
            counts[got.reason] += 1
    assert sum(counts.values()) >= 2000
    assert set(counts) == set(wire.REJECTION_REASONS)


def test_rejection_keeps_identity_when_readable():
    rng = np.random.default_rng(8)
    h, d = _valid_samples(rng)
    h["dtype"] = "<i2"
    r = wire.decode(_frames(h, d))
    assert (r.reason, r.stream, r.session, r.seq) == (
        "bad_dtype",
        h["stream"],
        h["session"],
        h["seq"],
    )


def test_valid_corpus_is_accepted():
    rng = np.random.default_rng(99)
    for _ in range(300):
        h, d = _any_valid(rng)
        msg = wire.decode(_frames(h, d))
        assert not isinstance(msg, wire.Rejection), msg


def test_zmq_frame_objects_are_accepted_and_fuzzed():
    rng = np.random.default_rng(5)
    for _ in range(50):
        h, d = _any_valid(rng)
        frames = [zmq.Frame(bytes(memoryview(x).cast("B"))) for x in _frames(h, d)]
        assert not isinstance(wire.decode(frames), wire.Rejection)
        frames, limit = gen_bad_shape(rng)
        got = wire.decode([zmq.Frame(bytes(memoryview(x).cast("B"))) for x in frames])
        assert got.reason == "bad_shape"


# ----------------------------------------------------------------------------- hypothesis

_FUZZ = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _check_outcome(got):
    if isinstance(got, wire.Rejection):
        assert got.reason in wire.REJECTION_REASONS
        assert isinstance(got.detail, str)
        return
    assert isinstance(got, wire.SamplesMessage | wire.PointMessage | wire.EndMessage)
    if isinstance(got, wire.SamplesMessage):
        assert got.data.shape == (got.n, len(got.columns)) and got.n >= 1
        assert bool(np.isfinite(got.data).all())


json_values = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(-(2**70), 2**70)
    | st.floats(allow_nan=True, allow_infinity=True)
    | st.text(max_size=8),
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=4)
    ),
    max_leaves=12,
)

_keys = st.sampled_from(
    ["v", "kind", "stream", "session", "seq", "columns", "dtype", "n", "rate_hz", "t0", "point"]
)


@_FUZZ
@given(st.lists(st.binary(max_size=64), max_size=5))
def test_random_bytes_never_raise(frames):
    _check_outcome(wire.decode(frames))


@_FUZZ
@given(
    topic=st.text(max_size=8),
    header=st.dictionaries(_keys | st.text(max_size=5), json_values, max_size=12),
    payload=st.none() | st.binary(max_size=96),
)
def test_random_json_headers_never_raise(topic, header, payload):
    f = [topic.encode("utf-8"), json.dumps(header).encode("utf-8")]
    if payload is not None:
        f.append(payload)
    _check_outcome(wire.decode(f))


@_FUZZ
@given(
    seed=st.integers(0, 2**32 - 1),
    frame_index=st.integers(0, 2),
    flips=st.lists(st.tuples(st.integers(0, 10**6), st.integers(0, 255)), min_size=1, max_size=4),
    cut=st.none() | st.integers(0, 10**6),
)
def test_mutated_valid_messages_never_raise(seed, frame_index, flips, cut):
    rng = np.random.default_rng(seed)
    h, d = _any_valid(rng)
    frames = [bytearray(memoryview(x).cast("B")) for x in _frames(h, d)]
    target = frames[frame_index % len(frames)]
    for pos, val in flips:
        if target:
            target[pos % len(target)] = val
    if cut is not None and target:
        del target[cut % len(target) :]
    _check_outcome(wire.decode(frames))


@_FUZZ
@given(header=st.dictionaries(_keys, json_values, max_size=11), seq_of_frames=st.integers(0, 4))
def test_mutated_headers_with_valid_skeleton_never_raise(header, seq_of_frames):
    base = {"v": 1, "kind": "samples", "stream": "p", "session": "s", "seq": 0}
    base.update(header)
    f = [b"p", json.dumps(base).encode("utf-8")] + [np.zeros(3, "<f4")] * seq_of_frames
    _check_outcome(wire.decode(f))


@pytest.mark.parametrize("depth", [10, 5000])
def test_deeply_nested_header_is_rejected_not_crashed(depth):
    header = b'{"v":' + b"[" * depth + b"]" * depth + b"}"
    got = wire.decode([b"p", header])
    assert isinstance(got, wire.Rejection) and got.reason in ("bad_json", "bad_version")
