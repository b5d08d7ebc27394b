"""A traverse stopped on budget-driven targets meets the requested term tolerance.

The simulator's plane wake knows its k budget (``simulator/scenario.py``: Pope 2000
thin-shear-layer budget of analytic profiles). Each traverse runs through the monitor's own
Pipeline, in process: a point is fed block by block until the monitor signals it converged
(the control socket's callback), then the next begins; the first two points, which have no
finished neighbours, are measured again at the end (the workflow README describes). The
targets file asks for the production (or the turbulent transport) to ±H m^2/s^3 at 95 %, with
loose plain targets, so the derived tolerances decide the stop.

Marked slow: 40 traverses of 19 points for production (about 2 s each on an idle core), 20
for transport (about 8 s each).
"""

from __future__ import annotations

import io
import json

import numpy as np
import pytest
from test_budget_coverage import SCENARIO

from eddyvigil.monitor import Pipeline
from eddyvigil.monitor.budget_cmd import budget_line
from eddyvigil.simulator.scenario import load_scenario, point_truth
from eddyvigil.stats import Targets

#: term -> (H in m^2/s^3, traverses): about 12 % of the peak production (2.0) and 20 % of the
#: peak transport magnitude (2.9) of this wake
CASES = {"production": (0.25, 40), "turbulent_transport": (0.6, 20)}
PLAIN = {"U": {"relative": 0.05}, "uv": {"relative": 0.5}}
BLOCK = 1000  # rows per message (0.5 s at 2 kHz)
MAX_SECONDS = 150.0  # a point still running then is ended (counted below)


def _traverse(sc, targets, seed):
    """(point lines, seconds per point, points ended by the cap) of one traverse."""
    buf = io.StringIO()
    signalled = []
    p = Pipeline(targets, summary=buf, on_converged=lambda *a: signalled.append(a[1]))
    order = list(range(len(sc.points))) + [0, 1]  # the first two measured again
    seconds, capped = [], 0
    for k, i in enumerate(order):
        pt = sc.points[i]
        p.begin_point("probe-a", pt.wire_point(sc.nu))
        gen = sc.make_generator(pt, 1000 * seed + 100 * k + i)
        signalled.clear()
        n = 0
        while not signalled and n < MAX_SECONDS * sc.rate_hz:
            p.feed("probe-a", gen.next_block(BLOCK), columns=sc.columns, rate_hz=sc.rate_hz)
            n += BLOCK
        capped += not signalled
        seconds.append(n / sc.rate_hz)
    p.end("probe-a")
    p.close()
    lines = [json.loads(t) for t in buf.getvalue().splitlines()]
    return [x for x in lines if x["kind"] == "point"], seconds, capped


@pytest.mark.slow
@pytest.mark.parametrize("term", list(CASES))
def test_a_traverse_stopped_on_budget_targets_meets_the_requested_tolerance(tmp_path, term):
    H, traverses = CASES[term]
    path = tmp_path / "wake-fine.toml"
    path.write_text(SCENARIO, encoding="utf-8")
    sc = load_scenario(str(path))
    truth = np.array([point_truth(sc, pt)["budget"][term] for pt in sc.points])
    positions = [pt.wire_point(sc.nu)["y"] for pt in sc.points]
    targets = Targets.from_dict({"targets": PLAIN, "budget": {
        term: {"absolute": H}, "positions": positions}})
    met, covered, ratio, applied, derived, seconds, capped = [], [], [], [], [], [], 0
    for seed in range(traverses):
        points, secs, cap = _traverse(sc, targets, seed)
        seconds.append(sum(secs))
        capped += cap
        # every point but the first two of the first pass got derived targets; they are its
        # targets where tighter than the plain ones
        for x in points[2:]:
            derived.append(x["derived_targets"]["basis"] is not None)
            applied.append(any(s["applied"] for s in x["derived_targets"]["statistics"]))
        b = budget_line("probe-a", points)[term]
        value = np.array(b["value"], dtype=float)
        lo = np.array(b["ci_low"], dtype=float)
        hi = np.array(b["ci_high"], dtype=float)
        met.extend((np.abs(value - truth) <= H).tolist())
        covered.extend(((lo <= truth) & (truth <= hi)).tolist())
        ratio.extend(((hi - lo) / 2 / H).tolist())
    met_rate, cover = float(np.mean(met)), float(np.mean(covered))
    ratio = np.array(ratio)
    shown = np.isfinite(ratio)  # a point whose inputs have no interval has none (a miss above)
    ratio = ratio[shown]
    print(f"{term} ±{H}: {traverses} traverses x {truth.size} points: |term - truth| <= H at "
          f"{met_rate:.3f}, "
          f"95 % intervals cover at {cover:.3f}, half-width / H median "
          f"{np.median(ratio):.2f}, 90th percentile {np.quantile(ratio, 0.9):.2f}, "
          f"derived targets the tighter at {np.mean(applied):.3f} of points, record per "
          f"traverse {np.mean(seconds):.0f} s (range {min(seconds):.0f}-{max(seconds):.0f}), "
          f"{capped} point(s) ended at {MAX_SECONDS:.0f} s, intervals shown at "
          f"{np.mean(shown):.3f} of points")
    assert all(derived) and np.mean(applied) >= 0.9  # measured 1.00
    # the requested tolerance at the nominal 95 %: 680 (340) points, so 0.93 (0.92) is more
    # than two binomial standard errors (0.0084, 0.012) below it
    assert met_rate >= (0.93 if traverses >= 40 else 0.92), met_rate
    # the intervals the budget shows keep their coverage on points stopped this way (the
    # level of tests/test_budget_coverage.py)
    assert cover >= 0.90, cover
    # the term's interval is within the request at most points; above it where the
    # (noisy) discretisation estimate takes a large share (stats/budget_targets.py)
    assert np.median(ratio) <= 1.0, np.median(ratio)
