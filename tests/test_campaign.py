"""Campaign ETA: the prediction (stats.campaign) against arithmetic and a known chi-square
process, and the monitor's side (monitor.campaign): points file, the publisher's
announcement, the budget line's ``campaign`` object and the status line."""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pytest

from eddyvigil.monitor import Pipeline, wire
from eddyvigil.monitor.campaign import Campaign, announced_traverse, campaign_text, read_points
from eddyvigil.stats.campaign import Finished, forecast
from eddyvigil.stats.convergence import ETA_CALIBRATION
from eddyvigil.stats.verdict import MIN_RECORD_INTEGRAL_TIMES


def _done(ys, needs, blocks=None, tint=0.001):
    return [Finished({"x": 0.0, "y": y}, n, blocks, tint) for y, n in zip(ys, needs, strict=True)]


def test_a_flat_profile_gives_the_rule_times_the_points_plus_the_gaps():
    """Exact arithmetic of the rule (module docstring): each point to come takes
    max(ETA_CALIBRATION * need, MIN_RECORD_INTEGRAL_TIMES * T_int) plus the median gap."""
    f = forecast(_done([0.0, 0.02], [40.0, 40.0]), [{"y": 0.01}, {"y": 0.03}, {"y": 0.05}],
                 gaps_s=[2.0, 4.0, 3.0])
    assert f.points_done == 2 and f.points_left == 3 and f.reason is None
    assert f.seconds == pytest.approx(3 * (ETA_CALIBRATION * 40.0 + 3.0))
    # two positions say too little of the profile: no range, and why
    assert math.isnan(f.low) and f.range_reason == "2 positions measured, a range needs 4"
    assert campaign_text({**f.to_json()}).endswith(
        "(no range yet: 2 positions measured, a range needs 4)")
    # the minimum record wins where T_int is long
    slow = forecast(_done([0.0], [40.0], tint=1.0), [{"y": 0.01}])
    assert slow.seconds == pytest.approx(MIN_RECORD_INTEGRAL_TIMES * 1.0)


def test_a_linear_profile_is_interpolated_exactly_and_ends_take_the_nearest():
    """Linear interpolation in position (as `eddyvigil plan`): exact for a linear need."""
    f = forecast(_done([0.0, 0.1], [10.0, 30.0]), [{"y": 0.025}, {"y": 0.05}, {"y": 0.2}])
    assert f.seconds == pytest.approx(ETA_CALIBRATION * (15.0 + 20.0 + 30.0))
    # the coordinate that varies most is used, whatever its name
    g = forecast([Finished({"x": 1.0, "z": 0.0}, 10.0, None, 0.0),
                  Finished({"x": 1.0, "z": 2.0}, 30.0, None, 0.0)], [{"x": 1.0, "z": 1.0}])
    assert g.seconds == pytest.approx(ETA_CALIBRATION * 20.0)
    # no common coordinate: the finished points' mean need
    h = forecast(_done([0.0, 0.1], [10.0, 30.0]), [{}, {}])
    assert h.seconds == pytest.approx(2 * ETA_CALIBRATION * 20.0)


def test_the_point_in_progress_counts_what_it_still_needs_and_limits_cut():
    f = forecast(_done([0.0], [100.0]), [{"y": 0.02}], current={"y": 0.01})
    rec = ETA_CALIBRATION * 100.0
    assert f.seconds == pytest.approx(2 * rec)
    assert f.left(30.0).seconds == pytest.approx(rec - 30.0 + rec)
    assert f.left(500.0).seconds == pytest.approx(rec)  # never below zero
    cut = forecast(_done([0.0], [100.0]), [{"y": 0.02}], current={"y": 0.01},
                   limits_s=[60.0], current_limit_s=50.0)
    assert cut.seconds == pytest.approx(50.0 + 60.0)


def test_nothing_to_say_is_said_as_a_reason():
    f = forecast(_done([0.0], [math.nan]), [{"y": 0.01}])
    assert math.isnan(f.seconds) and "no finished point" in f.reason
    assert "time left not known yet" in campaign_text({**f.to_json(), "source": "publisher"})
    assert forecast([], []).seconds == 0.0


