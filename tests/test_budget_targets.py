"""Budget-driven targets: the ``[budget]`` table of the targets file and the per-point targets
derived from it (stats/budget_targets.py), through the pipeline into the point line."""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pytest

from eddyvigil.stats.budget import derivative, derived_tolerances, tke_budget
from eddyvigil.stats.budget_targets import derive
from eddyvigil.stats.targets import Targets, TargetsError

Z = 1.959963984540054  # 97.5 % normal quantile (scipy.stats.norm.ppf(0.975), from memory)
#: a uniform traverse (m) and smooth profiles on it (quadratic U: the three-point derivative
#: is exact and the discretisation estimate zero)
Y = np.linspace(-0.05, 0.05, 11)
U = 8.0 + 30.0 * Y + 200.0 * Y**2
UV = -0.02 - 0.5 * Y
NAMES = {"U": "U", "uv": "uv", "uuv": "uuv", "vvv": "vvv", "vww": "vww", "k": "k", "V": "V"}


def _stats(idx, se_u=0.01, se_uv=0.001):
    idx = list(idx)
    return {"U": (U[idx], np.full(len(idx), se_u)), "uv": (UV[idx], np.full(len(idx), se_uv)),
            "k": (np.full(len(idx), 0.3), np.full(len(idx), 0.003))}


def _targets(budget, plain=None):
    d = {"budget": budget}
    if plain is not None:
        d["targets"] = plain
    return Targets.from_dict(d)


# ------------------------------------------------------------------------------ the file


def test_budget_table_parses_and_round_trips(tmp_path):
    path = tmp_path / "targets.toml"
    path.write_text(
        "confidence = 0.95\n[targets]\nU = { relative = 0.01 }\n[budget]\n"
        "production = { relative = 0.1 }\nturbulent_transport = { absolute = 0.5 }\n"
        'axis = "z"\npositions = [0.0, -0.05, 0.05]\n', encoding="utf-8")
    t = Targets.from_toml(path)
    assert t.budget.axis == "z" and t.budget.positions == (-0.05, 0.0, 0.05)
    assert t.budget.terms["production"].relative == 0.1
    assert t.budget.terms["turbulent_transport"].absolute == 0.5
    assert Targets.from_dict(t.to_dict()) == t
    assert "Budget: production ±10 % of its RMS across the traverse" in t.describe()
    assert Targets.from_dict({}).budget is None


@pytest.mark.parametrize("table, must_say", [
    ({"dissipation": {"absolute": 1.0}}, "not fed by a point's moments"),
    ({"production": {"absolute": -1.0}}, "positive"),
    ({"production": {"relative": 0.1, "absolute": 1.0}}, "expected"),
    ({"production": 0.1}, "expected"),
    ({"axis": "y"}, "at least one term"),
    ({"production": {"relative": 0.1}, "axis": "r"}, "axis"),
    ({"production": {"relative": 0.1}, "positions": [0.0, 0.0, 1.0]}, "distinct"),
    ({"production": {"relative": 0.1}, "positions": [0.0, 1.0]}, "at least three"),
    ("production", "must be a table"),
])
def test_malformed_budget_tables_are_refused_with_a_reason(table, must_say):
    with pytest.raises(TargetsError, match=must_say):
        Targets.from_dict({"budget": table})


# ------------------------------------------------------------------------------ derivation


def test_a_point_measured_again_gets_the_complete_traverses_tolerances():
    """With every other point finished and the point's own earlier values, the grid is the
    whole traverse: the tolerances are derived_tolerances' at that point (Monte Carlo-checked
    in test_budget.py)."""
    H = 0.05
    full, _ = derived_tolerances(Y, _stats(range(11)), "production", H)
    for i in (0, 4, 10):
        rest = [j for j in range(11) if j != i]
        d = derive(_targets({"production": {"absolute": H}}, {"U": {"relative": 0.5}}),
                   Y[i], Y[rest], _stats(rest), NAMES, own={"U": U[i], "uv": UV[i], "k": 0.3})
        assert d.basis == "earlier measurement of this point"
        got = {s["name"]: s["half_width"] for s in d.statistics}
        assert got["U"] == pytest.approx(full["U"][i], rel=1e-6)
        assert got["uv"] == pytest.approx(full["uv"][i], rel=1e-6)
        assert d.targets.targets["uv"].absolute == pytest.approx(full["uv"][i], rel=1e-6)


