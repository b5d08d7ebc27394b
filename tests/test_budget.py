"""k budget across a traverse: derivative scheme, error propagation, check values, the
``budget`` line and command."""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pytest

from eddyvigil.monitor import cli
from eddyvigil.monitor.budget_cmd import budget_line, budget_table, traverse
from eddyvigil.monitor.summary import missing_fields
from eddyvigil.stats.budget import (
    derivative,
    derivative_weights,
    k_from_two_components,
    log_layer_production,
    production_check,
    tke_budget,
)

#: an uneven traverse (m): finer near the centre, as one would measure a wake
Y = np.array([-0.09, -0.05, -0.03, -0.018, -0.01, -0.004, 0.0, 0.007, 0.015, 0.03, 0.06])


# ---------------------------------------------------------------- REFERENCES §8 check values


def test_production_check_value():
    # REFERENCES §8 (Pope 2000 thin shear layer; first-order error propagation, common
    # practice): <uv> = -0.01 +- 0.0005, dU/dy = 50 +- 2 -> P = 0.5, SE = 0.0320. The exact
    # product variance (Goodman 1960, JASA 55:708) adds (0.0005 * 2)^2, below the 4th digit.
    p, se = production_check(-0.01, 0.0005, 50.0, 2.0)
    assert p == pytest.approx(0.5, rel=1e-12)
    first_order = math.sqrt((50 * 0.0005) ** 2 + (0.01 * 2) ** 2)
    assert se == pytest.approx(math.sqrt(first_order**2 + (0.0005 * 2) ** 2), rel=1e-12)
    assert round(se, 4) == round(first_order, 4) == 0.0320


def test_production_check_value_through_the_budget():
    """The same numbers through tke_budget: a linear U (exact derivative, no discretisation
    error) whose three points' SEs give SE(dU/dy) = 2 at the middle point."""
    y = np.array([0.0, 0.01, 0.02])
    # central difference: Var = (se^2 + se^2) / (2 dy)^2 = 4 -> se = 2 * 0.02 / sqrt(2)
    se_u = 2.0 * 0.02 / math.sqrt(2.0)
    stats = {"U": (50.0 * y + 3.0, np.full(3, se_u)), "uv": (np.full(3, -0.01),
                                                             np.full(3, 0.0005))}
    b = tke_budget(np.append(y, 0.03), {k: (np.append(v, v[-1] + (v[-1] - v[-2])),
                                            np.append(s, s[-1])) for k, (v, s) in stats.items()})
    p = b.terms["production"]
    assert p.value[1] == pytest.approx(0.5, rel=1e-12)
    assert p.noise_stderr[1] == pytest.approx(0.0320, abs=5e-5)
    assert p.discretisation[1] == pytest.approx(0.0, abs=1e-9)  # a straight line is exact


def test_log_layer_check_value():
    # REFERENCES §8 (Pope 2000 §7.1): u_tau = 0.5, y = 0.01, kappa = 0.41 -> 30.49 m^2/s^3
    assert round(log_layer_production(0.5, 0.01), 2) == 30.49


def test_k_from_two_components_check_values():
    # REFERENCES §8: uu = 1, vv = 0.5 -> 1.125 (ww = (uu+vv)/2) versus 1.0 (ww = vv);
    # with ww = 0.6 the true k is 1.05
    assert k_from_two_components(1.0, 0.5) == pytest.approx(1.125)
    assert k_from_two_components(1.0, 0.5, "ww=vv") == pytest.approx(1.0)
    assert 0.5 * (1.0 + 0.5 + 0.6) == pytest.approx(1.05)
    with pytest.raises(ValueError):
        k_from_two_components(1.0, 0.5, "ww=0")


# ---------------------------------------------------------------- the derivative scheme


def test_three_point_weights_match_numpy_parabola():
    """Weights against numpy: the derivative of the parabola np.polyfit puts through the
    three points (Lagrange interpolation, exact fit)."""
    rng = np.random.default_rng(3)
    for _ in range(20):
        x = np.sort(rng.uniform(-1, 1, 3))
        f = rng.normal(size=3)
        for at in x:
            ref = np.polyval(np.polyder(np.polyfit(x, f, 2)), at)
            assert derivative_weights(x, at) @ f == pytest.approx(ref, rel=1e-9, abs=1e-9)


