"""The one move-on verdict (stats/verdict.py) and everyone who shows it.

Processes with known truth: exact AR(1) records (tests/processes.py; REFERENCES §10), with and
without a linear drift of the u-mean. The verdict's own rule (200 integral times before MOVE ON)
is a policy of this project, derived in stats/verdict.py's docstring.
"""

from __future__ import annotations

import html
import io
import json
import math

import numpy as np
import pytest
import zmq
from conftest import StreamWriter, tcp_endpoint, wait_for

from eddyvigil.monitor.control import ControlPublisher
from eddyvigil.monitor.dashboard import views
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.summary import POINT_SIGNAL_FIELDS
from eddyvigil.monitor.watch import status_line
from eddyvigil.stats.snapshot import STATES, Estimate, PointSnapshot
from eddyvigil.stats.targets import Targets
from eddyvigil.stats.verdict import (
    HEADLINES,
    KINDS,
    MIN_RECORD_INTEGRAL_TIMES,
    STATE_WORDS,
    point_verdict,
)

RATE_HZ = 1000.0
T_INT_SAMPLES = 5.0  # integral time of the AR(1) in samples: 5 ms at 1 kHz


def _record(rng, n: int, drift_sigmas: float = 0.0, start_drift: int = 0) -> np.ndarray:
    """Stationary AR(1), rho = exp(-1/T_int) (exact; Gillespie 1996), u-mean 8 m/s with a
    linear drift of ``drift_sigmas`` standard deviations from sample ``start_drift`` on."""
    from scipy.signal import lfilter

    rho = math.exp(-1.0 / T_INT_SAMPLES)
    e = rng.standard_normal((3, n))
    zi = rho * rng.standard_normal((3, 1))
    x, _ = lfilter([math.sqrt(1.0 - rho * rho)], [1.0, -rho], e, axis=1, zi=zi)
    x = x.T * np.array([0.9, 0.6, 0.5]) + np.array([8.0, 0.6, -0.3])
    if drift_sigmas:
        ramp = np.clip((np.arange(n) - start_drift) / max(n - start_drift, 1), 0.0, None)
        x[:, 0] += drift_sigmas * 0.9 * ramp
    return x


def _est(name, hw, target, state, value=1.0):
    converged = None if target is None else state == "converged"
    return Estimate(name, value, hw / 2, value - hw, value + hw, hw, target, converged,
                    0.0 if converged else 5.0, state, blocks=100)


def _snap(estimates, duration_s=2.0, converged=False, suspect=None, tint=0.005):
    est = list(estimates) + [_est(f"Tint_{c}", tint / 10, None, "untargeted", tint)
                             for c in ("u", "v")]
    return PointSnapshot(("u", "v"), int(duration_s * 1000), duration_s, 0.95, tuple(est),
                         converged, 1.0 if converged else None, "two-component", suspect or {})


def test_every_state_has_words_and_every_kind_a_headline():
    # honest's states (confirming, no-interval) are in the one table already
    for state in (*STATES, "confirming", "no-interval"):
        assert STATE_WORDS[state]
    assert set(HEADLINES) == set(KINDS)


def test_move_on_waits_for_the_record_the_drift_check_needs():
    met = [_est("U", 0.01, 0.05, "converged")]
    # 0.5 s over T_int 5 ms = 100 integral times: targets met, record too short
    short = point_verdict(_snap(met, duration_s=0.5, converged=True))
    assert short.kind == "keep-acquiring" and "100 integral times" in short.reason
    long = point_verdict(_snap(met, duration_s=1.5, converged=True))
    assert long.kind == "move-on" and long.record_integral_times == pytest.approx(300.0)
    assert MIN_RECORD_INTEGRAL_TIMES == 200.0
    unknown = point_verdict(_snap(met, duration_s=5.0, converged=True, tint=math.nan))
    assert unknown.kind == "keep-acquiring" and "unknown integral times" in unknown.reason


def test_confirming_rows_and_banner_tell_one_story():
    # target met now (1.1 x 0.04 <= 0.05) but the checkpoint streak is not complete
    snap = _snap([_est("U", 0.04, 0.05, "converging"), _est("uu", 0.01, 0.05, "converged")])
    v = point_verdict(snap)
    assert v.kind == "keep-acquiring" and "1/2 targets met, 1 confirming" in v.reason
    view = views.StreamView("a", "s", {"id": "P1"}, 0, snap, 1000.0, 1000.0, 1, 0, 0, 0, {})
    rows = views.status_columns(views.RunSnapshot(1, 0.0, {"a": view}))
    assert rows["state"] == [STATE_WORDS["confirming"], STATE_WORDS["converged"]]


