"""Dissipation rate, small scales and peaks against published check values and known spectra."""

import math

import numpy as np
import pytest
from eddyvigil.simulator.signals import PopeGenerator, VonKarmanGenerator, generate, von_karman_psd
from eddyvigil.stats.dissipation import (
    C1_DEFAULT,
    NU_AIR_20C,
    Quantity,
    dissipation,
    find_peaks,
    inertial_fit,
    noise_floor,
    scales,
)
from eddyvigil.stats.spectra import SpectrumAccumulator, SpectrumSnapshot
from scipy import integrate

from tests.processes import ar1


def model_snapshot(f_hz, psd, rate_hz, dof=1e9, columns=("u",)):
    """A SpectrumSnapshot holding an exact model spectrum (huge dof: no scatter)."""
    n = 2 * (len(f_hz) - 1)
    from scipy.signal import get_window

    p = np.asarray(psd, dtype=np.float64)
    p = p[:, None] if p.ndim == 1 else p
    return SpectrumSnapshot(
        tuple(columns),
        rate_hz,
        n,
        10**6,
        np.asarray(f_hz),
        p,
        np.full(len(f_hz), dof),
        get_window("hann", n),
    )


def test_check_case_scales():
    # REFERENCES §7 check case: u' = 1, eps = 1, nu = 1.5e-5 -> eta, tau_eta, lambda_g, Re_lambda
    eta, tau, lam, rel = scales(Quantity(1.0, 0.01, 0.98, 1.02), 1.5e-5, 1.0)
    assert eta.value == pytest.approx(2.4103e-4, rel=5e-5)
    assert tau.value == pytest.approx(3.8730e-3, rel=5e-5)
    assert lam.value == pytest.approx(0.015, rel=5e-5)
    assert rel.value == pytest.approx(1000.0, rel=5e-5)
    # propagated: eta ~ eps^-1/4, tau ~ eps^-1/2, Re_lambda ~ eps^-1/2 (log errors scale by the
    # power)
    assert eta.rel == pytest.approx(0.25 * 0.01) and tau.rel == pytest.approx(0.5 * 0.01)
    assert eta.ci_low < eta.value < eta.ci_high


def test_frequency_domain_check_value_and_exact_power_law():
    # REFERENCES §7: eps = 1, C1 = 0.49 -> E11(100 /m) = 2.2744e-4; at U = 10, f = 159.15 Hz, S =
    # 1.4290e-4
    U, eps = 10.0, 1.0
    f = np.linspace(0, 10_000, 8193)
    k1 = 2 * np.pi * np.maximum(f, 1e-9) / U
    psd = 2 * np.pi / U * C1_DEFAULT * eps ** (2 / 3) * k1 ** (-5 / 3)  # S = 2 pi E11 / U
    assert (C1_DEFAULT * 100.0 ** (-5 / 3)) == pytest.approx(2.2744e-4, rel=5e-5)
    assert np.interp(159.15, f, psd) == pytest.approx(1.4290e-4, rel=2e-3)
    q, rng = inertial_fit(model_snapshot(f, psd, 20_000.0), U)
    assert q.value == pytest.approx(1.0, rel=1e-9)
    assert rng[1] / rng[0] > 100  # the whole power law is flat


def test_von_karman_integral_and_inertial_epsilon():
    # REFERENCES §7: int S df = sigma^2 (a = 70.780) and eps = 0.714 sigma^3 / L for C1 = 0.49
    sigma2, L, U = 2.0, 0.5, 10.0
    total, _ = integrate.quad(lambda f: von_karman_psd(f, sigma2, L, U), 0, np.inf, limit=500)
    assert total == pytest.approx(sigma2, rel=1e-8)
    f = np.linspace(0, 200_000, 1 << 16 | 1)
    q, rng = inertial_fit(model_snapshot(f, von_karman_psd(f, sigma2, L, U), 400_000.0), U)
    assert q.value == pytest.approx(0.714 * sigma2**1.5 / L, rel=0.01)
    assert rng[0] > U / L  # the fit sits above the energy-containing range


def test_von_karman_generator_inertial_fit_within_interval():
    # simulator von Karman stream: its inertial tail implies eps = 0.714 sigma^3 / L
    gen = VonKarmanGenerator([10.0], [[1.0]], 0.05, 20_000.0, 3)
    x = generate(gen, 1 << 20)
    spec = SpectrumAccumulator(("u",), 20_000.0, segment=8192).update(x).snapshot()
    q, _ = inertial_fit(spec, 10.0)
    assert q.ci_low <= gen.epsilon() <= q.ci_high


def _pope_stream(seed, n, rate=20_000.0, U=5.0, eps=4.0, cols=2, segment=16384):
    gen = PopeGenerator([U] + [0.0] * (cols - 1), 1.5, eps, 1.5e-5, rate, seed)
    x = generate(gen, n)
    names = ("u", "v", "w")[:cols]
    return gen, x, SpectrumAccumulator(names, rate, segment=segment).update(x).snapshot()