def test_the_range_covers_the_true_time_left_at_the_nominal_rate():
    """Known truth, the model's own: the log of the time to target wanders along the traverse
    as a Brownian motion (diffusion D per metre), and each finished point's need is estimated
    from B blocks, so it is the true need times chi^2_{B-1}/(B-1) (Flyvbjerg & Petersen 1989,
    the blocking variance; REFERENCES §2). The true time left follows the rule from the true
    needs; the 95 % range should cover it in about 95 % of campaigns (binomial 99 % band for
    600 trials: 0.927-0.973). Points to come lie between and beyond the measured ones."""
    done_y = np.array([0.0, 0.01, 0.02, 0.04, 0.06])
    come_y = np.array([0.005, 0.03, 0.05, 0.07, 0.09])
    grid = np.concatenate([done_y, come_y])
    order = np.argsort(grid)
    rng = np.random.default_rng(2026)
    hits = 0
    for _ in range(600):
        steps = rng.standard_normal(grid.size) * np.sqrt(np.diff(grid[order], prepend=0.0) * 8.0)
        log_need = np.empty(grid.size)
        log_need[order] = np.log(60.0) + np.cumsum(steps)
        true_need = np.exp(log_need)
        blocks = rng.integers(300, 1000, size=done_y.size)
        est = true_need[:5] * rng.chisquare(blocks - 1) / (blocks - 1)
        done = [Finished({"y": float(y)}, float(n), int(b), 0.001)
                for y, n, b in zip(done_y, est, blocks, strict=True)]
        f = forecast(done, [{"y": float(y)} for y in come_y], draws=1000,
                     seed=int(rng.integers(1 << 30)))
        truth = ETA_CALIBRATION * float(true_need[5:].sum())
        hits += f.low <= truth <= f.high
    assert 0.927 <= hits / 600 <= 0.973, hits / 600


def test_the_same_inputs_give_the_same_range():
    done = _done([0.0, 0.1, 0.2, 0.3], [10.0, 30.0, 20.0, 25.0], blocks=64)
    a, b = (forecast(done, [{"y": 0.05}, {"y": 0.4}]) for _ in range(2))
    assert (a.low, a.high) == (b.low, b.high) and a.low < a.seconds < a.high


def test_the_wording_of_the_status_line_and_the_dashboard():
    """Seconds below two minutes, minutes below two hours, hours above; one unit for the
    value and its range, that of the larger."""
    c = {"points_done": 5, "points_left": 7, "seconds_left": 840.0, "range_s": [600.0, 1140.0]}
    assert campaign_text(c) == "traverse: 5 of 12 points done, about 14 min left (10–19 min)"
    c = {"points_done": 1, "points_left": 2, "seconds_left": 9000.0, "range_s": [7200, 10800]}
    assert campaign_text(c) == "traverse: 1 of 3 points done, about 2.5 h left (2.0–3.0 h)"
    assert campaign_text({"points_done": 3, "points_left": 0}) == "traverse: 3 of 3 points done"
    c = {"points_done": 4, "points_left": 5, "seconds_left": 45.0, "range_s": [18.0, 126.0]}
    assert campaign_text(c) == "traverse: 4 of 9 points done, about 0.8 min left (0.3–2.1 min)"
    assert campaign_text(None) is None


@pytest.mark.parametrize("field", [
    [1, 2], {"remaining": "p1"}, {"remaining": [[0.0, 0.1, 0.0]]}, {"index": -1, "of": 3},
    {"of": 0}, {"remaining": [{"y": 0.1, "limit_s": -5}]}, {"limit_s": "long", "remaining": []},
    {"index": 2},
])
def test_a_malformed_announcement_is_ignored_whole(field):
    assert announced_traverse({"traverse": field}) is None


def test_an_announcement_of_a_count_only_gives_positions_unknown():
    t = announced_traverse({"traverse": {"index": 1, "of": 4}})
    assert len(t["remaining"]) == 2 and t["remaining"][0]["position"] == {}


def _frames(ys, traverse=True, bad=False):
    rng = np.random.default_rng(11)
    seq, out = 0, []
    for i, y in enumerate(ys):
        extra = None
        if traverse:
            extra = {"traverse": {"index": i, "of": len(ys), "remaining": [
                {"id": f"P{j}", "x": 0.0, "y": ys[j], "z": 0.0} for j in range(i + 1, len(ys))]}}
        if bad:
            extra = {"traverse": {"remaining": "everything"}}
        out.append(wire.encode_point("probe-a", "s", seq, {"id": f"P{i}", "x": 0.0, "y": y,
                                                           "z": 0.0}, extra))
        seq += 1
        for k in range(8):
            data = rng.normal(size=(2000, 3)) + [5.0 + 10 * y, 0.0, 0.0]
            # a 2 s move between points on the publisher's clock
            t0 = i * 18.0 + k * 2.0
            out.append(wire.encode_samples("probe-a", "s", seq, data, ("u", "v", "w"),
                                           rate_hz=1000.0, t0=t0))
            seq += 1
    out.append(wire.encode_end("probe-a", "s", seq))
    return out


def _run(frames, **kw):
    """Through a pipeline whose clock runs with the publisher's (pace 1)."""
    buf = io.StringIO()
    now = [0.0]
    p = Pipeline(summary=buf, clock=lambda: now[0], **kw)
    status = []
    from eddyvigil.monitor.watch import status_line

    for f in frames:
        header = json.loads(f[1])
        if header["kind"] == "samples":
            now[0] = header["t0"] + header["n"] / header["rate_hz"]
        p.handle_frames(f)
        if json.loads(f[1])["kind"] == "point":
            status.append(status_line(p.publish()))
    p.close()
    return [json.loads(t) for t in buf.getvalue().splitlines()], status