def test_derived_targets_give_the_term_its_half_width_by_monte_carlo():
    """The point in the middle of a traverse, the rest finished exactly: its U and uv drawn
    with SE = derived target / z give the production at every stencil through it a spread
    of at most H / z (seeded draws; Monte Carlo against the linear propagation, common
    practice)."""
    H, i = 0.05, 5
    rest = [j for j in range(11) if j != i]
    d = derive(_targets({"production": {"absolute": H}}, {"U": {"relative": 0.5}}), Y[i],
               Y[rest], _stats(rest), NAMES, own={"U": U[i], "uv": UV[i]})
    tol = {s["name"]: s["half_width"] for s in d.statistics}
    rng = np.random.default_rng(3)
    n = 20_000
    u = np.tile(U, (n, 1))
    uv = np.tile(UV, (n, 1))
    u[:, i] += tol["U"] / Z * rng.standard_normal(n)
    uv[:, i] += tol["uv"] / Z * rng.standard_normal(n)
    weights = np.array([derivative(Y, e, np.zeros(11)).value for e in np.eye(11)]).T
    prod = -uv * (u @ weights.T)
    spread = prod.std(axis=0)[i - 1:i + 2]
    # uv's share (1/2) and U's share (1/6 of each stencil) both used: at most H/z at every
    # stencil point, and not wastefully small at the point itself
    assert np.all(spread <= 1.03 * H / Z), spread * Z / H
    assert spread[1] >= 0.6 * H / Z, spread * Z / H


def test_plain_targets_combine_the_tighter_wins():
    H = 0.05
    rest = [j for j in range(11) if j != 5]
    own = {"U": U[5], "uv": UV[5], "k": 0.3}
    loose = derive(_targets({"production": {"absolute": H}}, {"U": {"relative": 0.5}}), Y[5],
                   Y[rest], _stats(rest), NAMES, own=own)
    rows = {s["name"]: s for s in loose.statistics}
    assert rows["U"]["applied"] and rows["U"]["plain"] > rows["U"]["half_width"]
    assert loose.targets.targets["U"].absolute == rows["U"]["half_width"]
    assert loose.applied() == {"U": "production", "uv": "production"}
    # uv untargeted in the plain list: the derived target adds it
    assert rows["uv"]["plain"] is None and "uv" in loose.targets.targets
    tight = derive(_targets({"production": {"absolute": H}}, {"U": {"absolute": 1e-4}}), Y[5],
                   Y[rest], _stats(rest), NAMES, own=own)
    rows = {s["name"]: s for s in tight.statistics}
    assert not rows["U"]["applied"] and tight.targets.targets["U"].absolute == 1e-4


def test_the_first_points_keep_their_plain_targets_and_say_so():
    t = _targets({"production": {"absolute": 0.05}})
    for n in (0, 1):
        d = derive(t, Y[n], Y[:n], _stats(range(n)), NAMES)
        assert d.statistics == () and d.targets == t and d.basis is None
        assert "2 needed for a absolute tolerance: plain targets only" in d.notes[0]
    rel = derive(_targets({"production": {"relative": 0.1}}), Y[2], Y[:2], _stats(range(2)),
                 NAMES)
    assert rel.statistics == () and "3 needed for a relative tolerance" in rel.notes[0]
    assert derive(Targets.defaults(), Y[0], [], {}, NAMES) is None


def test_relative_tolerance_is_of_the_terms_rms_across_the_finished_traverse():
    """Linear U and constant uv: P = -uv dU/dy is the same at every point (exact), so its RMS
    is |P| and the half-width r |P|."""
    u = 8.0 + 30.0 * Y
    stats = {"U": (u[:6], np.full(6, 0.01)), "uv": (np.full(6, -0.02), np.full(6, 0.001))}
    d = derive(_targets({"production": {"relative": 0.1}}), Y[6], Y[:6], stats, NAMES)
    term = d.terms["production"]
    assert term["scale"] == pytest.approx(0.02 * 30.0, rel=1e-9)
    assert term["half_width"] == pytest.approx(0.1 * 0.6, rel=1e-9)
    assert d.basis == "interpolation of the neighbours"