def test_pope_stream_resolved_gives_iso_and_isotropy_ratio_two():
    gen, x, spec = _pope_stream(1, 1 << 20)
    d = dissipation(spec, 5.0, nu=1.5e-5, variance=float(x[:, 0].var()))
    truth = gen.truth()
    assert d.eps_method.startswith("iso")
    assert d.eps_iso.ci_low <= truth["eps"] <= d.eps_iso.ci_high
    assert d.eps_inertial.ci_low <= truth["eps"] <= d.eps_inertial.ci_high
    # local isotropy: <(dv/dx)^2>/<(du/dx)^2> = 2 (REFERENCES §7)
    assert d.isotropy_ratio.ci_low <= 2.0 <= d.isotropy_ratio.ci_high
    assert d.nu_source == "point" and d.floors["u"] is None and d.peaks == ()
    assert d.eta.value == pytest.approx(truth["eta"], rel=0.01)


def test_unresolved_dissipation_range_falls_back_to_inertial():
    # sampled at 2 kHz the dissipation range (f_eta = U/(2 pi eta) ~ 4.7 kHz) lies beyond Nyquist
    gen, x, spec = _pope_stream(2, 1 << 19, rate=2_000.0, segment=2048, cols=1)
    d = dissipation(spec, 5.0, nu=1.5e-5)
    assert d.eps_iso.stderr is None and "lower bound" in d.eps_iso.reason
    assert d.eps_method.startswith("inertial")
    assert d.eps.ci_low <= gen.truth()["eps"] <= d.eps.ci_high


def test_no_inertial_range_no_number():
    # AR(1) (exponential ACF): compensated spectrum ~ f^(-1/3) at high f, never flat; the
    # derivative spectrum is flat up to Nyquist, never resolved -> eps is null with a reason
    rng = np.random.default_rng(4)
    x = ar1(rng, 1 << 18, 1, 0.9) + 10.0
    spec = SpectrumAccumulator(("u",), 1000.0, segment=4096).update(x).snapshot()
    d = dissipation(spec, 10.0)
    assert d.eps.value is None and d.eps_inertial.value is None
    assert "no inertial range" in d.eps_inertial.reason
    assert d.eps_method.startswith("none")
    assert d.eta.value is None and d.Re_lambda.value is None
    assert d.nu == NU_AIR_20C and d.nu_source == "default"


def test_quantisation_noise_raises_eps_iso_unless_floor_removed():
    # REFERENCES §6: white quantisation noise adds q^2/(6 dt^2) to <(du/dt)^2> for a first
    # difference; q = 0.01, dt = 1e-4, U = 10, nu = 1.5e-5 -> +3.75e-3 m^2/s^3. The spectral
    # estimate weights with (2 pi f)^2 instead of (2 sin(pi f dt)/dt)^2; over a white floor
    # up to Nyquist the ratio of the two integrals is pi^2/6, so it adds 3.75e-3 * pi^2/6.
    q, rate, U, nu = 0.01, 10_000.0, 10.0, 1.5e-5
    assert 15 * nu / U**2 * q**2 / (6 * 1e-8) == pytest.approx(3.75e-3)
    gen = PopeGenerator([U], 0.375, 0.01, nu, rate, 5)
    x = generate(gen, 1 << 20)
    xq = np.round(x / q) * q
    clean = SpectrumAccumulator(("u",), rate, segment=8192).update(x).snapshot()
    noisy = SpectrumAccumulator(("u",), rate, segment=8192).update(xq).snapshot()
    d_clean = dissipation(clean, U, nu=nu, detect_floor=False)
    d_raw = dissipation(noisy, U, nu=nu, detect_floor=False)
    d_det = dissipation(noisy, U, nu=nu)
    raise_ = 3.75e-3 * math.pi**2 / 6
    assert d_raw.eps_iso.value - d_clean.eps_iso.value == pytest.approx(raise_, rel=0.05)
    floor = d_det.floors["u"]
    assert floor is not None and floor.level == pytest.approx(q**2 / 12 * 2 / rate, rel=0.05)
    assert noise_floor(clean) is None
    # detected and removed: the bias is gone to within a tenth of the raise
    assert abs(d_det.eps_iso.value - d_clean.eps_iso.value) < 0.1 * raise_


