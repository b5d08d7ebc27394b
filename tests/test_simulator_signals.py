"""Signals of the simulator against published formulas and numpy/scipy estimates.

Tolerances are a few standard errors of the estimate, with the standard error taken from the
exact formula named beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate
from scipy import signal as sps

from eddyvigil.simulator.signals import (
    VON_KARMAN_A,
    OUGenerator,
    RandomSampler,
    Shedding,
    VonKarmanGenerator,
    cholesky_factor,
    generate,
    skew_moments,
    von_karman_epsilon,
    von_karman_psd,
)

R_CHECK = np.array([[1.0, -0.3, 0.0], [-0.3, 0.5, 0.05], [0.0, 0.05, 0.4]])


def test_cholesky_check_values():
    # Lund, Wu & Squires 1998, J. Comput. Phys. 140:233 (factor entries); values checked with numpy
    a = cholesky_factor(R_CHECK)
    assert a[1, 1] == pytest.approx(0.640312, abs=1e-6)
    assert a[2, 1] == pytest.approx(0.078087, abs=1e-6)
    assert a[2, 2] == pytest.approx(0.627616, abs=1e-6)
    np.testing.assert_allclose(a @ a.T, R_CHECK, rtol=1e-14)


@pytest.mark.parametrize(
    "bad, words",
    [
        ([[1.0, 0.9, 0], [0.9, 0.5, 0], [0, 0, 1.0]], "not positive definite"),
        ([[1.0, 0.1, 0], [0.0, 0.5, 0], [0, 0, 1.0]], "symmetric"),
        ([[1.0, 0.0], [0.0, -0.5]], "not positive definite"),
        ([[1.0, 0.0, 0.0]], "square"),
        ([[np.nan]], "non-finite"),
    ],
)
def test_bad_stress_tensors_are_refused_clearly(bad, words):
    with pytest.raises(ValueError, match=words):
        cholesky_factor(bad)


def test_von_karman_constants():
    # a = 4 pi [Gamma(1/3)/Gamma(5/6)]^2 = 70.780 and eps = 0.714 sigma^3/L for C1 = 0.49
    # (von Kármán 1948 spectrum; figures as in the project's REFERENCES §7, from memory)
    assert VON_KARMAN_A == pytest.approx(70.780, abs=5e-4)
    assert von_karman_epsilon(1.0, 1.0, 0.49) == pytest.approx(0.714, abs=1e-3)
    total, _ = integrate.quad(lambda f: von_karman_psd(f, 2.5, 0.03, 10.0), 0, np.inf, limit=400)
    assert total == pytest.approx(2.5, rel=1e-6)  # the spectrum integrates to sigma^2


def test_skew_transform_check_values():
    # y = z + a(z^2-1): skewness (6a + 8a^3)/(1+2a^2)^{3/2}; check values for a = 0.1 and 0.2
    # computed independently (Monte Carlo / brute force, REFERENCES §5 and §10, [V])
    s, f = skew_moments([0.1, 0.2])
    np.testing.assert_allclose(s, [0.590206, 1.126189], atol=1e-6)
    np.testing.assert_allclose(f, [3.465975, 4.711934], atol=1e-6)


def _ar1_var_mean(rho, n):
    # exact Var(mean)/sigma^2 of AR(1), common practice (e.g. Bendat & Piersol; REFERENCES §1)
    return ((1 + rho) / (1 - rho) - 2 * rho * (1 - rho**n) / (n * (1 - rho) ** 2)) / n


@pytest.mark.slow
def test_ou_reproduces_mean_stress_and_integral_time():
    mean = np.array([10.0, 0.5, -0.2])
    g = OUGenerator(mean, R_CHECK, tint_s=0.005, rate_hz=4000.0, seed=11)
    n = 2_000_000
    x = generate(g, n, block=100_003)
    rho = g.rho
    # means: exact finite-N AR(1) standard error (REFERENCES §1)
    se_mean = np.sqrt(np.diag(R_CHECK) * _ar1_var_mean(rho, n))
    assert np.all(np.abs(x.mean(axis=0) - mean) < 4.5 * se_mean)
    # stresses: second Hermite order of a Gaussian AR(1) has factor (1+rho^2)/(1-rho^2),
    # N Var(c_ij) = (R_ii R_jj + R_ij^2) (1+rho^2)/(1-rho^2) (REFERENCES §5, discrete-exact form)
    c = np.cov(x.T, bias=True)
    fac = (1 + rho**2) / (1 - rho**2)
    se_c = np.sqrt((np.outer(np.diag(R_CHECK), np.diag(R_CHECK)) + R_CHECK**2) * fac / n)
    assert np.all(np.abs(c - R_CHECK) < 4.5 * se_c)
    # integral time: lag-k autocorrelation at k = T/dt is exp(-1); Bartlett's formula for AR(1)
    # gives its variance (1/N)[(1+rho^2)(1-rho^{2k})/(1-rho^2) - 2k rho^{2k}] (Bartlett 1946)
    u = x[:, 0] - x[:, 0].mean()
    k = 20
    r_k = np.dot(u[:-k], u[k:]) / np.dot(u, u)
    var_rk = ((1 + rho**2) * (1 - rho ** (2 * k)) / (1 - rho**2) - 2 * k * rho ** (2 * k)) / n
    assert abs(r_k - rho**k) < 4.5 * math.sqrt(var_rk)
    t_est = -k / (4000.0 * math.log(r_k))
    assert t_est == pytest.approx(0.005, rel=0.03)
    # discrete integral time dt (1/2 + rho/(1-rho)) = (dt/2) coth(dt/2T) (REFERENCES §1)
    assert g.integral_time_s()[0] == pytest.approx(
        0.5 / 4000 / math.tanh(0.5 / 4000 / 0.005), rel=1e-12
    )


@pytest.mark.parametrize("make", ["ou", "vk", "lda", "shed"])
def test_block_size_independence(make):
    # the same seed gives the same samples bit for bit, whatever the block sizes
    def build():
        if make == "ou":
            return OUGenerator([1.0, 0, 0], R_CHECK, 0.01, 1000.0, seed=5, skew=0.1)
        if make == "vk":
            return VonKarmanGenerator(
                [8.0, 0, 0], R_CHECK, 0.02, 2000.0, seed=5, skew=[0.1, 0, -0.1]
            )
        if make == "shed":
            return OUGenerator(
                [1.0, 0, 0],
                R_CHECK,
                0.01,
                1000.0,
                seed=5,
                shedding=Shedding(12.0, (0.1, 0.3, 0.0), (0.0, 1.0)),
            )
        return RandomSampler(
            OUGenerator([5.0, 0, 0], R_CHECK, 0.01, 10000.0, seed=5), 500.0, seed=6
        )

    n = 50_000
    whole = build().next_block(n)
    rng = np.random.default_rng(3)
    cuts = np.sort(rng.choice(np.arange(1, n), size=40, replace=False))
    g = build()
    parts = [g.next_block(b - a) for a, b in zip(np.r_[0, cuts], np.r_[cuts, n], strict=True)]
    assert np.array_equal(np.concatenate(parts), whole)
    assert build().next_block(0).shape[0] == 0


@pytest.mark.slow
def test_skewed_variant_skewness_and_flatness():
    # nearly white (rho ~ 0) so that the iid standard errors of REFERENCES §5 apply:
    # a = 0.2: N Var(S) = 17.05, N Var(F) = 634.5 (Benedict & Gould 1996 form, evaluated [V])
    g = OUGenerator([0.0], [[1.0]], tint_s=1e-9, rate_hz=1000.0, seed=21, skew=0.2)
    n = 2_000_000
    y = g.next_block(n)[:, 0]
    z = (y - y.mean()) / y.std()
    s, f = np.mean(z**3), np.mean(z**4)
    assert abs(s - 1.126189) < 4.5 * math.sqrt(17.05 / n)
    assert abs(f - 4.711934) < 4.5 * math.sqrt(634.5 / n)


def test_mixed_third_moments_match_truth():
    # third co-moments of the Cholesky mix of independent skewed components (multilinearity)
    # against the numpy sample moments of a long nearly white record
    g = OUGenerator(
        [0.0, 0.0, 0.0], R_CHECK, tint_s=1e-9, rate_hz=1000.0, seed=8, skew=[0.15, -0.1, 0.05]
    )
    x = g.next_block(400_000)
    d = x - x.mean(axis=0)
    sample = np.einsum("ni,nj,nk->ijk", d, d, d) / d.shape[0]
    # tolerance: sqrt(N Var(<u'^3>)) ~ sqrt(6) sigma^3 for near-Gaussian data, 5 SE
    tol = 5 * math.sqrt(15.0 / d.shape[0])
    np.testing.assert_allclose(sample, g.third_moments(), atol=tol)
    q = np.einsum("ni,nj,nk,nl->ijkl", d, d, d, d) / d.shape[0]
    np.testing.assert_allclose(q, g.fourth_moments(), atol=5 * math.sqrt(200.0 / d.shape[0]))


@pytest.mark.slow
def test_von_karman_spectrum_shape_level_and_epsilon():
    u_mean, length, fs = 10.0, 0.03, 8000.0
    g = VonKarmanGenerator([u_mean, 0.0, 0.0], R_CHECK, length, fs, seed=31)
    x = generate(g, 2**22, block=77_777)
    f, p = sps.welch(x[:, 0], fs=fs, nperseg=8192)
    target = R_CHECK[0, 0] * g.unit_psd(f)
    # Welch estimate vs the designed discrete spectrum: ratio averaged over a band; each Welch
    # bin has ~2*1000 degrees of freedom (Welch 1967), so 3 % on a band mean is ~10 SE
    band = (f > 5) & (f < 3600)
    assert np.mean(p[band] / target[band]) == pytest.approx(1.0, abs=0.03)
    assert np.max(np.abs(p[band] / target[band] - 1)) < 0.25
    # shape and level vs the continuous von Kármán spectrum below f_s/16, where the folded
    # (aliased) part adds < 3 % (sum over k of (f/(k f_s -+ f))^{5/3})
    low = (f > 2) & (f < fs / 16)
    vk = von_karman_psd(f[low], R_CHECK[0, 0], length, u_mean)
    assert np.mean(p[low] / vk) == pytest.approx(1.0, abs=0.04)
    # inertial range: eps = [E11 k1^{5/3} / C1]^{3/2}, E11 = U S/(2 pi), k1 = 2 pi f / U
    # (REFERENCES §7: 0.714 sigma^3/L for C1 = 0.49); fit well above the spectral knee
    # (~40 Hz here) and below f_s/16
    ir = (f > 200) & (f < 500)
    k1 = 2 * np.pi * f[ir] / u_mean
    e11 = u_mean * p[ir] / (2 * np.pi)
    eps_fit = np.mean((e11 * k1 ** (5 / 3) / 0.49) ** 1.5)
    assert eps_fit == pytest.approx(g.epsilon(), rel=0.05)
    assert g.epsilon() == pytest.approx(0.714 * R_CHECK[0, 0] ** 1.5 / length, rel=2e-3)
    # variances, and T_int = L/U (Taylor)
    np.testing.assert_allclose(np.var(x, axis=0), np.diag(R_CHECK), rtol=0.04)
    assert g.integral_time_s()[0] == pytest.approx(length / u_mean, rel=0.01)


def test_shedding_adds_a_line_and_its_variance():
    fs, f0, amp = 1000.0, 37.0, 0.5
    g = OUGenerator(
        [2.0, 0.0, 0.0],
        np.diag([0.04, 0.02, 0.02]),
        0.005,
        fs,
        seed=4,
        shedding=Shedding(f0, (0.0, amp, 0.0)),
    )
    x = g.next_block(400_000)
    f, p = sps.welch(x[:, 1], fs=fs, nperseg=2048)
    assert abs(f[np.argmax(p)] - f0) <= fs / 2048
    # a sinusoid of amplitude A adds A^2/2 to the variance (common practice)
    assert np.var(x[:, 1]) == pytest.approx(0.02 + amp**2 / 2, rel=0.02)
    assert g.total_stress()[1, 1] == pytest.approx(0.02 + amp**2 / 2)


@pytest.mark.slow
def test_random_sampling_velocity_bias_and_weights():
    # arrival rate proportional to |u|: arithmetic mean -> (U^2 + sigma^2)/U = 10.4, variance
    # -> 3.84; residence-time weights recover U = 10 and sigma^2 = 4
    # (McLaughlin & Tiederman 1973, Phys. Fluids 16:2082; check values REFERENCES §9 [V])
    gen = OUGenerator(
        [10.0, 0.0, 0.0], np.diag([4.0, 1e-8, 1e-8]), tint_s=1e-9, rate_hz=20000.0, seed=41
    )
    lda = RandomSampler(gen, 1000.0, seed=42)
    rows = generate(lda, 8_000_000, block=500_000)
    u, t, w = rows[:, 0], rows[:, 3], rows[:, 4]
    n = u.size
    # expected count: rate * E|u|/|U| * T; Poisson standard deviation sqrt(count)
    e_abs = 2 * math.sqrt(2 / math.pi) * math.exp(-12.5) + 10 * math.erf(10 / (2 * math.sqrt(2)))
    expected = 1000.0 * e_abs / 10.0 * 400.0
    assert abs(n - expected) < 5 * math.sqrt(expected)
    assert np.all(np.diff(t) > 0)
    assert np.mean(u) == pytest.approx(10.4, abs=5 * 2 / math.sqrt(n))
    assert np.var(u) == pytest.approx(3.84, rel=0.02)
    mw = np.sum(w * u) / np.sum(w)
    assert mw == pytest.approx(10.0, abs=5 * 2 / math.sqrt(n))
    assert np.sum(w * (u - mw) ** 2) / np.sum(w) == pytest.approx(4.0, rel=0.02)
    # Bernoulli thinning of the fine clock with p ~ 0.05 plus a uniform jitter: inter-arrival
    # times in cells are geometric (variance (1-p)/p^2) plus jitter variance 1/6, so the
    # coefficient of variation is sqrt(1 - p + p^2/6), near the Poisson value 1 (common practice)
    dt = np.diff(t)
    p = 1000.0 / 20000.0
    assert np.std(dt) / np.mean(dt) == pytest.approx(math.sqrt(1 - p + p * p / 6), abs=0.01)