def test_derivative_is_exact_for_quadratics_on_an_uneven_grid():
    a, b, c = 2.0, -30.0, 700.0
    f = a + b * Y + c * Y**2
    d = derivative(Y, f, np.zeros_like(Y))
    np.testing.assert_allclose(d.value, b + 2 * c * Y, rtol=1e-10, atol=1e-9)
    # the four-point estimate of the discretisation error is zero for a quadratic too
    np.testing.assert_allclose(d.discretisation, 0.0, atol=1e-8)


def test_discretisation_estimate_is_the_true_error_for_a_cubic():
    """For a cubic the four-point formula is exact, so the estimate equals the error of the
    three-point one (Fornberg 1988: weights exact to the stencil's degree)."""
    f = 1.0 + 2.0 * Y - 40.0 * Y**2 + 3000.0 * Y**3
    exact = 2.0 - 80.0 * Y + 9000.0 * Y**2
    d = derivative(Y, f, np.zeros_like(Y))
    np.testing.assert_allclose(d.discretisation, np.abs(d.value - exact), rtol=1e-8, atol=1e-10)
    assert np.all(d.discretisation[1:-1] > 0)


def test_propagated_variance_matches_monte_carlo():
    """Var(D) = sum w_j^2 SE_j^2 (points independent; REFERENCES §8) against 20 000 seeded
    draws: within 5 %."""
    rng = np.random.default_rng(11)
    f = 8.0 - 1.5 * np.exp(-np.log(2) * (Y / 0.05) ** 2)
    se = rng.uniform(0.002, 0.02, size=Y.size)
    d = derivative(Y, f, se)
    draws = f + se * rng.standard_normal((20_000, Y.size))
    weights = np.array([derivative(Y, e, se).value for e in np.eye(Y.size)]).T  # D = W f
    mc = draws @ weights.T
    np.testing.assert_allclose(mc.std(axis=0, ddof=1), d.noise_stderr, rtol=0.05)
    np.testing.assert_allclose(mc.mean(axis=0), d.value, atol=4 * d.noise_stderr.max() / 100)


def test_production_variance_matches_monte_carlo():
    """The SE of P = -<uv> dU/dy (product of independent factors, Goodman 1960) against
    seeded draws: within 5 %, also at the centre where both factors vanish."""
    rng = np.random.default_rng(12)
    xi = Y / 0.05
    U = 10.0 - 1.5 * np.exp(-np.log(2) * xi**2)
    uv = -0.16 * xi * np.exp(-(xi**2) / 2)
    se_u, se_uv = np.full(Y.size, 0.01), np.full(Y.size, 0.004)
    b = tke_budget(Y, {"U": (U, se_u), "uv": (uv, se_uv)})
    p = b.terms["production"]
    n = 20_000
    du = U + se_u * rng.standard_normal((n, Y.size))
    duv = uv + se_uv * rng.standard_normal((n, Y.size))
    weights = np.array([derivative(Y, e, se_u).value for e in np.eye(Y.size)]).T
    mc = -duv * (du @ weights.T)
    np.testing.assert_allclose(mc.std(axis=0, ddof=1), p.noise_stderr, rtol=0.05)


def test_no_standard_error_means_no_interval():
    f = Y**2
    se = np.full(Y.size, 0.01)
    se[4] = np.nan  # a point whose statistic has no honest interval
    d = derivative(Y, f, se)
    assert np.isnan(d.noise_stderr[3:6]).all()
    assert np.isfinite(d.noise_stderr[[0, 1, 8, 9, 10]]).all()


def test_too_few_points_give_no_terms():
    b = tke_budget([0.0, 0.01], {"U": ([1.0, 2.0], [0.1, 0.1]), "uv": ([0.0, 0.0], [0.1, 0.1])})
    assert all(t is None for t in b.terms.values())
    assert any("three" in a for a in b.assumptions)
    with pytest.raises(ValueError):
        derivative([0.0, 0.02, 0.01], [1.0, 2.0, 3.0], [0.1, 0.1, 0.1])


