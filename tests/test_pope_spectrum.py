"""Pope's model spectrum (simulator) against REFERENCES §7, recomputed with scipy quadrature."""

from __future__ import annotations

import math

import numpy as np
import pytest
from eddyvigil.simulator.signals import PopeGenerator, PopeSpectrum, generate
from eddyvigil.stats.spectra import SpectrumAccumulator, chi2_interval
from scipy import integrate

# REFERENCES §7 check case: u' = 1 m/s (k = 1.5), eps = 1 m^2/s^3, nu = 1.5e-5 m^2/s
# (Re_lambda = 1000)
K, EPS, NU = 1.5, 1.0, 1.5e-5


@pytest.fixture(scope="module")
def model():
    return PopeSpectrum(K, EPS, NU)


def _quad_log(fn, lo, hi, epsrel=1e-9):
    """int_lo^hi fn(kappa) dkappa by scipy.integrate.quad in x = ln kappa (many decades)."""
    val, _ = integrate.quad(
        lambda x: fn(math.exp(x)) * math.exp(x),
        math.log(lo),
        math.log(hi),
        limit=800,
        epsabs=0,
        epsrel=epsrel,
    )
    return val


def test_constants_close_the_integrals_and_match_references(model):
    # REFERENCES §7: c_L = 6.585, c_eta = 0.4018 for Re_lambda = 1000
    assert model.c_L == pytest.approx(6.585, abs=5e-4)
    assert model.c_eta == pytest.approx(0.4018, abs=5e-5)
    lo, hi = 1e-7 / model.L, 200.0 / model.eta
    e = lambda k: float(model.energy(k))  # noqa: E731
    assert _quad_log(e, lo, hi) == pytest.approx(K, rel=1e-6)
    assert _quad_log(lambda k: 2 * NU * k * k * e(k), lo, hi) == pytest.approx(EPS, rel=1e-6)
    # truth scales of the check case (REFERENCES §7 table)
    assert model.eta == pytest.approx(2.4103e-4, rel=5e-5)
    assert model.lambda_g == pytest.approx(0.015, rel=1e-9)
    assert model.re_lambda == pytest.approx(1000.0, rel=1e-9)


def test_compensated_one_dimensional_spectrum_table(model):
    # REFERENCES §7: E11 k1^{5/3} / eps^{2/3} at k1 eta = 0.0024 ... 0.24 (3 digits given)
    table = {0.0024: 0.486, 0.0072: 0.489, 0.024: 0.483, 0.072: 0.441, 0.24: 0.225}
    hi = 200.0 / model.eta
    for k1eta, want in table.items():
        k1 = k1eta / model.eta
        e11 = _quad_log(
            lambda k, k1=k1: float(model.energy(k)) / k * (1 - k1 * k1 / (k * k)), k1, hi
        )
        comp = e11 * k1 ** (5 / 3) / EPS ** (2 / 3)
        assert comp == pytest.approx(want, abs=1.5e-3), k1eta
        assert float(model.e11(k1)) == pytest.approx(e11, rel=2e-4)  # the simulator's grid
    # L11 = pi E11(0) / (2 u'^2) = 0.8099 m and int E11 dk1 = u'^2 (REFERENCES §7)
    assert model.l11 == pytest.approx(0.8099, rel=2e-4)
    # (the grid interpolant is piecewise linear: a coarse quadrature tolerance suffices)
    total = _quad_log(lambda k: float(model.e11(k)), 1e-6 / model.L, 50.0 / model.eta, 1e-4)
    assert total == pytest.approx(model.u_rms**2, rel=2e-3)


def test_generator_spectrum_is_the_model_within_chi2():
    # the generated u has the folded model spectrum: 95 % chi^2 bands cover it in ~95 % of bands
    rate, U = 20_000.0, 5.0
    gen = PopeGenerator([U], 1.5, 4.0, NU, rate, 3)
    x = generate(gen, 1 << 20)
    spec = SpectrumAccumulator(("u",), rate, segment=4096).update(x).snapshot()
    lb = spec.log_binned(60)
    lo, hi = chi2_interval(lb.psd[:, 0], lb.dof)
    truth = np.array(
        [
            np.mean(gen.psd_unit(spec.f_hz[s : s + c]))
            for s, c in zip(lb.first, lb.count, strict=True)
        ]
    )
    truth *= gen.spectrum.u_rms**2
    keep = lb.first >= 2
    inside = ((lo <= truth) & (truth <= hi))[keep]
    assert inside.mean() >= 0.85, inside.mean()
    assert gen.truth()["eps"] == 4.0 and gen.truth()["Re_lambda"] == pytest.approx(500.0)


def test_pope_shaped_generator_keeps_stresses_and_its_stated_eps():
    """The wake scenario's generator: prescribed stresses, L11 as asked, and the ε it states.

    Checks against scipy: the sample covariance (numpy), ``L11`` of the model recomputed by
    quadrature as ``pi E11(0) / (2 u'^2)`` (Pope 2000, Turbulent Flows, §6.5, from memory), and
    ``15 nu <(du/dx)^2>`` by Taylor's hypothesis (REFERENCES §7) from a scipy.signal.welch
    spectrum of the generated u.
    """
    from eddyvigil.simulator.signals import PopeShapeGenerator
    from scipy import signal as sps

    mean = [8.5, 0.0, 0.0]
    stress = [[0.37, -0.05, 0.0], [-0.05, 0.31, 0.0], [0.0, 0.0, 0.26]]
    rate, nu = 20_000.0, 1.5e-5
    gen = PopeShapeGenerator(mean, stress, 0.04, nu, rate, seed=7, skew=[-0.06, 0.1, 0.0])
    sp = gen.spectrum
    e11_0 = _quad_log(lambda k: sp.energy(k) / k, 1e-7 / sp.L, 200.0 / sp.eta)
    assert math.pi * e11_0 / (2 * sp.u_rms**2) == pytest.approx(0.04, rel=2e-3)
    x = generate(gen, 400_000)
    cov = np.cov(x.T)
    # 20 s of a process with T_int ~ 5 ms: standard error of a variance ~ 2 %
    np.testing.assert_allclose(cov, stress, atol=0.03)
    f, s = sps.welch(x[:, 0], fs=rate, nperseg=4096)
    eps = 15 * nu / 8.5**2 * np.trapezoid((2 * math.pi * f) ** 2 * s, f)
    # ε rests on the whole high-frequency band (thousands of segments): scatter ~ 1 %
    assert eps == pytest.approx(gen.epsilon(), rel=0.04)
