"""Wire protocol v1, rakes and fields (DESIGN §13): ``probes`` on samples, ``probes``/``grid``
on point messages, the ``valid`` column.

References: the layout rules are DESIGN §13 (C order, n x P x len(columns)); numpy's own
reshape of the sent array is the reference for the decoded values. Compatibility: a message
without the new fields must decode as before, which the existing tests/test_wire.py and
tests/test_wire_fuzz.py keep checking unchanged.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from eddyvigil.monitor import wire


def _raw(frames):
    return [bytes(memoryview(f).cast("B")) if not isinstance(f, bytes) else f for f in frames]


def _with_header(frames, **changes):
    header = json.loads(frames[1])
    header.update(changes)
    for k in [k for k, v in changes.items() if v is _DROP]:
        del header[k]
    return [frames[0], json.dumps(header).encode(), *frames[2:]]


_DROP = object()


def test_a_field_message_decodes_to_n_by_p_by_columns():
    rng = np.random.default_rng(1700)
    x = rng.normal(size=(5, 12, 2)).astype("<f4")
    frames = _raw(wire.encode_samples("piv", "s", 0, x, ("u", "v"), rate_hz=15.0, t0=0.0))
    assert json.loads(frames[1])["probes"] == 12
    msg = wire.decode(frames)
    assert isinstance(msg, wire.SamplesMessage) and msg.probes == 12
    np.testing.assert_array_equal(msg.velocity, x)  # C order: numpy's reshape is the reference
    assert msg.valid is None and msg.n == 5 and msg.velocity_columns == ("u", "v")


def test_valid_column_masks_vectors_and_allows_nan_where_invalid():
    rng = np.random.default_rng(1701)
    x = rng.normal(size=(4, 6, 3))
    x[..., 2] = 1.0
    x[1, 3, 2] = 0.0
    x[1, 3, :2] = np.nan  # a rejected vector as PIV software writes it
    cols = ("u", "v", "valid")
    msg = wire.decode(_raw(wire.encode_samples("piv", "s", 0, x, cols, rate_hz=10.0, t0=0.0)))
    assert isinstance(msg, wire.SamplesMessage), msg
    assert msg.velocity_columns == ("u", "v")
    assert msg.valid.sum() == 23 and not msg.valid[1, 3]
    x[1, 3, 2] = 1.0  # the same NaN in a vector marked valid: refused whole
    rej = wire.decode(_raw(wire.encode_samples("piv", "s", 1, x, cols, rate_hz=10.0, t0=0.0)))
    assert isinstance(rej, wire.Rejection) and rej.reason == "non_finite"
    x[1, 3, :2] = 0.0
    x[0, 0, 2] = 0.5  # neither 0 nor 1
    rej = wire.decode(_raw(wire.encode_samples("piv", "s", 2, x, cols, rate_hz=10.0, t0=0.0)))
    assert rej.reason == "bad_field" and "valid" in rej.detail


@pytest.mark.parametrize(
    ("changes", "reason"),
    [
        ({"probes": 0}, "bad_field"),
        ({"probes": 2.0}, "bad_field"),
        ({"probes": True}, "bad_field"),
        ({"probes": None}, "bad_field"),
        ({"probes": 5}, "bad_shape"),  # 3 x 4 x 2 values sent, 3 x 5 x 2 announced
        ({"rate_hz": None}, "bad_field"),  # no t column can stand in with probes
        ({"columns": ["u", "t"]}, "bad_field"),
        ({"columns": ["valid", "weight"]}, "bad_field"),
    ],
)
def test_malformed_field_headers_are_rejected_with_a_reason(changes, reason):
    x = np.ones((3, 4, 2), "<f8")
    frames = _raw(wire.encode_samples("piv", "s", 0, x, ("u", "v"), rate_hz=10.0, t0=0.0))
    rej = wire.decode(_with_header(frames, **changes))
    assert isinstance(rej, wire.Rejection) and rej.reason == reason, rej
    assert rej.seq == 0  # still consumes its seq


def test_a_column_named_valid_without_probes_is_a_velocity_as_before():
    # compatibility: the meaning of "valid" starts with the extension, never before it
    x = np.full((3, 2), 0.5)
    msg = wire.decode(_raw(wire.encode_samples("p", "s", 0, x, ("u", "valid"), rate_hz=1.0,
                                               t0=0.0)))
    assert msg.velocity_columns == ("u", "valid") and msg.probes is None and msg.valid is None


def test_point_messages_with_a_rake_or_a_grid():
    rake = [{"id": f"R{i}", "x": 0.1, "y": 0.01 * i, "z": 0.0} for i in range(8)]
    msg = wire.decode(wire.encode_point("rake", "s", 0, {"id": "P1"}, extra={"probes": rake}))
    assert msg.probes == tuple(rake) and msg.grid is None and msg.n_probes == 8
    grid = {"x0": 0.0, "dx": 0.001, "nx": 128, "y0": -0.05, "dy": 0.001, "ny": 64}
    msg = wire.decode(wire.encode_point("piv", "s", 1, {"id": "F1"}, extra={"grid": grid}))
    assert msg.grid == grid and msg.n_probes == 128 * 64
    assert "grid" not in msg.point  # the summary's point object stays small
    plain = wire.decode(wire.encode_point("p", "s", 2, {"id": "A"}))
    assert plain.probes is None and plain.grid is None and plain.n_probes is None
    for bad in (
        {"probes": []},
        {"probes": [{"x": 0.0}]},
        {"probes": [{"id": "a", "y": float("inf")}]},
        {"grid": {**grid, "nx": 0}},
        {"grid": {**grid, "dx": -1.0}},
        {"grid": [1, 2]},
        {"grid": grid, "probes": rake},
    ):
        rej = wire.decode(_raw(_with_header(wire.encode_point("p", "s", 3, {"id": "A"}), **bad)))
        assert isinstance(rej, wire.Rejection) and rej.reason == "bad_field", (bad, rej)