def test_transport_and_residual_on_known_profiles():
    """Quadratic flux, linear U: every term exact; residual = eps - P - T (Pope 2000 §5)."""
    U = 5.0 + 20.0 * Y
    uv = -0.01 + 0.0 * Y
    uuv, vvv, vww = 0.01 * Y**2, 0.02 * Y**2, 0.03 * Y**2
    eps = 0.5 + Y
    zero = np.zeros(Y.size)
    b = tke_budget(Y, {"U": (U, zero), "uv": (uv, zero), "uuv": (uuv, zero),
                       "vvv": (vvv, zero), "vww": (vww, zero), "eps": (eps, zero)})
    np.testing.assert_allclose(b.terms["production"].value, 0.2, rtol=1e-9)
    np.testing.assert_allclose(b.terms["turbulent_transport"].value, -0.06 * Y, atol=1e-10)
    np.testing.assert_allclose(b.terms["residual"].value, eps - 0.2 + 0.06 * Y, atol=1e-10)
    np.testing.assert_allclose(b.pressure_lumley.value, -0.4 * (-0.06 * Y), atol=1e-10)
    assert b.terms["advection"] is None
    # without w, <wwv> = <vvv> (REFERENCES §8, common practice)
    b2 = tke_budget(Y, {"U": (U, zero), "uv": (uv, zero), "uuv": (uuv, zero),
                        "vvv": (vvv, zero)})
    # flux = (0.01 + 0.02 + 0.02) Y^2 / 2, so T = -0.05 Y
    np.testing.assert_allclose(b2.terms["turbulent_transport"].value, -0.05 * Y, atol=1e-10)
    assert any("<wwv> taken equal to <vvv>" in a for a in b2.assumptions)
    assert b2.terms["residual"] is None


# ---------------------------------------------------------------- the budget line and command


def _point_line(pid, y, stats, stream="probe-a", x=1.0):
    return {"v": 1, "kind": "point", "stream": stream, "point": {"id": pid, "x": x, "y": y,
                                                                  "z": 0.0},
            "confidence": 0.95, "complete": True,
            "statistics": [{"name": n, "value": v, "stderr": s} for n, (v, s) in stats.items()]}


def _lines():
    out = []
    for i, y in enumerate(Y):
        out.append(_point_line(f"P{i}", float(y), {"U": (5.0 + 20.0 * y, 0.01),
                                                  "uv": (-0.01, 0.0005),
                                                  "uuv": (0.01 * y * y, 1e-4),
                                                  "vvv": (0.02 * y * y, 1e-4)}))
    return out


def test_budget_line_fields_and_values():
    lines = _lines()[::-1]  # unordered on purpose
    lines.append(_point_line("Q", 0.0, {"U": (1.0, 0.1)}, x=2.0))  # another station
    line = budget_line("probe-a", lines)
    assert missing_fields(line) == []
    assert line["points"] == [f"P{i}" for i in range(Y.size)]
    np.testing.assert_allclose(line["production"]["value"], 0.2, rtol=1e-9)
    assert line["dissipation"] is None and line["residual"] is None
    assert any("another station" in a for a in line["assumptions"])
    json.dumps(line, allow_nan=False)  # strict JSON once written (non-finite -> null)


def test_traverse_keeps_the_latest_line_of_a_point():
    a = _point_line("P1", 0.01, {"U": (1.0, 0.1)})
    b = _point_line("P1", 0.01, {"U": (2.0, 0.1)})
    points, _ = traverse([a, b], "probe-a")
    assert len(points) == 1 and points[0]["statistics"][0]["value"] == 2.0


def test_budget_command(tmp_path, capsys):
    path = tmp_path / "summary.jsonl"
    path.write_text("".join(json.dumps(x) + "\n" for x in _lines()), encoding="utf-8")
    assert cli.main(["budget", str(path)]) == 0
    out = capsys.readouterr().out
    assert "production" in out and "P0" in out and "assumptions:" in out
    assert cli.main(["budget", str(path), "--json"]) == 0
    line = json.loads(capsys.readouterr().out)
    assert line["kind"] == "budget"
    assert budget_table(line).splitlines()[0].startswith("k budget of stream probe-a")
    assert cli.main(["budget", str(tmp_path / "none.jsonl")]) == 4
    assert cli.main(["budget", str(path), "--stream", "nope"]) == 2
    (tmp_path / "bad.jsonl").write_text("{not json\n", encoding="utf-8")
    assert cli.main(["budget", str(tmp_path / "bad.jsonl")]) == 4
    err = capsys.readouterr().err
    assert err.count("eddyvigil budget:") == 3