def test_a_drift_reads_as_a_sentence_not_a_list_of_names():
    suspect = {"u": "trend: mean drifts by +8.8 standard errors over the record (slope t = 6.1, "
                    "limit 2.8); halves differ by 5.0 standard errors (limit 3.1)"}
    snap = _snap([_est("U", 0.01, 0.05, "suspect"), _est("uv", 0.01, 0.05, "suspect")],
                 suspect=suspect)
    v = point_verdict(snap)
    assert v.kind == "check-signal"
    assert v.reason == "not stationary: u: mean drifts +8.8 standard errors"


def _pipeline_run(x, targets, **kw):
    p = Pipeline(targets, summary=io.StringIO(), snapshot_interval_s=3600.0, **kw)
    p.begin_point("probe-a", {"id": "P1", "y": 0.01})
    for start in range(0, len(x), 1000):
        p.feed("probe-a", x[start:start + 1000], rate_hz=RATE_HZ)
    return p


@pytest.mark.parametrize("drift", [0.0, 2.0])
def test_terminal_summary_and_dashboard_show_the_same_verdict(drift):
    rng = np.random.default_rng(11 if drift == 0 else 12)
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.01}, "uu": {"relative": 0.1}}})
    lines = io.StringIO()
    p = Pipeline(targets, summary=lines, snapshot_interval_s=3600.0)
    p.begin_point("probe-a", {"id": "P1", "y": 0.01})
    x = _record(rng, 60_000, drift_sigmas=drift)
    for start in range(0, len(x), 1000):
        p.feed("probe-a", x[start:start + 1000], rate_hz=RATE_HZ)
    run = p.publish()
    view = run.streams["probe-a"]
    v = point_verdict(view.stats)
    # stationary: every target met over 60 s = 12 000 integral times; drifting by 2 sigma
    # (about 40 standard errors of the mean): the guard holds u
    assert v.kind == ("move-on" if drift == 0 else "check-signal")
    if drift:
        assert "u: mean drifts" in v.reason
    assert v.text() in status_line(run)
    badge = views.banner(view)
    assert badge.headline == v.headline and html.escape(v.reason) in badge.detail
    p.close()
    point_line = json.loads(lines.getvalue().splitlines()[0])
    assert point_line["verdict"] == v.to_json()
    assert all(f in point_line for f in POINT_SIGNAL_FIELDS)


def test_a_point_turned_by_its_final_evaluation_is_withdrawn_at_its_end():
    """Signalled converged, then u saturates (an amplifier at its rail: 400 rows at one value
    above every other, 1.3 % of the point clipped, above the 0.1 % that makes a point suspect)
    in the last 0.4 s: rows that wait for the next group of 0.5 s (monitor/coalesce.py) and so
    reach the statistics only at the point's end. No checkpoint sees them, the final
    evaluation does; the traverse, which may already have left the point, hears ``withdrawn``
    with the final verdict's reason before the line is written."""

    class Heard:
        def __init__(self):
            self.kinds, self.messages = [], []

        def __call__(self, stream, point, at_s, line):
            self.kinds.append("converged")
            self.messages.append((at_s, line))

        def withdrawn(self, stream, point, at_s, line):
            self.kinds.append("withdrawn")
            self.messages.append((at_s, line))

    heard = Heard()
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.02}}})
    lines = io.StringIO()
    p = Pipeline(targets, summary=lines, on_converged=heard, snapshot_interval_s=3600.0)
    w = StreamWriter(rate_hz=RATE_HZ)
    p.handle_frames(w.point("P1", y=0.02))
    x = _record(np.random.default_rng(11), 30_000)
    for start in range(0, len(x), 1000):
        p.handle_frames(w.samples(x[start:start + 1000].astype(np.float32)))
    assert heard.kinds == ["converged"]
    rail = _record(np.random.default_rng(12), 400)
    rail[:, 0] = x[:, 0].max() + 1.0
    p.handle_frames(w.samples(rail.astype(np.float32)))
    assert heard.kinds == ["converged"]  # the rows wait: no checkpoint saw them
    p.handle_frames(w.end())
    p.close()
    assert heard.kinds == ["converged", "withdrawn"]
    at_s, live = heard.messages[1]
    line = json.loads(lines.getvalue().splitlines()[0])
    assert at_s == pytest.approx(30.4) and line["withdrawn_at_s"] == at_s
    assert line["converged"] is False and line["verdict"]["kind"] == "check-signal"
    assert "clipped" in live["verdict"]["reason"]
    assert live["verdict"] == line["verdict"]


