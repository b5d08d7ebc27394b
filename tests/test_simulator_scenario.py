"""Scenarios: loading, refusal of bad files, and the wake's truth against closed forms."""

from __future__ import annotations

import math

import numpy as np
import pytest

from eddyvigil.simulator.scenario import (
    ScenarioError,
    builtin_scenarios,
    load_scenario,
    moment_names,
    point_truth,
)
from eddyvigil.simulator.signals import generate


def test_builtin_scenarios_load_and_have_truth():
    names = builtin_scenarios()
    assert {"wake", "drift", "lda", "glitches"} <= set(names)
    for name in names:
        sc = load_scenario(name)
        assert sc.points
        for p in sc.points:
            t = point_truth(sc, p)
            st = t["statistics"]
            assert st[sc.columns[0].upper()] is not None
            assert all(n in st for n in moment_names(sc.columns, 2) + moment_names(sc.columns, 3))


def test_moment_names_follow_column_order():
    # DESIGN §3: letters in column order; 10 third and 15 fourth moments for three components
    assert moment_names("uvw", 2) == ["uu", "uv", "uw", "vv", "vw", "ww"]
    assert len(moment_names("uvw", 3)) == 10 and len(moment_names("uvw", 4)) == 15
    assert moment_names("uv", 3) == ["uuu", "uuv", "uvv", "vvv"]


def test_wake_profiles_symmetry_and_budget():
    sc = load_scenario("wake")
    assert 7 <= len(sc.points) <= 9
    p = sc.raw["flow"]
    truths = {pt.y: point_truth(sc, pt) for pt in sc.points}
    for y, t in truths.items():
        if y <= 0:
            continue
        a, b = t["statistics"], truths[-y]["statistics"]
        for name in ("U", "uu", "vv", "ww", "uuu", "uvv", "k", "eps"):
            assert a[name] == pytest.approx(b[name], rel=1e-12, abs=1e-15)
        for name in ("uv", "uuv", "vvv"):  # odd in y (plane wake symmetry, common practice)
            assert a[name] == pytest.approx(-b[name], rel=1e-9, abs=1e-15)
    for y, t in truths.items():
        st, bud = t["statistics"], t["budget"]
        # k = (uu + vv + ww)/2 (DESIGN §3)
        assert st["k"] == pytest.approx(0.5 * (st["uu"] + st["vv"] + st["ww"]))
        # production -<uv> dU/dy with the closed-form gradient of the Gaussian deficit
        # U = U_inf - U_s exp(-ln2 y^2/b^2) (Pope 2000, Turbulent Flows, §5.5 and §8)
        b_ = p["half_width"]
        dudy = p["U_s"] * 2 * math.log(2) * y / b_**2 * math.exp(-math.log(2) * (y / b_) ** 2)
        assert bud["production"] == pytest.approx(-st["uv"] * dudy, rel=1e-6, abs=1e-9)
        assert bud["residual"] == pytest.approx(
            bud["dissipation"] - bud["production"] - bud["turbulent_transport"]
        )
        # eps of Pope's model spectrum (the wake's spectrum = "pope"); the scales from it by
        # the formulas of REFERENCES §7 (Pope 2000, Turbulent Flows, §6.1)
        assert bud["dissipation"] == pytest.approx(st["eps"])
        assert st["eta"] == pytest.approx((sc.nu**3 / st["eps"]) ** 0.25)
        assert st["lambda_g"] == pytest.approx(math.sqrt(15 * sc.nu * st["uu"] / st["eps"]))
        assert st["Re_lambda"] == pytest.approx(math.sqrt(st["uu"]) * st["lambda_g"] / sc.nu)
        assert 0.002 < st["Tint_u"] < 0.005  # "a few ms": L11 / U
    # transport: independent numerical derivative (numpy.gradient on a fine grid of the flux
    # 0.5(uuv + vvv + wwv) built from truth records at neighbouring positions)
    from eddyvigil.simulator.scenario import PlaneWake

    wake = PlaneWake(**p)
    ys = np.linspace(-0.12, 0.12, 2401)
    flux = np.array([wake.transport_flux(y) for y in ys])
    grad = np.gradient(flux, ys)
    for y, t in truths.items():
        assert t["budget"]["turbulent_transport"] == pytest.approx(
            -np.interp(y, ys, grad), abs=2e-3
        )


