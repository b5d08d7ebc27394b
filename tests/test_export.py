"""``eddyvigil export``: recorded samples into npz / h5 / csv, checked against the numpy arrays
that were sent (numpy ``np.load`` / ``np.loadtxt`` and h5py read the files back)."""

from __future__ import annotations

import argparse
import json

import h5py
import numpy as np
import pytest

from eddyvigil.monitor import export, wire
from eddyvigil.monitor.exitcodes import ExitCode
from eddyvigil.monitor.recorder import Recorder

P1 = {"id": "P01", "x": 0.1, "y": 0.0, "z": 0.0, "nu": 1.5e-5}
P2 = {"id": "P02", "x": 0.1, "y": 0.004, "z": 0.0, "note": "shear layer"}


def _make_recording(path):
    """Two streams (uniform <f4 u,v,w; random-sampled <f8 u,t,weight), points, junk."""
    rng = np.random.default_rng(17)
    sent = {}
    seq = {"probe-a": 0, "lda-1": 0}

    def nxt(s):
        seq[s] += 1
        return seq[s] - 1

    with Recorder(path) as rec:
        at = 1000.0
        early = rng.normal(size=(50, 3)).astype("<f4")  # before any point message
        rec.write(
            wire.encode_samples("probe-a", "s1", nxt("probe-a"), early, "uvw", rate_hz=1e3, t0=0),
            at,
        )
        sent[("probe-a", "none")] = [(early, 0.0)]
        for point in (P1, P2, P1):  # P01 visited twice
            rec.write(wire.encode_point("probe-a", "s1", nxt("probe-a"), point), at)
            rec.write(wire.encode_point("lda-1", "s1", nxt("lda-1"), point), at)
            key = point["id"] if ("probe-a", point["id"]) not in sent else point["id"] + "~2"
            sent[("probe-a", key)] = []
            sent[("lda-1", key)] = []
            t_lda = 0.0
            for j in range(3):
                at += 0.1
                d = rng.normal(8.0, 1.0, size=(int(rng.integers(20, 200)), 3)).astype("<f4")
                t0 = 0.05 * j
                f = wire.encode_samples(
                    "probe-a", "s1", nxt("probe-a"), d, "uvw", rate_hz=1e3, t0=t0
                )
                rec.write(f, at)
                sent[("probe-a", key)].append((d, t0))
                n = int(rng.integers(5, 60))
                t = t_lda + np.cumsum(rng.exponential(1e-3, n))
                t_lda = t[-1]
                lda = np.column_stack([rng.normal(5, 1, n), t, rng.exponential(1e-4, n)])
                f = wire.encode_samples(
                    "lda-1", "s1", nxt("lda-1"), lda, ["u", "t", "weight"], rate_hz=None, t0=t[0]
                )
                rec.write(f, at)
                sent[("lda-1", key)].append((lda, None))
                rec.write([b"probe-a", b"{broken"], at, "bad_json")
        rec.write(wire.encode_end("probe-a", "s1", nxt("probe-a")), at)
    return sent


def _expected(blocks, uniform=True):
    """The columns numpy builds from the sent blocks (reference for every format)."""
    if uniform:
        data = np.concatenate([b for b, _ in blocks])
        t = np.concatenate([t0 + np.arange(len(b)) / 1e3 for b, t0 in blocks])
        return {"u": data[:, 0], "v": data[:, 1], "w": data[:, 2], "t": t}
    data = np.concatenate([b for b, _ in blocks])
    return {"u": data[:, 0], "t": data[:, 1], "weight": data[:, 2]}


def _run(argv):
    parser = argparse.ArgumentParser()
    export.add_arguments(parser)
    return export.run(parser.parse_args(argv))


@pytest.fixture
def recording(tmp_path):
    d = tmp_path / "tunnel-b"
    sent = _make_recording(d)
    (d / "summary.jsonl").write_text('{"v": 1, "kind": "point"}\n{"v": 1, "kind": "run"}\n')
    return d, sent


