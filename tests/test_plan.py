"""The time planner: arithmetic against the closed form, the command, and a plan run through
the simulator (processes with known T_int and variances)."""

from __future__ import annotations

import io
import json
import tomllib

import numpy as np
import pytest

from eddyvigil.monitor import Pipeline, cli
from eddyvigil.monitor.plan_cmd import make_plan, plan_toml
from eddyvigil.simulator.scenario import load_scenario
from eddyvigil.stats.planner import predicted_ratio, seconds_to_target, share_time


def test_share_time_matches_the_closed_form():
    """Without floors the common ratio is sqrt(sum a / H) and T_j = a_j / r^2 (Lagrange
    optimum of min max_j sqrt(a_j / T_j) with sum T_j = H; derivation in stats/planner.py)."""
    a = np.array([40.0, 250.0, 90.0, 10.0])
    times, r = share_time(a, 300.0)
    assert r == pytest.approx(np.sqrt(a.sum() / 300.0), rel=1e-9)
    np.testing.assert_allclose(times, a / r**2, rtol=1e-9)
    assert times.sum() == pytest.approx(300.0)
    # equal time per point has a worse worst ratio
    assert r < predicted_ratio(a, np.full(4, 75.0)).max()


def test_share_time_with_floors_and_not_enough_time():
    a = np.array([1.0, 100.0])
    times, r = share_time(a, 60.0, floor_s=[20.0, 0.0])
    assert times[0] == pytest.approx(20.0) and times.sum() == pytest.approx(60.0)
    assert r == pytest.approx(np.sqrt(100.0 / 40.0), rel=1e-9)
    with pytest.raises(ValueError):
        share_time(a, 10.0, floor_s=[20.0, 0.0])
    # sqrt law of the half-width (REFERENCES §1: Var ~ 1/T)
    assert seconds_to_target(0.3, 10.0, 0.1) == pytest.approx(90.0)


def _line(pid, y, hw, duration, target, tint=0.01, converged=False):
    return {"v": 1, "kind": "point", "stream": "s",
            "point": {"id": pid, "x": 0.0, "y": y, "z": 0.0},
            "duration_s": duration, "converged": converged, "complete": True,
            "statistics": [{"name": "U", "value": 5.0, "ci_low": 5.0 - hw, "ci_high": 5.0 + hw,
                            "target": target},
                           {"name": "Tint_u", "value": tint}]}


def test_plan_interpolates_unmeasured_points_and_writes_toml():
    lines = [_line("A", 0.0, 0.2, 10.0, 0.1, converged=True),  # needs 40 s
             _line("B", 0.02, 0.2, 10.0, 0.05)]  # needs 160 s, has 10
    plan = make_plan(lines, 0.1, [{"id": "B", "y": 0.02}, {"id": "C", "y": 0.01}], "s")
    rows = {r["id"]: r for r in plan["points"]}
    assert set(rows) == {"B", "C"}
    assert rows["C"]["need_s"] == pytest.approx(100.0)  # halfway between 40 and 160
    assert rows["B"]["seconds"] + rows["C"]["seconds"] == pytest.approx(360.0)
    assert rows["B"]["predicted_ratio"] == pytest.approx(rows["C"]["predicted_ratio"])
    assert plan["enough"] and plan["seconds_to_meet_targets"] == pytest.approx(150.0 + 100.0)
    parsed = tomllib.loads(plan_toml(plan))
    assert [p["id"] for p in parsed["points"]] == ["B", "C"] and parsed["enough"] is True