def test_a_level_step_after_the_last_checkpoint_lapses_the_converged_state():
    """Signalled converged at 10 s, then u steps by 40 sigma for the last 0.4 s (a probe
    knocked, a flow that broke down), rows that reach the statistics only at the point's end.
    U's blocking error then sees the step (its interval grows to about 7 times its target);
    the checkpoint's streak alone would still say converged. A converged row whose interval
    has grown past 1.5 times its target is shown suspect, the point is not converged, and
    the traverse hears ``withdrawn``. The variances' interval at such a large relative error
    is the plain symmetric one and holds the value."""
    heard = []
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.02}}})
    lines = io.StringIO()

    class Heard:
        def __call__(self, stream, point, at_s, line):
            heard.append("converged")

        def withdrawn(self, stream, point, at_s, line):
            heard.append("withdrawn")

    p = Pipeline(targets, summary=lines, on_converged=Heard(), snapshot_interval_s=3600.0)
    w = StreamWriter(rate_hz=RATE_HZ)
    p.handle_frames(w.point("P1", y=0.02))
    x = _record(np.random.default_rng(11), 30_000)
    for start in range(0, len(x), 1000):
        p.handle_frames(w.samples(x[start:start + 1000].astype(np.float32)))
    step = _record(np.random.default_rng(12), 400) + np.array([40 * 0.9, 0.0, 0.0])
    p.handle_frames(w.samples(step.astype(np.float32)))
    p.handle_frames(w.end())
    p.close()
    assert heard == ["converged", "withdrawn"]
    line = json.loads(lines.getvalue().splitlines()[0])
    rows = {r["name"]: r for r in line["statistics"]}
    u = rows["U"]
    assert (u["ci_high"] - u["ci_low"]) / 2 > 1.5 * u["target"]
    assert u["state"] == "suspect" and u["converged"] is False
    assert line["converged"] is False and line["verdict"]["kind"] == "check-signal"
    assert "grown to" in line["verdict"]["reason"]
    uu = rows["uu"]
    assert uu["ci_low"] <= uu["value"] <= uu["ci_high"]


def test_a_drifting_point_is_signalled_then_withdrawn_on_a_real_control_socket():
    """Stationary for 20 s (converges under loose targets), then u drifts by 3 sigma: the
    guard catches it while data keep coming, and the traverse hears ``withdrawn``."""
    ep = tcp_endpoint()
    control = ControlPublisher(ep)
    ctx = zmq.Context()
    sub = ctx.socket(zmq.SUB)
    sub.setsockopt(zmq.LINGER, 0)
    sub.setsockopt(zmq.SUBSCRIBE, b"")
    sub.connect(ep)
    try:
        def joined():  # PUB drops until the subscription has arrived: probe, bounded
            control.send("probe-z", {"id": "hello"}, 0.0, {})
            return sub.poll(100)

        wait_for(joined, timeout=10, what="the control subscription")
        while sub.poll(200):
            sub.recv_multipart()
        targets = Targets.from_dict({"targets": {"U": {"relative": 0.02}}})
        lines = io.StringIO()
        p = Pipeline(targets, summary=lines, on_converged=control, snapshot_interval_s=3600.0)
        w = StreamWriter(rate_hz=RATE_HZ)
        p.handle_frames(w.point("P1", y=0.02))
        x = _record(np.random.default_rng(7), 120_000, drift_sigmas=3.0, start_drift=20_000)
        for start in range(0, len(x), 1000):
            p.handle_frames(w.samples(x[start:start + 1000].astype(np.float32)))
        p.handle_frames(w.end())
        p.close()
        got = []
        while sub.poll(1000):
            got.append(json.loads(sub.recv_multipart()[1]))
        kinds = [m["kind"] for m in got]
        assert kinds[:2] == ["converged", "withdrawn"], kinds
        conv, wd = got[0], got[1]
        assert conv["at_s"] <= 20.0 < wd["at_s"]
        assert wd["converged_at_s"] == conv["at_s"] and "u: mean drifts" in wd["reason"]
        assert wd["verdict"]["kind"] == "check-signal"
        line = json.loads(lines.getvalue().splitlines()[0])
        # signals alternate; the summary keeps the last moment of each
        assert all(a != b for a, b in zip(kinds, kinds[1:], strict=False))
        last = {m["kind"]: m["at_s"] for m in got}
        assert line["signalled_at_s"] == last["converged"]
        assert line["withdrawn_at_s"] == last["withdrawn"]
        assert line["converged"] is False and line["verdict"]["kind"] == "check-signal"
    finally:
        sub.close(linger=0)
        ctx.term()
        control.close()
