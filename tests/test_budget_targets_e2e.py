"""Budget-driven targets end to end: real ``simulate`` and ``watch`` processes on loopback,
the traverse moved on by the monitor's control socket, the targets file asking for the
production directly. The plane wake's truth is analytic (simulator/scenario.py)."""

from __future__ import annotations

import numpy as np
import pytest
from test_budget_coverage import SCENARIO
from test_budget_targets_coverage import PLAIN
from test_simulator_e2e import _run_pair

from eddyvigil.simulator.scenario import load_scenario, point_truth

pytestmark = pytest.mark.integration  # real sockets or child processes

H = 0.25  # m^2/s^3
#: the first two positions again at the end: measured a second time, on derived targets
REPEAT = "     0.01, 0.02, 0.03, 0.042, 0.055, 0.07, 0.09, 0.12]"


@pytest.mark.slow
def test_watch_stops_a_wake_traverse_on_a_production_tolerance(tmp_path):
    assert REPEAT in SCENARIO
    scenario = tmp_path / "wake-fine.toml"
    scenario.write_text(SCENARIO.replace(REPEAT, REPEAT[:-1] + ", -0.12, -0.09]"),
                        encoding="utf-8")
    sc = load_scenario(str(scenario))
    ys = sorted({pt.y for pt in sc.points})
    targets = tmp_path / "targets.toml"
    plain = "\n".join(f"{k} = {{ relative = {v['relative']} }}" for k, v in PLAIN.items())
    targets.write_text(f"[targets]\n{plain}\n[budget]\nproduction = {{ absolute = {H} }}\n"
                       f"positions = {ys}\n", encoding="utf-8")
    lines, truth = _run_pair(tmp_path, str(scenario), "--speed", "20", "--seed", "3",
                             "--point-seconds", "120", watch_args=("--targets", str(targets)),
                             timeout_s=300.0)
    points = [x for x in lines if x["kind"] == "point"]
    assert len(points) == len(sc.points) == 19
    bases = [p["derived_targets"]["basis"] for p in points]
    assert bases[:2] == [None, None]
    assert all(b == "interpolation of the neighbours" for b in bases[2:17])
    assert bases[17:] == ["earlier measurement of this point"] * 2
    for p in points:
        rows = {r["name"]: r for r in p["statistics"]}
        for d in p["derived_targets"]["statistics"]:
            if d["applied"]:  # the point's statistics were targeted at the derived half-width
                assert rows[d["name"]]["target"] == pytest.approx(d["half_width"], rel=1e-12)
    assert sum(p["converged"] for p in points) >= 17
    # the stream's last budget line: the production within H of the truth (one traverse:
    # 0.99 of points in tests/test_budget_targets_coverage.py, so at most two misses)
    budget = [x for x in lines if x["kind"] == "budget"][-1]
    true = {round(pt.y, 9): point_truth(sc, pt)["budget"]["production"] for pt in sc.points}
    value = np.array(budget["production"]["value"], dtype=float)
    want = np.array([true[round(y, 9)] for y in budget["position"]])
    assert len(value) == 17
    assert np.sum(np.abs(value - want) > H) <= 2, value - want