def test_without_a_plan_the_traverse_is_assumed_to_go_on_at_its_spacing():
    """No ``positions``: the point at the end gets what a plan that goes on at the same
    spacing gives it (a centred stencil, not the end one)."""
    H, h = 0.05, Y[1] - Y[0]
    plan = list(Y[:8]) + [Y[7] + h, Y[7] + 2 * h, Y[7] + 3 * h]
    free = derive(_targets({"production": {"absolute": H}}), Y[7], Y[:7], _stats(range(7)),
                  NAMES)
    planned = derive(_targets({"production": {"absolute": H}, "positions": plan}), Y[7], Y[:7],
                     _stats(range(7)), NAMES)
    a = {s["name"]: s["half_width"] for s in free.statistics}
    b = {s["name"]: s["half_width"] for s in planned.statistics}
    assert a == pytest.approx(b, rel=1e-9)
    # the end of a known plan asks for more: the one-sided end stencil weighs the point most
    ends = derive(_targets({"production": {"absolute": H}, "positions": list(Y[:8])}), Y[7],
                  Y[:7], _stats(range(7)), NAMES)
    c = {s["name"]: s["half_width"] for s in ends.statistics}
    assert c["U"] < a["U"]


def test_a_discretisation_estimate_above_the_tolerance_is_unreachable():
    """A profile with a kink (|y|): the four-point estimate alone exceeds a tiny tolerance,
    so no time can meet it; the point is told why, and still asked for the noise share."""
    u = 8.0 + 40.0 * np.abs(Y)
    stats = {"U": (u[:8], np.full(8, 0.01)), "uv": (np.full(8, -0.02), np.full(8, 0.001))}
    b = tke_budget(Y[:8], stats)
    assert np.nanmax(b.terms["production"].discretisation) > 0.01
    d = derive(_targets({"production": {"absolute": 1e-4}}), Y[6], np.delete(Y[:8], 6),
               {k: (np.delete(v, 6), np.delete(s, 6)) for k, (v, s) in stats.items()}, NAMES,
               own={"U": u[6], "uv": -0.02})
    assert d.terms["production"]["reachable"] is False
    assert any("time cannot meet it" in n for n in d.notes)
    # noise still gets half the variance budget, and uv half of that (stats/budget.py):
    # z SE(uv) |dU/dy| = z (H/z) sqrt(1/2) / sqrt(2), dU/dy = 40 exactly (a straight line)
    tol = {s["name"]: s["half_width"] for s in d.statistics}
    assert tol["uv"] == pytest.approx(1e-4 * math.sqrt(0.5) / (math.sqrt(2) * 40.0), rel=1e-9)


# ------------------------------------------------------------------------------ pipeline


def _run(targets, points, rng, n=4000):
    from eddyvigil.monitor import Pipeline

    buf = io.StringIO()
    p = Pipeline(targets, summary=buf)
    for pid, y in points:
        p.begin_point("probe-a", {"id": pid, "x": 1.0, "y": y, "z": 0.0} if y is not None
                      else {"id": pid, "x": 1.0, "z": 0.0})
        block = rng.normal(size=(n, 3)) * [0.5, 0.4, 0.4]
        block[:, 1] += 0.5 * block[:, 0]  # <uv> = 0.125
        p.feed("probe-a", block + [5.0 + 20.0 * (y or 0.0), 0.0, 0.0], rate_hz=1000.0)
    p.end("probe-a")
    p.close()
    return [json.loads(t) for t in buf.getvalue().splitlines()]


def test_the_pipeline_gives_each_point_its_derived_targets():
    """Through the real Pipeline: the point line's derived_targets, and the statistics of the
    point carry the derived half-width as their target (the stopping machinery's input)."""
    t = _targets({"production": {"absolute": 0.2}}, {"U": {"relative": 0.05}})
    rng = np.random.default_rng(11)
    pts = [("P0", 0.0), ("P1", 0.01), ("P2", 0.02), ("P3", 0.03), ("P0", 0.0), ("Q", None)]
    lines = [x for x in _run(t, pts, rng) if x["kind"] == "point"]
    assert [x["derived_targets"]["basis"] for x in lines] == [
        None, None, "interpolation of the neighbours", "interpolation of the neighbours",
        "earlier measurement of this point", None]
    assert "no y position" in lines[-1]["derived_targets"]["notes"][0]
    for x in lines:
        assert list(x)[-1] == "statistics"  # the contract order: statistics last
        rows = {r["name"]: r for r in x["statistics"]}
        for d in x["derived_targets"]["statistics"]:
            want = d["half_width"] if d["applied"] else d["plain"]
            assert rows[d["name"]]["target"] == pytest.approx(want, rel=1e-12)
    json.dumps(lines, allow_nan=False)