@pytest.mark.slow
def test_a_wake_point_reproduces_its_truth():
    sc = load_scenario("wake")
    pt = sc.points[2]
    truth = point_truth(sc, pt, seed=4)["statistics"]
    x = generate(sc.make_generator(pt, seed=4), 1_200_000, block=4096)
    d = x - x.mean(axis=0)
    # tolerances: a few standard errors 2 sigma^2 T_int/T style (REFERENCES §1, §5), T = 300 s
    for i, c in enumerate("UVW"):
        se = math.sqrt(2 * np.var(x[:, i]) * truth["Tint_u"] / 300.0)
        assert x[:, i].mean() == pytest.approx(truth[c], abs=5 * se)
    cov = d.T @ d / d.shape[0]
    k = truth["k"]
    for name, (i, j) in {"uu": (0, 0), "vv": (1, 1), "ww": (2, 2), "uv": (0, 1)}.items():
        assert cov[i, j] == pytest.approx(truth[name], abs=0.03 * k)
    uuv = np.mean(d[:, 0] ** 2 * d[:, 1])
    vvv = np.mean(d[:, 1] ** 3)
    assert uuv == pytest.approx(truth["uuv"], abs=0.1 * k**1.5)
    assert vvv == pytest.approx(truth["vvv"], abs=0.1 * k**1.5)


def test_user_scenario_file(tmp_path):
    f = tmp_path / "mine.toml"
    f.write_text(
        """
[scenario]
name = "bench"
rate_hz = 1000.0
columns = ["u", "v"]
[[points]]
id = "A"
mean = [3.0, 0.1]
stress = [[0.09, -0.02], [-0.02, 0.04]]
tint_s = 0.01
shedding = { frequency_hz = 20.0, amplitude = [0.0, 0.1] }
""",
        encoding="utf-8",
    )
    sc = load_scenario(str(f))
    assert sc.name == "bench" and sc.columns == ("u", "v")
    st = point_truth(sc, sc.points[0])["statistics"]
    assert st["vv"] == pytest.approx(0.04 + 0.1**2 / 2)
    # two components: the truth's k follows the monitor's convention, k = 3/4 (uu + vv)
    # (DESIGN §3; the ww = (uu + vv)/2 assumption is common practice)
    assert st["k"] == pytest.approx(0.75 * (st["uu"] + st["vv"]), rel=1e-12)
    assert sc.make_generator(sc.points[0], 1).next_block(10).shape == (10, 2)


@pytest.mark.parametrize(
    "body, words",
    [
        ("[scenario]\nrate_hz = 'fast'\n", "not valid TOML|rate_hz"),
        ("[scenario]\nname='x'\n", "needs"),
        ("[[points]]\nmean=[1.0,0,0]\nstress=[[1,2,0],[2,1,0],[0,0,1]]\n", "positive definite"),
        (
            "[[points]]\nmean=[1.0,0,0]\nstress=[[1,0,0],[0,1,0],[0,0,1]]\ncolour='red'\n",
            "unknown key",
        ),
        ("[flow]\nkind='jet'\n", "kind must be"),
        (
            "[[points]]\nmean=[1.0]\nstress=[[1.0]]\ntint_s=0.01\n[faults]\nsparks={}\n",
            "unknown fault",
        ),
        ("[scenario\n", "not valid TOML"),
    ],
)
def test_bad_scenarios_are_refused_clearly(tmp_path, body, words):
    f = tmp_path / "bad.toml"
    f.write_text(body, encoding="utf-8")
    with pytest.raises(ScenarioError, match=words):
        sc = load_scenario(str(f))
        for p in sc.points:
            point_truth(sc, p)


def test_unknown_builtin_name():
    with pytest.raises(ScenarioError, match="no built-in scenario"):
        load_scenario("tornado")
