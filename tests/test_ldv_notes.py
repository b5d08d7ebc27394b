"""What the dashboard and the terminal say about randomly sampled points, from a real pipeline
run on the simulator's laser-Doppler scenario (known truth: 1000 arrivals/s, T_int 4 ms, so
about 4 samples per T_int, below the about-10 that arrival weighting and slotting need:
Barnett & Bentley 1974 via REFERENCES §9; Poisson arrivals, so no dead time)."""

from __future__ import annotations

import io

import numpy as np

from eddyvigil.monitor.dashboard.views import health_html, random_sampling_html
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.random_sampling import random_sampling_notes, random_sampling_status
from eddyvigil.monitor.watch import status_line
from eddyvigil.simulator.scenario import load_scenario


def _lda_pipeline(seconds=5, weights=True):
    sc = load_scenario("lda")
    gen = sc.make_generator(sc.points[0], 3)
    p = Pipeline(summary=io.StringIO(), weighting="arrival")
    p.begin_point("lda-1", {"id": "M1"})
    for _ in range(seconds):
        rows = gen.next_block(20_000)
        w = rows[:, 3] if weights else None
        p.feed("lda-1", rows[:, :2], columns=("u", "v"), times=rows[:, 2], weights=w)
    return p


def test_notes_say_weighting_low_rate_dead_time_and_no_spectrum():
    p = _lda_pipeline()
    view = p.publish().streams["lda-1"]
    fields = view.random_sampling
    assert fields["weighting"] == "transit"
    notes = random_sampling_notes(fields)
    text = " ".join(t for t, _ in notes)
    flagged = [t for t, f in notes if f]
    assert "transit-time weighting" in text
    assert any("fewer than about 10 samples per T_int" in t for t in flagged)
    assert "dead-time check passed" in text and not any("dead time" in t for t in flagged)
    assert "no spectrum is computed for random sampling" in text
    page = health_html(p.snapshot)
    assert "! lda-1: data rate" in page and "no spectrum is computed" in page
    line = status_line(p.snapshot)
    assert random_sampling_status(fields) in line
    assert "samples/T_int: too few (< 10)" in line and "dead time ok" in line
    p.close()


def test_arrival_weighting_and_uniform_streams():
    p = _lda_pipeline(seconds=2, weights=False)
    fields = p.publish().streams["lda-1"].random_sampling
    assert fields["weighting"] == "arrival"
    assert "arrival-time weighting" in random_sampling_notes(fields)[0][0]
    p.close()
    # a uniformly sampled stream carries no random-sampling notes
    q = Pipeline(summary=io.StringIO())
    q.begin_point("probe", {"id": "A"})
    q.feed("probe", np.random.default_rng(1).normal(size=(4096, 3)) + 5.0, rate_hz=10_000.0)
    snap = q.publish()
    assert snap.streams["probe"].random_sampling is None and random_sampling_html(snap) == ""
    assert "LDV" not in status_line(snap)
    q.close()
