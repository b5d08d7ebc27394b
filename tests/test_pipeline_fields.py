"""Rakes and fields through the monitor's one path (wire -> pipeline -> summary + npz file).

References: the per-vector file must hold exactly what the field accumulator computes from the
same snapshots (tests/test_field.py checks that accumulator against numpy and coverage); the
values are checked here against numpy over each vector's valid samples (population moments,
DESIGN §4); the line's layout follows DESIGN §13.
"""

from __future__ import annotations

import json

import numpy as np

from eddyvigil.monitor import wire
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.stats.field import FieldStatistics

GRID = {"x0": 0.0, "dx": 0.002, "nx": 6, "y0": -0.01, "dy": 0.002, "ny": 4}
P = 24


def _raw(frames):
    return [bytes(memoryview(f).cast("B")) if not isinstance(f, bytes) else f for f in frames]


def test_a_piv_field_point_writes_its_vectors_beside_the_summary(tmp_path):
    rng = np.random.default_rng(1730)
    blocks = [rng.normal(size=(40, P, 3)) + [5.0, 0.5, 0.0] for _ in range(10)]
    for b in blocks:
        b[..., 2] = (rng.random((40, P)) > 0.05).astype(float)  # the valid column
        b[b[..., 2] == 0, :2] = np.nan
    summary = tmp_path / "run.jsonl"
    pipe = Pipeline(summary=str(summary))
    seq = 0
    pipe.handle_frames(wire.encode_point("piv", "s", seq, {"id": "F1"}, extra={"grid": GRID}))
    for i, b in enumerate(blocks):
        seq += 1
        frames = wire.encode_samples("piv", "s", seq, b, ("u", "v", "valid"), rate_hz=15.0,
                                     t0=i * 40 / 15.0)
        assert pipe.handle_frames(_raw(frames)) is None
    # a one-probe message on a field point, and a field of another size: refused, counted
    seq += 1
    one = wire.encode_samples("piv", "s", seq, np.ones((4, 2)), ("u", "v"), rate_hz=15.0, t0=0)
    assert pipe.handle_frames(_raw(one)) == "layout_changed"
    seq += 1
    other = wire.encode_samples("piv", "s", seq, np.ones((4, 5, 2)), ("u", "v"), rate_hz=15.0,
                                t0=0)
    assert pipe.handle_frames(_raw(other)) == "layout_changed"
    seq += 1
    pipe.handle_frames(wire.encode_end("piv", "s", seq))
    pipe.close()

    point, budget, run = [json.loads(t) for t in summary.read_text().splitlines()]
    assert budget["kind"] == "budget"  # DESIGN §11, after every point
    assert point["samples"] == 400 and point["rejected"]["layout_changed"] == 2
    assert point["statistics"] == [] and run["samples"] == 400
    field = point["field"]
    assert field["probes"] == P and field["format"] == "npz"
    assert 0.0 <= field["converged_fraction"] <= 1.0
    x = np.concatenate(blocks)
    valid = x[..., 2] == 1
    want = FieldStatistics(("u", "v"), P, 15.0).update(x[..., :2], valid).snapshot()
    with np.load(tmp_path / field["file"], allow_pickle=False) as z:
        for name in ("U", "V", "uu", "vv", "uv", "k"):
            for suffix in ("", "_stderr", "_ci_low", "_ci_high"):
                np.testing.assert_array_equal(z[name + suffix], want.arrays()[name + suffix])
        np.testing.assert_array_equal(z["count"], valid.sum(axis=0))
        np.testing.assert_array_equal(z["grid"], [0.0, 0.002, 6, -0.01, 0.002, 4])
        for p in (0, 7, 23):  # numpy over the vector's valid samples
            np.testing.assert_allclose(z["U"][p], x[valid[:, p], p, 0].mean(), rtol=1e-12)
    assert field["converged_fraction"] == want.converged_fraction


def test_a_rake_without_a_summary_file_still_reports_its_fraction():
    rng = np.random.default_rng(1731)
    rake = [{"id": f"R{i}", "x": 0.0, "y": 0.005 * i, "z": 0.0} for i in range(8)]
    lines = []

    class Sink:
        def write(self, text):
            lines.append(text)

        def flush(self):
            pass

    pipe = Pipeline(summary=Sink())
    pipe.handle_frames(wire.encode_point("rake", "s", 0, {"id": "A"}, extra={"probes": rake}))
    x = rng.normal(size=(5000, 8, 2)) + [9.0, 0.0]
    frames = wire.encode_samples("rake", "s", 1, x, ("u", "v"), rate_hz=2000.0, t0=0.0)
    assert pipe.handle_frames(_raw(frames)) is None
    bad = wire.encode_samples("rake", "s", 2, x[:, :7], ("u", "v"), rate_hz=2000.0, t0=2.5)
    assert pipe.handle_frames(_raw(bad)) == "layout_changed"  # 7 probes, 8 announced
    pipe.close()
    point = json.loads(lines[0])
    assert point["field"]["file"] is None and point["field"]["probes"] == 8
    assert point["samples"] == 5000 and point["complete"] is False
