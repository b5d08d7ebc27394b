"""A recording keeps the raw frames; `replay --quality` re-runs it with either policy.

Reference: the spikes injected at known rows (their count) and the recorded samples themselves
(read back unchanged); policies as stated in README, Signal quality.
"""

from __future__ import annotations

import json
import math

import numpy as np
from conftest import StreamWriter
from processes import turbulence

from eddyvigil.monitor import wire
from eddyvigil.monitor.recorder import Recorder, read_recording


def test_replay_with_either_policy_from_one_raw_recording(procs, tmp_path):
    rng = np.random.default_rng(31)
    x = turbulence(rng, 40_000, math.exp(-1.0 / 10.0))
    rows = rng.choice(np.arange(10, x.shape[0] - 10, 11), 30, replace=False)
    x[rows, 0] += 8.0
    data = x.astype("<f4")
    w = StreamWriter(rate_hz=4000.0)
    rec = Recorder(tmp_path / "rec")
    messages = [w.point("Q1")]
    messages += [w.samples(data[i : i + 2000]) for i in range(0, data.shape[0], 2000)]
    messages.append(w.end())
    for i, m in enumerate(messages):
        rec.write(m, 1000.0 + 0.01 * i, rejected_reason=None)
    rec.close()

    lines = {}
    for policy in ("flag", "exclude"):
        out = tmp_path / f"{policy}.jsonl"
        p = procs.eddyvigil(
            "replay", str(tmp_path / "rec"), "--no-dashboard", "--quiet",
            "--quality", policy, "--summary", str(out), name=policy,
        )
        assert procs.wait(p) == 0, procs.output(p)[1]
        lines[policy] = json.loads(out.read_text().splitlines()[0])
    flag, excl = lines["flag"]["quality"], lines["exclude"]["quality"]
    assert flag["policy"] == "flag" and excl["policy"] == "exclude"
    assert flag["u"]["spikes"] == excl["u"]["spikes"] >= 30
    assert flag["u"]["replaced"] == 0 and excl["u"]["replaced"] == excl["u"]["spikes"]
    uu_flag = next(e for e in lines["flag"]["statistics"] if e["name"] == "uu")["value"]
    uu_excl = next(e for e in lines["exclude"]["statistics"] if e["name"] == "uu")["value"]
    assert uu_excl < uu_flag  # the spikes inflate the variance only where they stay in
    # the recording still holds the raw samples, spikes included
    got = []
    for r in read_recording(tmp_path / "rec"):
        msg = wire.decode(r.frames, 2**28)
        if isinstance(msg, wire.SamplesMessage):
            got.append(np.asarray(msg.velocity))
    np.testing.assert_array_equal(np.concatenate(got), data)