def test_pipeline_appends_a_budget_line_after_each_point_of_a_traverse():
    """DESIGN §11: every finished point is followed by the stream's budget line; before three
    positions its terms are null and ``reason`` says why (three-point differences, Fornberg
    1988: a derivative needs three positions)."""
    from eddyvigil.monitor import Pipeline

    rng = np.random.default_rng(5)
    buf = io.StringIO()
    p = Pipeline(summary=buf)
    for i, y in enumerate((0.0, 0.01, 0.03, 0.04)):
        p.begin_point("probe-a", {"id": f"P{i}", "x": 0.0, "y": y, "z": 0.0})
        p.feed("probe-a", rng.normal(size=(2000, 3)) + [5.0 + 10 * y, 0, 0], rate_hz=1000.0)
    p.end("probe-a")
    p.close()
    lines = [json.loads(t) for t in buf.getvalue().splitlines()]
    kinds = [x["kind"] for x in lines]
    assert kinds == ["point", "budget"] * 4 + ["run"]
    for early, n in ((lines[1], 1), (lines[3], 2)):
        assert missing_fields(early) == [] and len(early["points"]) == n
        assert all(early[t] is None for t in ("production", "turbulent_transport", "residual"))
        assert "need at least three" in early["reason"]
    assert lines[5]["reason"] is None and lines[5]["production"] is not None
    last = lines[-2]
    assert missing_fields(last) == [] and last["points"] == ["P0", "P1", "P2", "P3"]
    assert len(last["production"]["value"]) == 4


def _field_lines(xs, main_x):
    """Points on stations ``xs`` at the positions Y: U = 5 + 20 y + 3 x + 0.5 x^2 (quadratic in
    x), k = 0.3 + x y, V = 0.1, uu - vv = 0.05; the main station has the most points."""
    out = []
    for x in xs:
        ys = Y if x == main_x else Y[::2]  # other stations measure every second position
        for i, y in enumerate(ys):
            stats = {"U": (5 + 20 * y + 3 * x + 0.5 * x * x, 0.01), "V": (0.1, 0.005),
                     "uv": (-0.01, 0.0005), "uu": (0.2, 0.002), "vv": (0.15, 0.002),
                     "k": (0.3 + x * y, 0.003), "uuv": (0.0, 1e-4), "vvv": (0.0, 1e-4),
                     "eps": (0.4, 0.01)}
            out.append(_point_line(f"x{x}-{i}", float(y), stats, x=float(x)))
    return out


def test_streamwise_terms_from_other_stations():
    """Normal-stress production -(uu - vv) dU/dx and advection -(U dk/dx + V dk/dy) (Pope
    2000 §5) from stations at other x: exact for a quadratic in x with three stations."""
    line = budget_line("probe-a", _field_lines([0.8, 1.0, 1.3], main_x=1.0))
    dudx = 3 + 1.0  # d/dx (3 x + 0.5 x^2) at x = 1
    kept = np.array([y in set(Y[::2]) for y in Y])
    prod = np.array([np.nan if v is None else v for v in line["production"]["value"]])
    np.testing.assert_allclose(prod[kept], 0.2 - 0.05 * dudx, atol=1e-12)
    assert np.isnan(prod[~kept]).all()  # no other-station data there: not half a term
    adv = np.array([np.nan if v is None else v for v in line["advection"]["value"]])
    u = 5 + 20 * Y + 3 + 0.5
    np.testing.assert_allclose(adv[kept], -(u * Y + 0.1 * 1.0)[kept], rtol=1e-9)
    assert np.isnan(adv[~kept]).all()
    # three stations: no discretisation estimate along x, so no interval (said so)
    assert all(v is None for v in line["advection"]["ci_low"])
    assert any("fewer than four stations" in a for a in line["assumptions"])
    assert line["residual"] is not None


