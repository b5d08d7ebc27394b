"""Wire protocol v1 (DESIGN §2): round trips and the classification of bad messages.

The reference for every check is the protocol text of DESIGN §2 and numpy itself (the decoded
samples must equal, bit for bit, the array that was encoded).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import zmq

from eddyvigil.monitor import wire


def _header(frames) -> dict:
    return json.loads(bytes(frames[1]).decode("utf-8"))


def _samples(rng, n=64, columns=("u", "v", "w"), dtype="<f4", with_t=False, with_weight=False):
    cols = list(columns)
    data = rng.normal(10.0, 1.0, size=(n, len(cols)))
    if with_t:
        cols.append("t")
        data = np.column_stack([data, np.cumsum(rng.exponential(1e-4, size=n))])
    if with_weight:
        cols.append("weight")
        data = np.column_stack([data, rng.exponential(1e-5, size=n)])
    return data.astype(dtype), cols


# ----------------------------------------------------------------------------- round trips


@pytest.mark.parametrize("dtype", ["<f4", "<f8"])
@pytest.mark.parametrize("with_t", [False, True])
@pytest.mark.parametrize("with_weight", [False, True])
def test_samples_round_trip(dtype, with_t, with_weight):
    rng = np.random.default_rng(11)
    data, cols = _samples(rng, n=257, dtype=dtype, with_t=with_t, with_weight=with_weight)
    rate = None if with_t else 20_000.0
    point = {"id": "P03", "x": 0.1, "y": 0.012, "z": 0.0, "nu": 1.5e-5}
    frames = wire.encode_samples(
        "probe-a", "s-1", 7, data, cols, rate_hz=rate, t0=1.25, point=point, extra={"gain": 2}
    )
    msg = wire.decode(frames)
    assert isinstance(msg, wire.SamplesMessage), msg
    assert (msg.stream, msg.session, msg.seq) == ("probe-a", "s-1", 7)
    assert msg.columns == tuple(cols) and msg.dtype == dtype and msg.n == 257
    assert msg.rate_hz == rate and msg.t0 == 1.25 and msg.units == "m/s"
    assert msg.point == point and msg.header["gain"] == 2
    # bit-exact against the numpy array that was sent
    np.testing.assert_array_equal(msg.data, data)
    assert msg.data.dtype == np.dtype(dtype) and not msg.data.flags.writeable
    assert msg.velocity_columns == ("u", "v", "w")
    np.testing.assert_array_equal(msg.velocity, data[:, :3])
    if with_t:
        np.testing.assert_array_equal(msg.times, data[:, 3])
    else:
        assert msg.times is None
    if with_weight:
        np.testing.assert_array_equal(msg.weights, data[:, -1])
    else:
        assert msg.weights is None


def test_decode_is_zero_copy_on_the_received_buffer():
    rng = np.random.default_rng(2)
    data, cols = _samples(rng, n=100)
    frames = wire.encode_samples("p", "s", 0, data, cols, rate_hz=1e3, t0=0.0)
    payload = bytes(frames[2])
    msg = wire.decode([frames[0], frames[1], payload])
    assert isinstance(msg, wire.SamplesMessage)
    assert np.shares_memory(msg.data, np.frombuffer(payload, dtype=np.uint8))
    with pytest.raises(ValueError):
        msg.data[0, 0] = 1.0  # read-only, even when the buffer was writable:
    writable = bytearray(payload)
    msg2 = wire.decode([frames[0], frames[1], writable])
    assert isinstance(msg2, wire.SamplesMessage) and not msg2.data.flags.writeable


def test_encode_converts_big_endian_and_non_contiguous_input():
    rng = np.random.default_rng(3)
    base = rng.normal(size=(50, 6))
    data = base[:, ::2].astype(">f8")  # strided and big-endian
    frames = wire.encode_samples("p", "s", 0, data, ["u", "v", "w"], rate_hz=1e3, t0=0.0)
    assert _header(frames)["dtype"] == "<f8"
    msg = wire.decode(frames)
    np.testing.assert_array_equal(msg.data, base[:, ::2])


def test_encode_refuses_what_cannot_be_encoded():
    with pytest.raises(ValueError):
        wire.encode_samples("p", "s", 0, np.zeros((4, 2)), ["u"], rate_hz=1.0, t0=0.0)
    with pytest.raises(ValueError):
        wire.encode_samples("p", "s", 0, np.zeros((4, 1), dtype=np.int32), ["u"], rate_hz=1, t0=0)


def test_one_dimensional_data_for_one_column():
    data = np.arange(5, dtype=np.float64)
    msg = wire.decode(wire.encode_samples("p", "s", 0, data, ["u"], rate_hz=10.0, t0=0.0))
    assert msg.data.shape == (5, 1)
    np.testing.assert_array_equal(msg.velocity[:, 0], data)


def test_point_and_end_round_trip():
    point = {"id": "P07", "x": 0.0, "y": 0.012, "z": 0.0, "note": "near wall"}
    msg = wire.decode(wire.encode_point("probe-b", "abc", 12, point, extra={"traverse": "y"}))
    assert isinstance(msg, wire.PointMessage)
    assert (msg.stream, msg.session, msg.seq, msg.point) == ("probe-b", "abc", 12, point)
    end = wire.decode(wire.encode_end("probe-b", "abc", 13))
    assert isinstance(end, wire.EndMessage) and (end.stream, end.session, end.seq) == (
        "probe-b",
        "abc",
        13,
    )


def test_round_trip_through_real_zmq_frames():
    rng = np.random.default_rng(4)
    data, cols = _samples(rng, n=1000, dtype="<f8", with_t=True)
    frames = wire.encode_samples("probe-a", "s", 3, data, cols, rate_hz=None, t0=0.0)
    ctx = zmq.Context()
    a = ctx.socket(zmq.PAIR)
    b = ctx.socket(zmq.PAIR)
    a.setsockopt(zmq.LINGER, 0)
    b.setsockopt(zmq.LINGER, 0)
    try:
        a.bind("inproc://wire-test")
        b.connect("inproc://wire-test")
        a.send_multipart(frames, copy=False)
        assert b.poll(5000)
        received = b.recv_multipart(copy=False)
        msg = wire.decode(received)
        assert isinstance(msg, wire.SamplesMessage)
        np.testing.assert_array_equal(msg.data, data)
    finally:
        a.close(linger=0)
        b.close(linger=0)
        ctx.term()


def test_unknown_extra_fields_are_ignored():
    frames = wire.encode_end("p", "s", 0, extra={"future": {"nested": [1, 2]}, "v2_hint": "x"})
    assert isinstance(wire.decode(frames), wire.EndMessage)


def test_equal_times_are_accepted_a_step_back_is_not():
    t = np.array([0.0, 1e-3, 1e-3, 2e-3])
    data = np.column_stack([np.ones(4), t])
    ok = wire.decode(wire.encode_samples("p", "s", 0, data, ["u", "t"], rate_hz=None, t0=0.0))
    assert isinstance(ok, wire.SamplesMessage)
    data[3, 1] = 0.5e-3
    bad = wire.decode(wire.encode_samples("p", "s", 1, data, ["u", "t"], rate_hz=None, t0=0.0))
    assert bad.reason == "time_backwards" and bad.seq == 1


@pytest.mark.parametrize("value", [np.nan, np.inf, -np.inf])
@pytest.mark.parametrize("dtype", ["<f4", "<f8"])
def test_non_finite_anywhere_is_rejected(value, dtype):
    rng = np.random.default_rng(5)
    for pos in (0, 77, 3 * 300 - 1):  # first, middle, last element
        data, cols = _samples(rng, n=300, dtype=dtype)
        data.reshape(-1)[pos] = value
        r = wire.decode(wire.encode_samples("p", "s", 9, data, cols, rate_hz=1e3, t0=0.0))
        assert isinstance(r, wire.Rejection) and r.reason == "non_finite"
        assert (r.stream, r.session, r.seq) == ("p", "s", 9)


def test_huge_finite_values_accepted():
    data = np.full((10, 3), np.finfo(np.float64).max)  # a naive float sum would overflow
    msg = wire.decode(wire.encode_samples("p", "s", 0, data, ["u", "v", "w"], rate_hz=1.0, t0=0))
    assert isinstance(msg, wire.SamplesMessage)


def test_size_limit_over_all_frames():
    data = np.zeros((1000, 3), dtype=np.float32)  # 12 000 bytes of samples
    frames = wire.encode_samples("p", "s", 4, data, ["u", "v", "w"], rate_hz=1.0, t0=0.0)
    total = sum(memoryview(f).nbytes for f in frames)
    assert isinstance(wire.decode(frames, max_message_bytes=total), wire.SamplesMessage)
    r = wire.decode(frames, max_message_bytes=total - 1)
    assert r.reason == "too_large"


def test_bool_is_not_an_integer():
    frames = wire.encode_end("p", "s", 0, extra={"seq": True})
    r = wire.decode(frames)
    assert r.reason == "bad_field" and r.seq is None
    data = np.zeros((1, 1))
    frames = wire.encode_samples("p", "s", 0, data, ["u"], rate_hz=1.0, t0=0.0, extra={"n": True})
    assert wire.decode(frames).reason == "bad_field"
    assert wire.decode(wire.encode_end("p", "s", 0, extra={"v": True})).reason == "bad_version"


def test_rejection_reasons_are_unique_strings():
    assert len(set(wire.REJECTION_REASONS)) == len(wire.REJECTION_REASONS)
    assert all(isinstance(r, str) and r for r in wire.REJECTION_REASONS)
