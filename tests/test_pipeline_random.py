"""The pipeline's random-sampling path on the simulator's laser-Doppler scenario (known truth).

The scenario's arrivals come at a rate ∝ |u| with residence times ∝ 1/|u| (simulator
RandomSampler); its truth is the time-averaged statistics of the underlying signal, which
residence-time weighting recovers (Buchhave, George & Lumley 1979, from memory) and plain
averaging overshoots by about sigma_u^2 / U (McLaughlin & Tiederman 1973, from memory).
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest

from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.simulator.scenario import load_scenario, point_truth


def _rows(seed=11, seconds=30.0):
    sc = load_scenario("lda")
    point = sc.points[0]
    gen = sc.make_generator(point, seed)
    rows = np.concatenate([gen.next_block(20_000) for _ in range(int(seconds))])
    return sc, point, rows


def _run(rows, weighting, with_weights, parts=30):
    buf = io.StringIO()
    p = Pipeline(summary=buf, weighting=weighting)
    p.begin_point("lda-1", {"id": "M1"})
    for part in np.array_split(rows, parts):
        w = part[:, 3] if with_weights else None
        assert p.feed("lda-1", part[:, :2], columns=("u", "v"), times=part[:, 2], weights=w) is None
    p.close()
    line = json.loads(buf.getvalue().splitlines()[0])
    return line, {s["name"]: s for s in line["statistics"]}


def test_lda_scenario_transit_weighting_recovers_the_truth():
    sc, point, rows = _rows()
    truth = point_truth(sc, point)["statistics"]
    line, st = _run(rows, "arrival", with_weights=True)
    assert line["weighting"] == "transit"
    rs = line["random_sampling"]
    assert rs["data_rate_hz"] == pytest.approx(1000.0, rel=0.05)
    # about 4 samples per T_int = 4 ms at 1000/s: said plainly
    assert any("data rate too low" in n for n in rs["notes"])
    assert rs["dead_time"]["suspected"] is False
    for name in ("U", "V", "uu", "vv", "uv"):
        s = st[name]
        assert abs(s["value"] - truth[name]) < 4 * s["stderr"], name
    # T_int and L with their errors (slotted ACF, jackknife over time groups; the truth is the
    # generator's exact integral time, L = U T_int by Taylor's hypothesis)
    for name in ("Tint_u", "Tint_v", "L_u"):  # the truth names L of u only
        s = st[name]
        assert s["stderr"] is not None and s["ci_low"] < s["value"] < s["ci_high"], name
        assert abs(s["value"] - truth[name]) < 4 * s["stderr"], name
    # arithmetic averages of the same rows lean to high speeds by about sigma_u^2 / U
    _, plain = _run(rows, "none", with_weights=False)
    bias = truth["uu"] / truth["U"]
    assert plain["U"]["value"] - truth["U"] == pytest.approx(bias, abs=4 * plain["U"]["stderr"])
    assert plain["U"]["value"] - st["U"]["value"] > 0.5 * bias


def test_weight_column_that_vanishes_within_a_point_is_rejected():
    _, _, rows = _rows(seconds=2.0)
    p = Pipeline(summary=io.StringIO())
    p.begin_point("lda-1", {"id": "M1"})
    a, b = rows[:1000], rows[1000:2000]
    assert p.feed("lda-1", a[:, :2], columns=("u", "v"), times=a[:, 2], weights=a[:, 3]) is None
    assert p.feed("lda-1", b[:, :2], columns=("u", "v"), times=b[:, 2]) == "layout_changed"
    bad = -b[:, 3]
    assert p.feed("lda-1", b[:, :2], columns=("u", "v"), times=b[:, 2], weights=bad) == "bad_weight"
    p.close()


def test_wire_frames_with_t_and_weight_columns_take_the_transit_path():
    # the socket/replay path: handle_frames decodes the t and weight columns (DESIGN §2, §10)
    from eddyvigil.monitor import wire

    _, _, rows = _rows(seconds=3.0)
    buf = io.StringIO()
    p = Pipeline(summary=buf)
    seq = 0
    assert p.handle_frames(wire.encode_point("lda-1", "s", seq, {"id": "M1"})) is None
    for part in np.array_split(rows, 6):
        seq += 1
        frames = wire.encode_samples(
            "lda-1", "s", seq, part, ("u", "v", "t", "weight"), rate_hz=None, t0=part[0, 2]
        )
        assert p.handle_frames(frames) is None
    p.close()
    line = json.loads(buf.getvalue().splitlines()[0])
    assert line["weighting"] == "transit" and line["samples"] == rows.shape[0]
    u = {s["name"]: s["value"] for s in line["statistics"]}["U"]
    assert u == pytest.approx(np.average(rows[:, 0], weights=rows[:, 3]), rel=1e-12)