def test_sinusoid_on_v_found_within_one_bin():
    # 50 Hz on v holding 10 % of its variance (REFERENCES §7 pitfalls: mains hum / shedding)
    rng = np.random.default_rng(6)
    rate, n = 2000.0, 1 << 18
    x = ar1(rng, n, 2, 0.95)
    t = np.arange(n) / rate
    amp = math.sqrt(2 * 0.1 / 0.9)  # A^2/2 = 0.1 of the total (1 + A^2/2)
    x[:, 1] += amp * np.sin(2 * math.pi * 50.0 * t + 0.3)
    spec = SpectrumAccumulator(("u", "v"), rate, segment=2048).update(x).snapshot()
    peaks = find_peaks(spec)
    assert len(peaks) == 1
    p = peaks[0]
    assert p.component == "v" and abs(p.f_hz - 50.0) <= spec.df_hz
    assert p.fraction == pytest.approx(0.10, abs=0.015)


@pytest.mark.slow
def test_broadband_streams_report_no_peak():
    # broadband (AR(1) and white) points: a false peak in at most 5 % of points
    hits = 0
    for seed in range(200):
        rng = np.random.default_rng(1000 + seed)
        x = np.c_[ar1(rng, 1 << 16, 1, 0.9), rng.normal(size=1 << 16)]
        spec = SpectrumAccumulator(("u", "v"), 1000.0, segment=1024).update(x).snapshot()
        hits += bool(find_peaks(spec))
    assert hits / 200 <= 0.05, hits


def test_white_noise_alone_gives_no_eps_and_high_intensity_refuses_taylor():
    # white noise: a floor and nothing above it -> no derivative estimate, no inertial range
    rng = np.random.default_rng(9)
    x = 10.0 + 0.1 * rng.standard_normal((1 << 17, 1))
    spec = SpectrumAccumulator(("u",), 1000.0, segment=1024).update(x).snapshot()
    d = dissipation(spec, 10.0)
    assert d.floors["u"] is not None
    assert d.eps.value is None and d.eps_iso.value is None and "floor" in d.eps_iso.reason
    # u'/U = 0.8: Taylor's hypothesis does not hold (REFERENCES §7 pitfalls), so no eps at all
    d2 = dissipation(spec, 0.125, variance=0.01)
    assert d2.eps.value is None and "Taylor" in d2.eps_method


def test_degenerate_streams_through_the_pipeline_never_raise():
    import io
    import json

    from eddyvigil.monitor.pipeline import Pipeline

    class Clock:
        t = 0.0

        def __call__(self):
            return self.t

    for block in (
        np.full((40_000, 3), 5.0),
        1e-300 * np.random.default_rng(1).standard_normal((40_000, 3)),
    ):
        buf = io.StringIO()
        p = Pipeline(summary=buf, clock=Clock())
        for i in range(0, block.shape[0], 4096):
            assert p.feed("s", block[i : i + 4096], rate_hz=1000.0) is None
        p.publish()
        p.end("s")
        p.close()
        line = json.loads(buf.getvalue().splitlines()[0])
        rows = {r["name"]: r for r in line["statistics"]}
        assert rows["eps"]["value"] is None and rows["eps"]["reason"]
        assert p.internal_errors == []


def test_user_fit_range_is_used_as_given():
    # an exact -5/3 law (REFERENCES §7 frequency-domain form) fitted only over 100-300 Hz
    U = 10.0
    f = np.linspace(0, 10_000, 8193)
    k1 = 2 * np.pi * np.maximum(f, 1e-9) / U
    psd = 2 * np.pi / U * C1_DEFAULT * 0.5 ** (2 / 3) * k1 ** (-5 / 3)
    q, rng = inertial_fit(model_snapshot(f, psd, 20_000.0), U, fit_range_hz=(100.0, 300.0))
    assert q.value == pytest.approx(0.5, rel=1e-9)
    assert 100.0 <= rng[0] < rng[1] <= 300.0
    q2, rng2 = inertial_fit(model_snapshot(f, psd, 20_000.0), U, fit_range_hz=(100.0, 100.5))
    assert q2.value is None and "given range" in q2.reason and rng2 is None


def test_quantiles_without_scipy_checks_are_scipys_to_the_bit():
    # reference: scipy.stats.chi2.ppf / chi2.median / norm.ppf (the dissipation code calls their
    # formulas directly, skipping argument checks that cost 30-50x the value)
    from eddyvigil.stats.dissipation import _chi2_quantile, _z
    from scipy import stats as sst

    for c in (0.6827, 0.9, 0.95, 0.99):
        assert _z(c) == float(sst.norm.ppf(0.5 + c / 2))
    for dof in (1.0, 3.7, 200.0, 569.4, 1e4):
        for p in (0.5, 0.999, 1 - 0.01 / 8190):
            assert float(_chi2_quantile(p, dof)) == float(sst.chi2.ppf(p, dof))
        assert float(_chi2_quantile(0.5, dof)) == float(sst.chi2.median(dof))
    d = np.arange(201).clip(1)
    np.testing.assert_array_equal(_chi2_quantile(0.999, d), sst.chi2.ppf(0.999, d))
