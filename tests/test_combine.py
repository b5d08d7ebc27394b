"""Saved point states and ``eddyvigil combine``: exact round trips and exact merges.

References: the merge of co-moments is Pébay 2008 (SAND2008-6212) / Chan, Golub & LeVeque
1979 (REFERENCES §4), checked against numpy over the concatenated samples; everything else is
checked bit for bit against the in-memory accumulators (no outside value needed: a saved state
must continue exactly as the live one would).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import StreamWriter
from processes import turbulence

from eddyvigil.monitor import cli
from eddyvigil.monitor.exitcodes import ExitCode
from eddyvigil.monitor.combine import (
    CombineError,
    combine_points,
    load_state,
    points_of_recording,
    save_state,
)
from eddyvigil.monitor.recorder import Recorder
from eddyvigil.stats.point import PointStatistics
from eddyvigil.stats.targets import Targets

COLUMNS = ("u", "v", "w")


def _point(x, **kw):
    return PointStatistics(COLUMNS, rate_hz=2000.0, **kw).update(x)


def _fed(blocks):
    ps = PointStatistics(COLUMNS, rate_hz=2000.0)
    for b in blocks:
        ps.update(b)
    return ps


def test_save_load_update_is_bit_for_bit(tmp_path):
    rng = np.random.default_rng(41)
    x = turbulence(rng, 60_000, 0.95)
    targets = Targets.from_dict({"confidence": 0.9, "targets": {"U": {"absolute": 0.05}}})
    live = _point(x[:25_003], targets=targets)
    path = save_state(tmp_path / "a.npz", live, {"id": "A", "x": 0.1})
    loaded, point = load_state(path)
    assert point == {"id": "A", "x": 0.1}
    assert loaded == live and loaded.targets == targets and loaded.confidence == 0.9
    for a, b in ((0, 10_000), (10_000, 10_001), (10_001, 34_997)):
        live.update(x[25_003 + a : 25_003 + b])
        loaded.update(x[25_003 + a : 25_003 + b])
    assert loaded == live
    # every value, error, state and verdict; repr() is exact for floats and, unlike ==, holds
    # for the NaN of a withheld interval
    assert repr(loaded.snapshot()) == repr(live.snapshot())


def test_save_load_of_an_empty_point(tmp_path):
    empty = PointStatistics(("u",), rate_hz=None)
    loaded, point = load_state(save_state(tmp_path / "e.npz", empty))
    assert point is None and loaded == empty and loaded.blocking.ref is None
    x = np.random.default_rng(2).normal(size=(100, 1))
    assert loaded.update(x, duration_s=0.5) == empty.update(x, duration_s=0.5)


def test_unreadable_or_foreign_states_are_refused_with_a_reason(tmp_path):
    junk = tmp_path / "junk.npz"
    junk.write_bytes(b"not a zip")
    with pytest.raises(CombineError, match="cannot read"):
        load_state(junk)
    other = tmp_path / "other.npz"
    np.savez(other, a=np.zeros(3))
    with pytest.raises(CombineError, match="not an eddyvigil point state"):
        load_state(other)
    ps = _point(np.random.default_rng(3).normal(size=(500, 3)))
    path = save_state(tmp_path / "v.npz", ps)
    with np.load(path) as z:
        arrays = {k: z[k] for k in z.files}
    meta = json.loads(str(arrays["meta.json"]))
    meta["version"] = 99
    arrays["meta.json"] = np.array(json.dumps(meta))
    np.savez(tmp_path / "v99.npz", **arrays)
    with pytest.raises(CombineError, match="version 99"):
        load_state(tmp_path / "v99.npz")


def test_combine_of_two_saved_halves_equals_the_merged_accumulator(tmp_path):
    rng = np.random.default_rng(42)
    a = _point(turbulence(rng, 30_000, 0.9))
    b = _point(turbulence(rng, 21_000, 0.9))
    save_state(tmp_path / "a.npz", a, {"id": "P1"})
    save_state(tmp_path / "b.npz", b, {"id": "P1"})
    out = tmp_path / "combined.jsonl"
    code = cli.main(
        [
            "combine",
            str(tmp_path / "a.npz"),
            str(tmp_path / "b.npz"),
            "--summary",
            str(out),
            "--save",
            str(tmp_path / "merged"),
        ]
    )
    assert code == 0
    (line,) = [json.loads(t) for t in out.read_text().splitlines()]
    merged = a.merge(b)
    assert line["kind"] == "combined" and line["parts"] == 2 and line["point"] == {"id": "P1"}
    assert line["samples"] == 51_000
    want = {e.name: e for e in merged.snapshot().estimates}
    for entry in line["statistics"]:
        e = want[entry["name"]]
        assert entry["value"] == (e.value if np.isfinite(e.value) else None)
        assert entry["stderr"] == (e.stderr if np.isfinite(e.stderr) else None)
    again, point = load_state(tmp_path / "merged" / "point-P1.npz")
    assert again == merged and point == {"id": "P1"}


def test_combined_values_equal_one_pass_over_the_concatenation():
    # repeats of a point: the values are those of numpy over all samples (Pébay 2008)
    rng = np.random.default_rng(43)
    parts = [turbulence(rng, n, 0.8) for n in (9_000, 14_001, 5_500)]
    got = combine_points([({"id": "Q"}, _point(x)) for x in parts])["Q"]
    assert got[2] == 3
    snap = got[1].snapshot()
    allx = np.concatenate(parts)
    cov = np.cov(allx.T, bias=True)
    np.testing.assert_allclose(snap.estimate("U").value, allx[:, 0].mean(), rtol=1e-12)
    np.testing.assert_allclose(snap.estimate("uv").value, cov[0, 1], rtol=1e-9)
    np.testing.assert_allclose(snap.estimate("k").value, 0.5 * np.trace(cov), rtol=1e-10)


def test_parts_that_cannot_merge_are_refused():
    a = PointStatistics(("u", "v"), 1000.0).update(np.ones((10, 2)))
    b = PointStatistics(("u", "v"), 500.0).update(np.ones((10, 2)))
    with pytest.raises(CombineError, match="different rates"):
        combine_points([({"id": "A"}, a), ({"id": "A"}, b)])


def _record(directory, blocks_by_point, seed):
    w = StreamWriter(rate_hz=2000.0, session=f"s{seed}")
    t = 0.0
    with Recorder(directory) as rec:
        for pid, blocks in blocks_by_point.items():
            rec.write(w.point(pid), t)
            for b in blocks:
                t += 0.01
                rec.write(w.samples(b), t)
        rec.write(w.end(), t + 0.01)


def test_combine_recordings_of_repeated_points(tmp_path):
    rng = np.random.default_rng(44)
    data = {
        run: {p: [turbulence(rng, 4_000, 0.9) for _ in range(3)] for p in ("A", "B")}
        for run in (1, 2)
    }
    for run in (1, 2):
        _record(tmp_path / f"run{run}", data[run], run)
    found = points_of_recording(tmp_path / "run1")
    assert [p["id"] for p, _ in found] == ["A", "B"]
    want_a = _fed(data[1]["A"])
    assert repr(found[0][1].snapshot()) == repr(want_a.snapshot())  # the same path as a replay
    out = tmp_path / "c.jsonl"
    args = ["combine", str(tmp_path / "run1"), str(tmp_path / "run2"), "--point", "A"]
    assert cli.main([*args, "--summary", str(out)]) == 0
    (line,) = [json.loads(t) for t in out.read_text().splitlines()]
    assert line["parts"] == 2 and line["samples"] == 24_000
    both = want_a.merge(_fed(data[2]["A"]))
    assert line["statistics"][0]["value"] == both.snapshot().estimate("U").value


def test_combine_reports_bad_inputs_with_exit_codes(tmp_path, capsys):
    junk = tmp_path / "junk.npz"
    junk.write_bytes(b"PK")
    assert cli.main(["combine", str(junk)]) == ExitCode.CANNOT_COMBINE
    assert "cannot read" in capsys.readouterr().err
    assert cli.main(["combine", str(tmp_path / "missing.npz")]) == 2
    (tmp_path / "empty").mkdir()
    assert cli.main(["combine", str(tmp_path / "empty")]) == 7