def test_npz_matches_what_was_sent(recording, capsys):
    d, sent = recording
    out = d.parent / "x.npz"
    assert _run([str(d), "--to", "npz", "--out", str(out)]) == 0
    assert "9 rejected at receipt skipped" in capsys.readouterr().out
    with np.load(out) as z:
        for (stream, pid), blocks in sent.items():
            exp = _expected(blocks, uniform=(stream == "probe-a"))
            for c, a in exp.items():
                got = z[f"{stream}/{pid}/{c}"]
                if c == "t":
                    np.testing.assert_allclose(got, a, rtol=0, atol=1e-12)
                else:
                    np.testing.assert_array_equal(got, a)
                    assert got.dtype == a.dtype
            meta = json.loads(str(z[f"{stream}/{pid}/meta"]))
            assert meta["samples"] == len(exp["u"]) and meta["messages"] == len(blocks)
        assert json.loads(str(z["probe-a/P02/meta"]))["point"] == P2
        assert json.loads(str(z["probe-a/none/meta"]))["point"] is None
        assert [json.loads(s)["kind"] for s in z["summary"]] == ["point", "run"]


def test_h5_groups_datasets_and_attributes(recording):
    d, sent = recording
    out = d.parent / "x.h5"
    assert _run([str(d), "--to", "h5", "--out", str(out)]) == 0
    with h5py.File(out, "r") as f:
        for (stream, pid), blocks in sent.items():
            exp = _expected(blocks, uniform=(stream == "probe-a"))
            g = f[stream][pid]
            for c, a in exp.items():
                np.testing.assert_allclose(g[c][()], a, rtol=0, atol=1e-12 if c == "t" else 0)
        g = f["probe-a"]["P02"]
        assert g.attrs["id"] == "P02" and g.attrs["note"] == "shear layer"
        assert g.attrs["y"] == 0.004 and g.attrs["export_rate_hz"] == 1e3
        assert f["lda-1"]["P01~2"].attrs["nu"] == 1.5e-5
        assert [json.loads(s)["kind"] for s in f["summary"].asstr()[()]] == ["point", "run"]


def test_csv_files_round_trip_exactly(recording):
    d, sent = recording
    out = d.parent / "csv"
    assert _run([str(d), "--to", "csv", "--out", str(out)]) == 0
    index = json.loads((out / "index.json").read_text())
    assert {(e["stream"], e["point_id"]) for e in index} == set(sent)
    for e in index:
        table = np.loadtxt(out / e["file"], delimiter=",", skiprows=1, ndmin=2)
        header = (out / e["file"]).read_text().splitlines()[0].split(",")
        exp = _expected(sent[(e["stream"], e["point_id"])], uniform=e["stream"] == "probe-a")
        assert set(header) == set(exp)
        for c, a in exp.items():
            got = table[:, header.index(c)]
            if c == "t":
                np.testing.assert_allclose(got, a, rtol=0, atol=1e-12)
            else:
                np.testing.assert_array_equal(got.astype(a.dtype), a)
    assert (out / "summary.jsonl").read_text().count("\n") == 2


def test_default_output_beside_the_recording(recording):
    d, _ = recording
    assert _run([str(d), "--to", "npz"]) == 0
    assert (d.parent / "tunnel-b.npz").is_file()


def test_not_a_recording_is_refused(tmp_path, capsys):
    assert _run([str(tmp_path), "--to", "npz"]) == ExitCode.NO_RECORDING  # same code as replay
    assert "holds no recording" in capsys.readouterr().err


def test_damaged_recording_still_exports_what_is_intact(recording, capsys):
    d, sent = recording
    path = sorted(d.glob("frames-*.evr"))[0]
    raw = path.read_bytes()
    path.write_bytes(raw[:-7])  # torn tail: the end message is lost
    out = d.parent / "torn.npz"
    assert _run([str(d), "--to", "npz", "--out", str(out)]) == 0
    assert "torn_tail" in capsys.readouterr().err
    with np.load(out) as z:
        np.testing.assert_array_equal(z["probe-a/P01/u"], _expected(sent[("probe-a", "P01")])["u"])


def test_column_missing_from_some_messages_is_nan_filled(tmp_path):
    d = tmp_path / "r"
    a = np.ones((3, 2), "<f4")
    b = np.full((2, 1), 2.0, "<f4")
    with Recorder(d) as rec:
        rec.write(wire.encode_samples("p", "s", 0, a, ["u", "v"], rate_hz=10.0, t0=0.0), 1.0)
        rec.write(wire.encode_samples("p", "s", 1, b, ["u"], rate_hz=10.0, t0=0.3), 1.0)
    col = export.collect(d)
    (pd,) = col.points
    arrs = pd.arrays()
    np.testing.assert_array_equal(arrs["u"], [1, 1, 1, 2, 2])
    np.testing.assert_array_equal(arrs["v"], [1, 1, 1, np.nan, np.nan])
    np.testing.assert_allclose(arrs["t"], [0.0, 0.1, 0.2, 0.3, 0.4])