def test_the_budget_line_carries_the_campaign_and_the_status_line_says_it():
    lines, status = _run(_frames([0.0, 0.01, 0.02, 0.04]))
    budgets = [x for x in lines if x["kind"] == "budget"]
    assert [b["campaign"]["points_done"] for b in budgets] == [1, 2, 3, 4]
    assert [b["campaign"]["points_left"] for b in budgets] == [3, 2, 1, 0]
    assert all(b["campaign"]["source"] == "publisher" for b in budgets)
    assert budgets[1]["campaign"]["gap_s"] == pytest.approx(2.0)  # 18 s apart, 16 s records
    first, fourth = budgets[0]["campaign"], budgets[2]["campaign"]
    assert first["seconds_left"] > 0 and first["range_s"] == [None, None]
    assert first["range_reason"] == "1 position measured, a range needs 4"
    assert fourth["points_left"] == 1
    assert "traverse: 1 of 4 points done, about" in status[1]


def test_a_points_file_wins_and_a_bad_announcement_changes_no_statistic(tmp_path):
    path = tmp_path / "points.toml"
    path.write_text("".join(f'[[points]]\nid = "P{i}"\ny = {y}\n\n'
                            for i, y in enumerate([0.0, 0.01, 0.02, 0.04, 0.08])))
    planned = read_points(path)
    assert planned[4] == {"id": "P4", "y": 0.08}
    lines, _ = _run(_frames([0.0, 0.01, 0.02, 0.04]), points=planned)
    budget = [x for x in lines if x["kind"] == "budget"][-1]["campaign"]
    assert budget["source"] == "points file" and budget["points_left"] == 1
    plain, _ = _run(_frames([0.0, 0.01, 0.02, 0.04], traverse=False))
    bad, _ = _run(_frames([0.0, 0.01, 0.02, 0.04], bad=True))
    points = [[x for x in run if x["kind"] == "point"] for run in (plain, bad)]
    assert points[0] == points[1]  # the field is ignored whole, never a statistic touched
    assert all("campaign" not in x for x in plain if x["kind"] == "budget")


def test_the_campaign_forgets_an_announcement_a_later_point_does_not_repeat():
    c = Campaign()
    c.start({"id": "A", "y": 0.0}, {"traverse": {"index": 0, "of": 3}})
    assert c.view() is not None
    c.start({"id": "B", "y": 0.1}, {})
    assert c.view() is None


def test_the_display_runs_at_the_pace_measured_so_far():
    """Wall-clock seconds per second of record over the finished points (arithmetic): two
    points of 10 s record and a 2 s gap took 44 s of wall clock, so 2 s per s of record."""
    c = Campaign([{"id": i, "y": y} for i, y in (("A", 0.0), ("B", 0.01), ("C", 0.02))])
    line = {"point": {"id": "A", "y": 0.0}, "duration_s": 10.0, "statistics": []}
    c.start(line["point"], None, wall_s=100.0)
    c.finish(line, t0_s=0.0, wall_s=120.0)
    c.start({"id": "B", "y": 0.01}, None, wall_s=121.0)
    c.finish({**line, "point": {"id": "B", "y": 0.01}}, t0_s=12.0, wall_s=144.0)
    assert c.pace() == pytest.approx(44.0 / 22.0)
    assert "pace" not in c.view() and c.view(live=True)["pace"] == pytest.approx(2.0)
    shown = {"points_done": 2, "points_left": 1, "seconds_left": 60.0, "range_s": [50.0, 70.0],
             "pace": 2.0}
    assert campaign_text(shown) == "traverse: 2 of 3 points done, about 2.0 min left (1.7–2.3 min)"


def test_budget_plan_and_report_read_a_summary_with_early_budget_lines(tmp_path, capsys):
    """DESIGN §11's budget line after the first and second point (null terms, a reason, a
    campaign object) is read by every command that reads a summary."""
    from eddyvigil.monitor import cli

    lines, _ = _run(_frames([0.0, 0.01, 0.02, 0.04]))
    assert lines[1]["kind"] == "budget" and lines[1]["production"] is None
    path = tmp_path / "s.jsonl"
    path.write_text("".join(json.dumps(x) + "\n" for x in lines[:4]))  # two points so far
    assert cli.main(["budget", str(path)]) == 0
    assert "no budget yet: 2 positions along y: the derivatives need at least three" in (
        capsys.readouterr().out)
    assert cli.main(["plan", str(path), "--hours", "1", "-o", str(tmp_path / "p.toml")]) == 0
    assert cli.main(["report", str(path), "-o", str(tmp_path / "r.html")]) == 0
    assert (tmp_path / "r.html").stat().st_size > 10_000


def test_watch_refuses_an_unreadable_points_file_before_starting(tmp_path, capsys):
    from eddyvigil.monitor import cli

    bad = tmp_path / "points.toml"
    bad.write_text('[[points]]\nid = "A"\ny = "high"\n')
    args = ["watch", "--connect", "tcp://127.0.0.1:9", "--no-dashboard", "--quiet"]
    assert cli.main([*args, "--points", str(bad)]) == 4
    assert "'y' must be a number" in capsys.readouterr().err
    assert cli.main([*args, "--points", str(tmp_path / "none.toml")]) == 4
