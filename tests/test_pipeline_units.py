"""A change of ``units`` within a point is rejected whole (``units_changed``), never mixed in.

Checked through the wire path (``handle_frames``) and the in-process ``feed``: a block in mm/s
inside an m/s point changes no statistic (the summary equals that of the same run without the
block, value for value, and U equals numpy's mean of the m/s samples: the sample mean,
common practice), is counted per point and per run, and the point line names its units.
"""

from __future__ import annotations

import io
import json

import numpy as np
from conftest import StreamWriter

from eddyvigil.monitor import wire
from eddyvigil.monitor.pipeline import PIPELINE_REJECTION_REASONS, Pipeline
from eddyvigil.stats.targets import Targets


def _blocks(seed=7, count=6, n=2000):
    rng = np.random.default_rng(seed)
    return [(np.array([9.0, 0.2, 0.0]) + rng.standard_normal((n, 3))).astype("<f8")
            for _ in range(count)]


def _mm_per_s(w: StreamWriter, block) -> list:
    frames = wire.encode_samples(w.stream, w.session, w._next(), block * 1000.0, ("u", "v", "w"),
                                 rate_hz=w.rate_hz, t0=w.t0, units="mm/s")
    w.t0 += len(block) / w.rate_hz
    return frames


def _lines(sink: io.StringIO) -> list[dict]:
    return [json.loads(t) for t in sink.getvalue().splitlines()]


def _run(messages) -> tuple[list[dict], list]:
    sink = io.StringIO()
    pipe = Pipeline(Targets.defaults(), summary=sink)
    reasons = [pipe.handle_frames(m, 0.0) for m in messages]
    pipe.close()
    return _lines(sink), reasons


def _stats(line):
    return {e["name"]: (e["value"], e["stderr"]) for e in line["statistics"]}


def test_an_mm_per_s_block_inside_an_m_per_s_point_changes_no_statistic():
    blocks = _blocks()
    w = StreamWriter(rate_hz=2000.0)
    with_bad = [w.point("P1", y=0.0)]
    for i, b in enumerate(blocks):
        with_bad.append(w.samples(b))
        if i == 2:
            with_bad.append(_mm_per_s(w, b))
    with_bad.append(w.end())
    w2 = StreamWriter(rate_hz=2000.0)
    clean = [w2.point("P1", y=0.0)] + [w2.samples(b) for b in blocks] + [w2.end()]

    lines, reasons = _run(with_bad)
    ref_lines, _ = _run(clean)
    point, run = lines[0], lines[-1]
    assert "units_changed" in PIPELINE_REJECTION_REASONS
    assert reasons.count("units_changed") == 1
    assert point["rejected"]["units_changed"] == 1 and run["rejected"]["units_changed"] == 1
    assert point["units"] == "m/s" and point["samples"] == ref_lines[0]["samples"]
    assert _stats(point) == _stats(ref_lines[0])
    u = np.concatenate([b[:, 0] for b in blocks])
    np.testing.assert_allclose(_stats(point)["U"][0], u.mean(), rtol=1e-12)


def test_a_point_in_other_units_is_kept_whole_and_says_so():
    """A point that starts in mm/s stays in mm/s: no conversion, its line says which."""
    sink = io.StringIO()
    pipe = Pipeline(Targets.defaults(), summary=sink)
    pipe.begin_point("probe-a", {"id": "P2"})
    blocks = _blocks(seed=8, count=3)
    assert pipe.feed("probe-a", blocks[0] * 1000.0, rate_hz=2000.0, units="mm/s") is None
    assert pipe.feed("probe-a", blocks[1], rate_hz=2000.0) == "units_changed"
    assert pipe.feed("probe-a", blocks[2] * 1000.0, rate_hz=2000.0, units="mm/s") is None
    pipe.end("probe-a")
    pipe.close()
    point = _lines(sink)[0]
    assert point["units"] == "mm/s" and point["rejected"]["units_changed"] == 1
    u = np.concatenate([blocks[0][:, 0], blocks[2][:, 0]]) * 1000.0
    np.testing.assert_allclose(_stats(point)["U"][0], u.mean(), rtol=1e-12)