def test_malformed_neighbours_never_crash_the_derivation():
    from eddyvigil.monitor.budget_cmd import derive_point_targets

    t = _targets({"production": {"absolute": 0.2}})
    bad = [{"kind": "point", "stream": "s", "point": {"id": f"P{i}", "y": y},
            "statistics": [{"name": "U", "value": v, "stderr": "x"}, {"name": "uv"}, 7]}
           for i, (y, v) in enumerate([(0.0, "a"), (0.01, None), (0.02, math.inf), (0.03, 5.0)])]
    bad.append({"kind": "point", "stream": "s", "point": "nonsense"})
    d = derive_point_targets(t, bad, "s", {"id": "P9", "y": 0.04})
    assert d.targets.targets == t.targets  # nothing derived from garbage: plain targets


def test_the_dashboard_shows_the_current_points_derived_targets():
    """The status board notes a target set by a term, and the budget panel's title says the
    current point's derived tolerances (pure functions on the published snapshot)."""
    from eddyvigil.monitor import Pipeline
    from eddyvigil.monitor.dashboard import views
    from eddyvigil.monitor.dashboard.budget_panel import BudgetPanel, derived_text

    t = _targets({"production": {"absolute": 0.2}}, {"U": {"relative": 0.05}})
    rng = np.random.default_rng(12)
    p = Pipeline(t)
    for i, y in enumerate((0.0, 0.01, 0.02)):
        p.begin_point("probe-a", {"id": f"P{i}", "x": 1.0, "y": y, "z": 0.0})
        block = rng.normal(size=(4000, 3)) * [0.5, 0.4, 0.4]
        block[:, 1] += 0.5 * block[:, 0]
        p.feed("probe-a", block + [5.0 + 20.0 * y, 0.0, 0.0], rate_hz=1000.0)
    view = p.publish().streams["probe-a"]
    assert view.derived_targets["basis"] == "interpolation of the neighbours"
    cols = views.status_columns(p.snapshot)
    notes = dict(zip(cols["name"], cols["target"], strict=True))
    applied = {s["name"] for s in view.derived_targets["statistics"] if s["applied"]}
    assert applied and all(notes[n].endswith("(from production)") for n in applied)
    text = derived_text(view)
    assert text.startswith("point P2: production ±0.2 -> ")
    panel = BudgetPanel(height=300)
    panel.update(view, "y")
    assert panel.figure.title.text.endswith(text)
    p.close()


def test_the_flux_tolerance_is_shared_in_proportion_to_the_neighbours_errors():
    """Transport: the three triple moments' half-widths keep (SE(uuv) + SE(vvv) + SE(vww))/2
    at what the term needs (the sum of the equal split, stats/budget.py) and stand in the
    ratio of the neighbours' standard errors (1 : 3 : 0.5 here)."""
    flux = 0.01 + 0.2 * Y + 3.0 * Y**2
    rest = [j for j in range(11) if j != 5]
    stats = {n: (flux[rest] / 3, np.full(10, se)) for n, se in
             (("uuv", 1e-4), ("vvv", 3e-4), ("vww", 0.5e-4))}
    own = {n: flux[5] / 3 for n in stats}
    d = derive(_targets({"turbulent_transport": {"absolute": 0.05}}), Y[5], Y[rest], stats,
               NAMES, own=own)
    tol = {s["name"]: s["half_width"] for s in d.statistics}
    full, _ = derived_tolerances(Y, {n: (flux / 3, np.full(11, 1e-4)) for n in stats},
                                 "turbulent_transport", 0.05)
    assert sum(tol.values()) == pytest.approx(3 * full["uuv"][5], rel=1e-9)
    assert tol["vvv"] / tol["uuv"] == pytest.approx(3.0, rel=1e-9)
    assert tol["vww"] / tol["uuv"] == pytest.approx(0.5, rel=1e-9)


def test_a_point_on_derived_targets_saves_and_loads_with_them():
    """combine's saved states keep the point's targets, [budget] table included (round trip
    through plain data, stats/pointstate.py)."""
    from eddyvigil.stats import PointStatistics
    from eddyvigil.stats.pointstate import from_state, to_state

    rest = [j for j in range(11) if j != 5]
    d = derive(_targets({"production": {"absolute": 0.05}}), Y[5], Y[rest], _stats(rest), NAMES,
               own={"U": U[5], "uv": UV[5]})
    ps = PointStatistics(("u", "v"), 1000.0, targets=d.targets)
    ps.update(np.random.default_rng(2).normal(size=(3000, 2)))
    back = from_state(*to_state(ps))
    assert back.targets == d.targets and back == ps
