"""Budget intervals against known truth: the simulator's plane wake knows every term
(``simulator/scenario.py``: Pope 2000 thin-shear-layer budget of analytic profiles).

Marked slow: a traverse per seed through the monitor's own pipeline.
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest

from eddyvigil.monitor import Pipeline
from eddyvigil.monitor.budget_cmd import budget_line
from eddyvigil.simulator.scenario import load_scenario, point_truth

#: The built-in wake's flow on a finer, uneven traverse (points closer together near the
#: centre, where the profiles curve most): about four points per half-width.
SCENARIO = """
[scenario]
name = "wake-fine"
rate_hz = 2000.0
spectrum = "vonkarman"
columns = ["u", "v", "w"]
nu = 1.5e-5
[flow]
kind = "plane_wake"
A_shed = 0.0
length_m = 0.02
[traverse]
x = 1.6
y = [-0.12, -0.09, -0.07, -0.055, -0.042, -0.03, -0.02, -0.01, 0.0,
     0.01, 0.02, 0.03, 0.042, 0.055, 0.07, 0.09, 0.12]
"""
SECONDS = 6.0
SEEDS = 8


def _summary(sc, seed) -> list[dict]:
    buf = io.StringIO()
    p = Pipeline(summary=buf)
    n = int(SECONDS * sc.rate_hz)
    for i, pt in enumerate(sc.points):
        p.begin_point("probe-a", pt.wire_point(sc.nu))
        p.feed("probe-a", sc.make_generator(pt, 1000 * seed + i).next_block(n),
               columns=sc.columns, rate_hz=sc.rate_hz)
    p.end("probe-a")
    p.close()
    return [json.loads(t) for t in buf.getvalue().splitlines()]


@pytest.mark.slow
def test_budget_intervals_cover_the_wake_truth(tmp_path):
    path = tmp_path / "wake-fine.toml"
    path.write_text(SCENARIO, encoding="utf-8")
    sc = load_scenario(str(path))
    truth = [point_truth(sc, pt) for pt in sc.points]
    hits = {"production": [], "turbulent_transport": [], "residual": []}
    shown = {name: [] for name in hits}
    for seed in range(SEEDS):
        lines = [x for x in _summary(sc, seed) if x["kind"] == "point"]
        # the known dissipation is given with no error (the spectra's own eps row is dropped:
        # at 2 kHz this flow has no inertial range), so the residual's interval is that of
        # eps - P - T with a known eps
        for line, t in zip(lines, truth, strict=True):
            line["statistics"] = [e for e in line["statistics"] if e["name"] != "eps"]
            line["statistics"].append({"name": "eps", "value": t["budget"]["dissipation"],
                                       "stderr": 0.0})
        b = budget_line("probe-a", lines)
        for name, h in hits.items():
            lo = np.array(b[name]["ci_low"], dtype=float)
            hi = np.array(b[name]["ci_high"], dtype=float)
            true = np.array([t["budget"][name] for t in truth])
            ok = np.isfinite(lo) & np.isfinite(hi)
            shown[name].extend(ok.tolist())
            h.extend(((lo <= true) & (true <= hi))[ok].tolist())
    rates = {k: float(np.mean(v)) for k, v in hits.items()}
    shares = {k: float(np.mean(v)) for k, v in shown.items()}
    print("coverage of the intervals shown", rates, "share shown", shares)
    # an interval shown must hold the truth at the nominal rate
    assert min(rates.values()) >= 0.90, rates
    # Where a point's triple moments have no honest interval (the tail guard, stats/tails.py,
    # withholds them on this skewed flow at 12 000 samples per point), the transport term and
    # the residual get none either: measured 76 % of points shown (8 seeds, 17 points; 57 %
    # with the tail index from the sqrt(N)/2 largest excursions); the
    # production term needs no triple moment and is always shown.
    assert shares["production"] == 1.0, shares
    assert min(shares.values()) >= 0.5, shares
