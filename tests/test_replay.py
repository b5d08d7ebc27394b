"""``eddyvigil replay``: speed parsing, refusals, re-publishing a recording to another monitor."""

from __future__ import annotations

import argparse
import json

import numpy as np
import pytest
from conftest import StreamWriter, tcp_endpoint

from eddyvigil.monitor.recorder import Recorder
from eddyvigil.monitor.replay import parse_speed
from eddyvigil.monitor.watch import EXIT_NO_RECORDING

pytestmark = pytest.mark.integration  # real sockets or child processes


def test_parse_speed():
    assert parse_speed("max") is None and parse_speed("MAX") is None
    assert parse_speed("1") == 1.0 and parse_speed("12.5") == 12.5
    for bad in ("0", "-2", "fast", "inf", "nan"):
        with pytest.raises(argparse.ArgumentTypeError):
            parse_speed(bad)


def test_missing_recording_is_refused(procs, tmp_path):
    p = procs.eddyvigil("replay", str(tmp_path / "nothing"), "--no-dashboard", name="r1")
    assert procs.wait(p) == EXIT_NO_RECORDING
    (tmp_path / "empty").mkdir()
    p = procs.eddyvigil("replay", str(tmp_path / "empty"), "--no-dashboard", name="r2")
    assert procs.wait(p) == EXIT_NO_RECORDING
    assert "no recording" in procs.output(p)[1]


def test_paced_replay_and_republished_replay_match_the_direct_one(procs, tmp_path):
    w = StreamWriter(rate_hz=5000.0)
    rng = np.random.default_rng(60)
    rec = Recorder(tmp_path / "rec")
    messages = [w.point("E1")]
    messages += [w.samples((4.0 + rng.standard_normal((1000, 3))).astype("<f4")) for _ in range(30)]
    messages.append(w.malformed("non_finite", np.ones((10, 3))))
    messages.append(w.end())
    for i, m in enumerate(messages):
        rec.write(m, 1000.0 + 0.01 * i, rejected_reason=None)
    rec.close()

    direct = procs.eddyvigil(
        "replay",
        str(tmp_path / "rec"),
        "--no-dashboard",
        "--quiet",
        "--summary",
        str(tmp_path / "direct.jsonl"),
        name="direct",
    )
    assert procs.wait(direct) == 0, procs.output(direct)[1]
    paced = procs.eddyvigil(
        "replay",
        str(tmp_path / "rec"),
        "--speed",
        "20",
        "--no-dashboard",
        "--quiet",
        "--summary",
        str(tmp_path / "paced.jsonl"),
        name="paced",
    )
    assert procs.wait(paced) == 0, procs.output(paced)[1]
    assert (tmp_path / "paced.jsonl").read_text() == (tmp_path / "direct.jsonl").read_text()

    ep = tcp_endpoint()
    watch = procs.eddyvigil(
        "watch",
        "--connect",
        ep,
        "--socket",
        "pull",
        "--no-dashboard",
        "--quiet",
        "--summary",
        str(tmp_path / "watched.jsonl"),
        name="watch",
    )
    pub = procs.eddyvigil(
        "replay",
        str(tmp_path / "rec"),
        "--publish",
        ep,
        "--publish-socket",
        "push",
        "--quiet",
        name="pub",
    )
    assert procs.wait(watch, timeout=60) == 0, procs.output(watch)[1]
    assert procs.wait(pub, timeout=30) == 0, procs.output(pub)[1]
    assert (tmp_path / "watched.jsonl").read_text() == (tmp_path / "direct.jsonl").read_text()
    point = json.loads((tmp_path / "direct.jsonl").read_text().splitlines()[0])
    assert point["rejected"]["non_finite"] == 1 and point["samples"] == 30_000