def test_two_stations_give_the_two_point_difference():
    line = budget_line("probe-a", _field_lines([1.0, 1.2], main_x=1.0))
    kept = np.array([y in set(Y[::2]) for y in Y])
    dudx = (3 * 0.2 + 0.5 * (1.44 - 1.0)) / 0.2
    prod = np.array([np.nan if v is None else v for v in line["production"]["value"]])
    np.testing.assert_allclose(prod[kept], 0.2 - 0.05 * dudx, rtol=1e-9)
    assert any("2 stations" in a for a in line["assumptions"])


def test_malformed_summary_lines_never_crash_the_budget(tmp_path, capsys):
    """Bad input is reported, not raised: odd fields, missing statistics, positions a
    rounding error apart, non-numeric values."""
    lines = _lines()
    lines[0]["statistics"] = "not a list"
    lines[1]["statistics"][0]["value"] = "fast"
    lines[2]["point"]["y"] = True
    lines[3]["statistics"][1]["stderr"] = None
    lines.append({"kind": "point", "stream": "probe-a", "point": None})
    lines.append(_point_line("Z", float(Y[-1]) * (1 + 1e-15), {"U": (1.0, 0.1)}))
    lines.append(["not", "an", "object"])
    path = tmp_path / "odd.jsonl"
    path.write_text("".join(json.dumps(x) + "\n" for x in lines), encoding="utf-8")
    assert cli.main(["budget", str(path), "--json"]) == 0
    line = json.loads(capsys.readouterr().out)
    assert missing_fields(line) == []
    json.dumps(line, allow_nan=False)


@pytest.mark.parametrize("term", ["production", "turbulent_transport"])
def test_derived_tolerances_give_the_term_its_half_width(term):
    """Statistics drawn with SE = derived tolerance / z give the term a Monte Carlo spread
    within H / z at every point (5 % tolerance), and the binding point sits at H / z:
    the tolerances are neither loose nor wasteful (seeded draws against the propagation
    formula of stats/budget.py)."""
    from eddyvigil.stats.budget import derived_tolerances

    z = 1.959963984540054
    H = 0.05
    # quadratic profiles: the discretisation estimate is zero, all of H goes to noise
    U = 8.0 + 30.0 * Y + 200.0 * Y**2
    uv = -0.02 - 0.5 * Y
    flux = 0.01 + 0.2 * Y + 3.0 * Y**2
    stats = {"U": (U, np.full(Y.size, 0.01)), "uv": (uv, np.full(Y.size, 0.001)),
             "uuv": (flux / 3, np.full(Y.size, 1e-4)), "vvv": (flux / 3, np.full(Y.size, 1e-4)),
             "vww": (flux / 3, np.full(Y.size, 1e-4))}
    tol, unreachable = derived_tolerances(Y, stats, term, H)
    assert not unreachable.any()
    rng = np.random.default_rng(21)
    n = 20_000
    weights = np.array([derivative(Y, e, np.zeros(Y.size)).value for e in np.eye(Y.size)]).T
    if term == "production":
        du = U + tol["U"] / z * rng.standard_normal((n, Y.size))
        duv = uv + tol["uv"] / z * rng.standard_normal((n, Y.size))
        spread = (-duv * (du @ weights.T)).std(axis=0)
    else:
        # the three triple moments perfectly correlated (the bound the budget assumes)
        e = rng.standard_normal((n, Y.size))
        f = 1.5 * (flux / 3 + tol["uuv"] / z * e)
        spread = (f @ weights.T).std(axis=0)
    assert np.all(spread <= 1.05 * H / z), spread * z / H
    assert spread.max() >= 0.9 * H / z, spread * z / H


def test_budget_target_option(tmp_path, capsys):
    path = tmp_path / "summary.jsonl"
    lines = _lines()
    for x in lines:
        for s in x["statistics"]:
            half = 1.96 * s["stderr"]
            s["ci_low"], s["ci_high"] = s["value"] - half, s["value"] + half
        x["duration_s"] = 10.0
    path.write_text("".join(json.dumps(x) + "\n" for x in lines), encoding="utf-8")
    assert cli.main(["budget", str(path), "--target", "production=10%"]) == 0
    out = capsys.readouterr().out
    assert "production within ±0.02 m^2/s^3" in out and "  uv: P0:" in out
    assert cli.main(["budget", str(path), "--target", "dissipation=1"]) == 2
    assert cli.main(["budget", str(path), "--target", "production=abc"]) == 2