def test_plan_command_and_not_enough_time(tmp_path, capsys):
    path = tmp_path / "s.jsonl"
    path.write_text("".join(json.dumps(x) + "\n" for x in
                            [_line("A", 0.0, 0.2, 10.0, 0.05), _line("B", 0.02, 0.3, 10.0, 0.05)]),
                    encoding="utf-8")
    out = tmp_path / "plan.toml"
    assert cli.main(["plan", str(path), "--hours", "0.01", "-o", str(out)]) == 0
    plan = tomllib.loads(out.read_text(encoding="utf-8"))
    assert plan["enough"] is False and plan["worst_ratio"] > 1
    assert "not enough" in capsys.readouterr().err
    assert cli.main(["plan", str(path), "--hours", "-1"]) == 2
    assert cli.main(["plan", str(tmp_path / "none"), "--hours", "1"]) == 4
    (tmp_path / "p.toml").write_text("[[points]]\nid = 'X'\n", encoding="utf-8")
    assert cli.main(["plan", str(path), "--hours", "1", "--points", str(tmp_path / "p.toml")]) == 4
    assert cli.main(["plan", str(path), "--hours", "1", "-o", str(tmp_path / "no" / "p")]) == 8


CAMPAIGN = """
[scenario]
rate_hz = 2000.0
columns = ["u", "v"]
[[points]]
id = "A"
y = 0.0
mean = [10.0, 0.0]
stress = [[0.5, -0.1], [-0.1, 0.3]]
tint_s = 0.004
[[points]]
id = "B"
y = 0.01
mean = [9.0, 0.0]
stress = [[1.2, -0.2], [-0.2, 0.8]]
tint_s = 0.012
[[points]]
id = "C"
y = 0.02
mean = [10.0, 0.0]
stress = [[0.2, 0.0], [0.0, 0.15]]
tint_s = 0.002
"""


def _run_points(sc, seconds, seed):
    buf = io.StringIO()
    p = Pipeline(summary=buf)
    for i, (pt, s) in enumerate(zip(sc.points, seconds, strict=True)):
        p.begin_point("s", pt.wire_point(None))
        p.feed("s", sc.make_generator(pt, seed * 100 + i).next_block(int(s * sc.rate_hz)),
               columns=sc.columns, rate_hz=sc.rate_hz)
    p.end("s")
    p.close()
    return [x for x in map(json.loads, buf.getvalue().splitlines()) if x["kind"] == "point"]


def _worst_ratio(line):
    return max((s["ci_high"] - s["ci_low"]) / 2 / s["target"] for s in line["statistics"]
               if s.get("target") and s.get("ci_low") is not None)


@pytest.mark.slow
def test_plan_run_through_the_simulator(tmp_path):
    """OU processes with known T_int and variances (REFERENCES §10): a first pass of 8 s per
    point, a plan for the time left, then the planned record lengths run through the
    simulator. Over three seeded campaigns the achieved half-widths match the plan's
    prediction within 15 % (geometric mean over points; each point within 40 %: a half-width
    from an 8 s first pass is itself uncertain by about 10 %), and the worst ratio is below
    that of equal time per point."""
    path = tmp_path / "campaign.toml"
    path.write_text(CAMPAIGN, encoding="utf-8")
    sc = load_scenario(str(path))
    ratios, wins = [], []
    for seed in range(3):
        first = _run_points(sc, [8.0, 8.0, 8.0], seed=10 * seed + 1)
        plan = make_plan(first, 90.0 / 3600.0, None, "s")
        rows = {r["id"]: r for r in plan["points"]}
        assert set(rows) == {"A", "B", "C"}, rows  # none converged in 8 s
        lengths = [rows[p.id]["done_s"] + rows[p.id]["seconds"] for p in sc.points]
        achieved = _run_points(sc, lengths, seed=10 * seed + 2)
        ratios += [_worst_ratio(line) / rows[line["point"]["id"]]["predicted_ratio"]
                   for line in achieved]
        equal = _run_points(sc, [sum(lengths) / 3] * 3, seed=10 * seed + 3)
        wins.append(max(map(_worst_ratio, achieved)) < max(map(_worst_ratio, equal)))
    print("achieved / predicted", np.round(ratios, 3))
    assert abs(np.exp(np.mean(np.log(ratios))) - 1.0) < 0.15, ratios
    assert all(0.6 < r < 1.4 for r in ratios), ratios
    assert all(wins), wins


