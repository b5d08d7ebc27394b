"""Sample faults injected by the simulator (positions in its truth) found by the monitor.

The simulator's publisher runs in process and hands every message to a Pipeline's
``handle_frames`` (the socket path without the socket); the truth record says where each fault
went. Detection bounds as in tests/test_quality.py (Goring & Nikora 2002; Vickers & Mahrt 1997).
"""

from __future__ import annotations

import io
import json
import math

import pytest

from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.transport import Pacer
from eddyvigil.simulator import load_scenario
from eddyvigil.simulator.publisher import Publisher, PublisherOptions

USER_SCENARIO = """
[scenario]
name = "faulty-probe"
description = "An invented flume probe that spikes, drops out, clips and is coarsely digitised"
facility = "Osprey test flume (invented)"
stream = "probe-q"
rate_hz = 2000.0
point_seconds = 40.0
spectrum = "ou"
columns = ["u", "v", "w"]
nu = 1.0e-6

[[points]]
id = "Q1"
x = 0.5
y = 0.0
mean = [0.45, 0.0, 0.0]
stress = [[4.0e-4, 0.0, 0.0], [0.0, 2.5e-4, 0.0], [0.0, 0.0, 2.5e-4]]
tint_s = 0.005

[faults]
spikes = { rate_per_s = 3.0, amplitude_sigma = 8.0 }
dropouts = { rate_per_s = 0.25, duration_s = 0.05 }
clipping = { low = [-10.0, -10.0, -10.0], high = [10.0, 10.0, 0.0368] }  # w: 2.33 sigma, 1 %
quantisation = { step = 0.0005 }
"""


class InProcessPublisher(Publisher):
    """The simulator's publisher, each message handed straight to a pipeline."""

    def __init__(self, scenario, options, pipeline):
        super().__init__(scenario, options)
        self.pipeline = pipeline

    def _send(self, frames) -> None:
        self.pipeline.handle_frames(frames)
        self.sent += 1


def run_scenario(scenario, policy="flag", seed=3):
    buf = io.StringIO()
    pipeline = Pipeline(summary=buf, quality=policy)
    opts = PublisherOptions(endpoint="inproc://unused", speed=math.inf, seed=seed, quiet=True)
    pub = InProcessPublisher(scenario, opts, pipeline)
    pub._pacer = Pacer(None)  # as run() sets it for --speed max
    pub._run_points()
    pipeline.close()
    lines = [json.loads(x) for x in buf.getvalue().splitlines()]
    return [x for x in lines if x["kind"] == "point"], pub.truth


def test_user_scenario_spikes_dropouts_clipping_and_step_match_the_truth(tmp_path):
    path = tmp_path / "faulty.toml"
    path.write_text(USER_SCENARIO)
    (line,), truth = run_scenario(load_scenario(str(path)))
    faults = truth["points"][0]["faults"]
    q = line["quality"]
    rows = truth["points"][0]["rows"]
    windows = math.ceil(rows / 4096)
    for j, c in enumerate("uv"):  # w is clipped: a spike there may be cut off by the rail
        injected = sum(1 for s in faults["spikes"] if s["component"] == j)
        assert injected > 20
        # all but 5 % found; false flags: at most 1 per window expected (test_quality), 3 allowed
        assert 0.95 * injected <= q[c]["spikes"] <= injected + 3 * windows, (c, injected, q[c])
    held = sum(d["stop_row"] - d["first_row"] for d in faults["dropouts"])
    assert held > 0
    for c in "uvw":
        # every held copy, and at most an equal neighbour per event beyond them
        assert held <= q[c]["dropout_samples"] <= held + 2 * len(faults["dropouts"]) + 5, q[c]
        assert q[c]["quantisation_step"] == pytest.approx(5e-4, rel=0.05)
    # clipped rows of the truth are rows where any component hit a rail: only w has one here
    assert q["w"]["clipped_samples"] == pytest.approx(faults["clipped_rows"], rel=0.02)
    assert q["u"]["clipped_samples"] == 0
    assert line["converged"] is False and "w" in line["suspect"]  # 1 % clipped > 0.1 %


def test_glitches_scenario_spikes_and_dropouts_are_reported():
    sc = load_scenario("glitches")
    lines, truth = run_scenario(sc)
    for line in lines:
        assert line["quality"]["policy"] == "flag"
    complete = [p for p in truth["points"] if p["faults"]["spikes"]]
    assert complete
    total_found = sum(line["quality"][c]["spikes"] for line in lines for c in "uvw")
    total_injected = sum(len(p["faults"]["spikes"]) for p in truth["points"])
    assert total_found >= 0.95 * total_injected
    assert all(line["quality"]["u"]["quantisation_step"] is not None for line in lines)
