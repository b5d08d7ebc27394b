"""``eddyvigil reprocess``: many recordings, in parallel on Dask, into one summary.

References: a reprocessed point line must equal ``eddyvigil replay`` of its recording bit for
bit (the project's own replay path is the reference: the point of reprocessing is that the
place where the work ran changes nothing). Merged repeats: values as numpy over the
concatenated samples (population moments; Pébay 2008, SAND2008-6212, pairwise co-moment
merge), and exactly the ``combine`` merge of the same parts.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import StreamWriter
from processes import turbulence

from eddyvigil.monitor import cli
from eddyvigil.monitor.combine import combine_points, points_of_recording
from eddyvigil.monitor.exitcodes import ExitCode
from eddyvigil.monitor.recorder import Recorder
from eddyvigil.monitor.summary import dumps_line

RATE = 2000.0


def _record(directory, blocks_by_point, seed, broken: bool = False):
    w = StreamWriter(rate_hz=RATE, session=f"s{seed}")
    t = 0.0
    with Recorder(directory) as rec:
        for pid, blocks in blocks_by_point.items():
            rec.write(w.point(pid), t)
            for b in blocks:
                t += 0.01
                rec.write(w.samples(b), t)
            if broken:  # one malformed message per point: counted, never in a statistic
                rec.write(w.malformed("non_finite", np.ones((10, 3))), t)
        rec.write(w.end(), t + 0.01)


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    """Four recordings; points A and B are measured in every one (repeats)."""
    base = tmp_path_factory.mktemp("campaign")
    rng = np.random.default_rng(170)
    data = {}
    for run in range(4):
        data[run] = {p: [turbulence(rng, 3_000, 0.9) for _ in range(3)] for p in ("A", "B")}
        _record(base / f"run{run}", data[run], run, broken=run == 2)
    return base, data


def _lines(path):
    return [json.loads(t) for t in path.read_text().splitlines()]


@pytest.mark.integration
def test_reprocess_on_a_two_worker_cluster_equals_sequential_replays(campaign, tmp_path):
    pytest.importorskip("dask.distributed")
    base, _ = campaign
    dirs = [str(base / f"run{i}") for i in range(4)]
    want_points, want_runs = [], []
    for i, d in enumerate(dirs):
        out = tmp_path / f"replay{i}.jsonl"
        assert cli.main(["replay", d, "--no-dashboard", "--quiet", "--summary", str(out)]) == 0
        *points, run = out.read_text().splitlines()
        want_points += [(d, p) for p in points]
        want_runs.append(json.loads(run))
    got = tmp_path / "all.jsonl"
    args = ["reprocess", *dirs, "--summary", str(got), "--dask", "local", "--workers", "2"]
    assert cli.main([*args, "--quiet"]) == 0
    *points, run = _lines(got)
    # 8 point lines, each followed by its stream's budget line (DESIGN §11)
    assert len(points) == len(want_points) == 16
    for line, (d, text) in zip(points, want_points, strict=True):
        assert line.pop("recording") == d
        assert dumps_line(line) == text  # bit for bit: every digit of every statistic
    assert run["recordings"] == 4
    for key in ("samples", "messages", "points", "lost"):
        assert run[key] == sum(r[key] for r in want_runs)
    assert run["rejected"]["non_finite"] == 2
    # the sequential path (no --dask) writes the same file
    seq = tmp_path / "seq.jsonl"
    assert cli.main(["reprocess", *dirs, "--summary", str(seq), "--quiet"]) == 0
    assert seq.read_text() == got.read_text()


def test_merged_repeats_equal_one_accumulator_over_all_samples(campaign, tmp_path):
    base, data = campaign
    dirs = [str(base / f"run{i}") for i in range(4)]
    out = tmp_path / "merged.jsonl"
    assert cli.main(["reprocess", *dirs, "--summary", str(out), "--merge-repeats", "--quiet"]) == 0
    *points, run = _lines(out)
    assert [p["point"]["id"] for p in points] == ["A", "B"]
    parts = [pp for d in dirs for pp in points_of_recording(d)]
    want = combine_points(parts)
    for line in points:
        pid = line["point"]["id"]
        assert line["parts"] == 4 and line["sources"] == dirs
        assert line["samples"] == 4 * 9_000
        assert line["rejected"]["non_finite"] == 1
        snap = want[pid][1].snapshot()
        for entry in line["statistics"]:  # exactly the combine merge of the same parts
            est = snap.estimate(entry["name"])
            assert entry["value"] == (None if not np.isfinite(est.value) else est.value)
        x = np.concatenate([b for run in data.values() for b in run[pid]])
        cov = np.cov(x.T, bias=True)  # population moments, numpy as the reference
        stat = {e["name"]: e for e in line["statistics"]}
        np.testing.assert_allclose(stat["U"]["value"], x[:, 0].mean(), rtol=1e-12)
        np.testing.assert_allclose(stat["uv"]["value"], cov[0, 1], rtol=1e-9)
        np.testing.assert_allclose(stat["k"]["value"], 0.5 * np.trace(cov), rtol=1e-10)
    assert run["recordings"] == 4


@pytest.mark.integration
def test_an_unreachable_scheduler_is_an_endpoint_error(campaign, tmp_path, capsys):
    pytest.importorskip("dask.distributed")
    from conftest import free_port

    base, _ = campaign
    args = ["reprocess", str(base / "run0"), "--summary", str(tmp_path / "z.jsonl")]
    code = cli.main([*args, "--dask", f"tcp://127.0.0.1:{free_port()}"])  # nobody listens
    assert code == ExitCode.ENDPOINT
    assert "cannot reach a Dask scheduler" in capsys.readouterr().err
    assert not (tmp_path / "z.jsonl").exists()


def test_reprocess_refusals_have_exit_codes(campaign, tmp_path, capsys, monkeypatch):
    base, _ = campaign
    out = str(tmp_path / "x.jsonl")
    assert cli.main(["reprocess", str(tmp_path / "nope"), "--summary", out]) == 7
    (tmp_path / "empty").mkdir()
    assert cli.main(["reprocess", str(tmp_path / "empty"), "--summary", out]) == 7
    (tmp_path / "x.jsonl").write_text("")
    assert cli.main(["reprocess", str(base / "run0"), "--summary", out]) == 5
    bad = tmp_path / "t.toml"
    bad.write_text("[targets]\nQQ = { relative = 0.1 }\n")
    args = ["reprocess", str(base / "run0"), "--summary", str(tmp_path / "y.jsonl")]
    assert cli.main([*args, "--targets", str(bad)]) == ExitCode.INPUT_FILE
    assert cli.main([*args, "--workers", "0"]) == ExitCode.USAGE
    capsys.readouterr()
    # without dask installed, --dask says how to install it (usage error)
    import builtins

    real_import = builtins.__import__

    def no_dask(name, *a, **kw):
        if name == "dask" or name.startswith("dask."):
            raise ImportError(name)
        return real_import(name, *a, **kw)

    monkeypatch.setattr(builtins, "__import__", no_dask)
    assert cli.main([*args, "--dask", "local"]) == ExitCode.USAGE
    assert "pip install 'eddyvigil[dask]'" in capsys.readouterr().err