def test_campaign_eta_range_from_the_blocking_chi_square():
    """The time still needed, with the 95 % range of a blocking variance from B blocks
    (Flyvbjerg & Petersen 1989: B - 1 degrees of freedom; quantiles from scipy)."""
    from scipy.stats import chi2

    from eddyvigil.stats.planner import need_range

    low, high = need_range(100.0, 41)
    assert low == pytest.approx(100.0 * 40 / chi2.ppf(0.975, 40))
    assert high == pytest.approx(100.0 * 40 / chi2.ppf(0.025, 40))
    assert need_range(100.0, None) == (100.0, 100.0)
    a = _line("A", 0.0, 0.2, 10.0, 0.1)  # needs 40 s, has 10
    b = _line("B", 0.02, 0.2, 10.0, 0.05)  # needs 160 s, has 10
    for line in (a, b):
        line["statistics"][0]["blocks"] = 41
    plan = make_plan([a, b], 1.0, [{"id": "A", "y": 0.0}, {"id": "B", "y": 0.02},
                                   {"id": "C", "y": 0.01}], "s")
    assert plan["seconds_to_meet_targets"] == pytest.approx(30.0 + 150.0 + 100.0)
    lo, hi = plan["eta_range_s"]
    # C's range spans both neighbours' ranges
    assert lo == pytest.approx(40 * low / 100 - 10 + 160 * low / 100 - 10 + 40 * low / 100)
    assert hi == pytest.approx(40 * high / 100 - 10 + 160 * high / 100 - 10 + 160 * high / 100)
    assert "seconds_to_meet_targets_range" in tomllib.loads(plan_toml(plan))


def test_simulate_follows_a_plan(tmp_path):
    """`eddyvigil simulate --plan`: each named point lasts already_measured_s + seconds,
    the others keep --point-seconds (a real publisher process on loopback, bounded waits)."""
    import subprocess
    import sys

    import zmq

    from eddyvigil.monitor import wire

    (tmp_path / "c.toml").write_text(CAMPAIGN, encoding="utf-8")
    plan = tmp_path / "plan.toml"
    plan.write_text('[[points]]\nid = "A"\ny = 0.0\nseconds = 0.5\nalready_measured_s = 0.25\n'
                    '[[points]]\nid = "C"\ny = 0.02\nseconds = 1.5\n', encoding="utf-8")
    ctx = zmq.Context()
    pull = ctx.socket(zmq.PULL)
    pull.setsockopt(zmq.LINGER, 0)
    port = pull.bind_to_random_port("tcp://127.0.0.1")
    proc = subprocess.Popen([sys.executable, "-m", "eddyvigil.simulator.cli", "--quiet",
                             "--connect", f"tcp://127.0.0.1:{port}", "--socket", "push",
                             "--speed", "max", "--scenario", str(tmp_path / "c.toml"),
                             "--point-seconds", "1.0", "--plan", str(plan)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    rows: dict = {}
    current = None
    try:
        for _ in range(5000):  # bounded in count and (poll) time
            if not pull.poll(30_000):
                break
            msg = wire.decode(pull.recv_multipart())
            if isinstance(msg, wire.PointMessage):
                current = msg.point["id"]
            elif isinstance(msg, wire.SamplesMessage):
                rows[current] = rows.get(current, 0) + msg.velocity.shape[0]
            elif isinstance(msg, wire.EndMessage):
                break
    finally:
        pull.close(linger=0)
        ctx.term()
        try:
            proc.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.communicate(timeout=10)
    assert proc.returncode == 0
    assert rows == {"A": 1500, "B": 2000, "C": 3000}  # 2000 Hz x (0.75, 1.0, 1.5) s
    bad = tmp_path / "bad.toml"
    bad.write_text("[[points]]\nseconds = 1\n", encoding="utf-8")
    assert cli.main(["simulate", "--connect", "tcp://127.0.0.1:1", "--plan", str(bad)]) == 4
