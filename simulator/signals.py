"""Synthetic turbulence with prescribed statistics, generated block by block as one stream.

Every generator here is a continuous stream: ``next_block(n)`` returns the next ``n`` rows,
with no seam between blocks, and the same seed gives the same samples whatever the block
sizes (bit for bit). The recipe, per sample:

1. ``m`` independent unit-variance Gaussian processes with a chosen autocorrelation:
   exact sampled Ornstein-Uhlenbeck / AR(1) (:class:`OUGenerator`) or a von Kármán
   spectrum made by FIR filtering white noise, overlap-save (:class:`VonKarmanGenerator`);
2. optionally skewed, ``y = (z + a (z^2 - 1)) / sqrt(1 + 2 a^2)`` (still unit variance);
3. mixed with the Cholesky factor of the Reynolds-stress tensor (Lund, Wu & Squires 1998,
   J. Comput. Phys. 140:233), so every component keeps the same autocorrelation shape;
4. plus the mean vector and an optional periodic shedding component.

:class:`RandomSampler` turns any of them into laser-Doppler-like data: Poisson arrivals whose
rate rises with the speed, with ``t`` and residence-time ``weight`` columns.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal as sps
from scipy.special import gamma

from eddyvigil.simulator.kernels import ou_mixed, skew_mix

__all__ = [
    "VON_KARMAN_A",
    "Shedding",
    "TurbulenceGenerator",
    "OUGenerator",
    "VonKarmanGenerator",
    "PopeGenerator",
    "PopeSpectrum",
    "PopeShapeGenerator",
    "pope_for_length",
    "RandomSampler",
    "cholesky_factor",
    "skew_moments",
    "von_karman_psd",
    "von_karman_epsilon",
    "generate",
]

#: a = 4 pi [Gamma(1/3)/Gamma(5/6)]^2 = 70.780..., so that the spectrum integrates to sigma^2
VON_KARMAN_A = 4.0 * math.pi * (gamma(1.0 / 3.0) / gamma(5.0 / 6.0)) ** 2


def cholesky_factor(stress) -> np.ndarray:
    """Lower Cholesky factor of a Reynolds-stress tensor; refuse one that is not positive definite.

    Raises
    ------
    ValueError
        With a message naming the problem (shape, asymmetry, non-finite, not positive definite).
    """
    r = np.asarray(stress, dtype=np.float64)
    if r.ndim != 2 or r.shape[0] != r.shape[1] or r.shape[0] < 1:
        raise ValueError(f"Reynolds-stress tensor must be square, got shape {r.shape}")
    if not np.all(np.isfinite(r)):
        raise ValueError("Reynolds-stress tensor has non-finite entries")
    if not np.allclose(r, r.T, rtol=1e-12, atol=1e-15):
        raise ValueError("Reynolds-stress tensor must be symmetric")
    try:
        chol = np.linalg.cholesky(r)
    except np.linalg.LinAlgError:
        eig = np.linalg.eigvalsh(r)
        raise ValueError(
            "Reynolds-stress tensor is not positive definite "
            f"(eigenvalues {np.array2string(eig, precision=4)}); "
            "check that every |uv| < sqrt(uu vv) and the normal stresses are > 0"
        ) from None
    if np.any(np.diag(chol) <= 0):
        raise ValueError("Reynolds-stress tensor is not positive definite")
    return chol


def skew_moments(a) -> tuple[np.ndarray, np.ndarray]:
    """Skewness and flatness of ``(z + a (z^2 - 1)) / sqrt(1 + 2 a^2)`` for Gaussian ``z``.

    Skewness ``(6a + 8a^3)/(1 + 2a^2)^{3/2}``; flatness ``(3 + 60a^2 + 60a^4)/(1 + 2a^2)^2``.
    """
    a = np.asarray(a, dtype=np.float64)
    s = (6 * a + 8 * a**3) / (1 + 2 * a**2) ** 1.5
    f = (3 + 60 * a**2 + 60 * a**4) / (1 + 2 * a**2) ** 2
    return s, f


def von_karman_psd(f_hz, variance, length_m, speed_ms) -> np.ndarray:
    """One-sided von Kármán longitudinal spectrum in Hz (Taylor's hypothesis).

    ``S(f) = 4 sigma^2 (L/U) / [1 + a (f L/U)^2]^{5/6}`` with ``a`` = :data:`VON_KARMAN_A`;
    it integrates to ``sigma^2`` and its integral time scale is ``L/U``.
    """
    tl = length_m / speed_ms
    f = np.asarray(f_hz, dtype=np.float64)
    return 4.0 * variance * tl / (1.0 + VON_KARMAN_A * (f * tl) ** 2) ** (5.0 / 6.0)


def von_karman_epsilon(variance, length_m, c1=0.49) -> float:
    """Dissipation rate implied by the inertial tail of :func:`von_karman_psd`.

    ``E11(k1) = C1 eps^{2/3} k1^{-5/3}`` with ``E11 = U S / 2 pi`` and ``k1 = 2 pi f / U`` gives
    ``eps = [4 a^{-5/6} (2 pi)^{2/3} / C1]^{3/2} sigma^3 / L`` (0.714 sigma^3/L for C1 = 0.49).
    """
    level = 4.0 * VON_KARMAN_A ** (-5.0 / 6.0) * (2 * math.pi) ** (2.0 / 3.0)
    return (level / c1) ** 1.5 * variance**1.5 / length_m


@dataclass(frozen=True)
class Shedding:
    """A periodic part ``amplitude_i sin(2 pi f t + phase_i)`` added to velocity component i."""

    frequency_hz: float
    amplitude: tuple[float, ...]
    phase_rad: tuple[float, ...] = ()

    def phases(self, m: int) -> np.ndarray:
        p = np.zeros(m)
        p[: len(self.phase_rad)] = self.phase_rad
        return p

    def amplitudes(self, m: int) -> np.ndarray:
        a = np.zeros(m)
        a[: len(self.amplitude)] = self.amplitude
        return a


class TurbulenceGenerator:
    """Common part: skew, Cholesky mix, mean and shedding over a stream of unit processes.

    Subclasses provide the unit processes. Attributes ``mean``, ``stress`` (turbulent part),
    ``chol``, ``skew_a``, ``shedding``, ``rate_hz``, ``n_generated``.
    """

    def __init__(self, mean, stress, rate_hz, seed, *, skew=0.0, shedding=None):
        self.mean = np.array(mean, dtype=np.float64).reshape(-1)
        m = self.mean.size
        self.stress = np.array(stress, dtype=np.float64)
        if self.stress.shape != (m, m):
            raise ValueError(f"stress must be {m}x{m} for a mean of {m} components")
        self.chol = cholesky_factor(self.stress)
        if not (math.isfinite(rate_hz) and rate_hz > 0):
            raise ValueError(f"rate_hz must be > 0, got {rate_hz}")
        self.rate_hz = float(rate_hz)
        self.skew_a = np.broadcast_to(np.asarray(skew, dtype=np.float64), (m,)).copy()
        self._skew_norm = 1.0 / np.sqrt(1.0 + 2.0 * self.skew_a**2)
        if shedding is not None and not isinstance(shedding, Shedding):
            shedding = Shedding(**shedding)
        self.shedding = shedding
        self.n_generated = 0
        noise_seq, self._aux_seq = np.random.SeedSequence(seed).spawn(2)
        self._rng = np.random.default_rng(noise_seq)

    @property
    def m(self) -> int:
        return self.mean.size

    def next_block(self, n: int) -> np.ndarray:
        """The next ``n`` rows, shape (n, m), float64."""
        n = int(n)
        if n < 0:
            raise ValueError("n must be >= 0")
        out = np.empty((n, self.m))
        self._fill(n, out)
        if self.shedding is not None and n:
            t = (self.n_generated + np.arange(n)) / self.rate_hz
            w = 2 * math.pi * self.shedding.frequency_hz
            amp, ph = self.shedding.amplitudes(self.m), self.shedding.phases(self.m)
            out += amp * np.sin(w * t[:, None] + ph)
        self.n_generated += n
        return out

    def _fill(self, n, out):  # pragma: no cover - always overridden
        raise NotImplementedError

    def unit_acf(self, lags: int) -> np.ndarray:  # pragma: no cover - always overridden
        raise NotImplementedError

    # ---- truth -----------------------------------------------------------------
    def _y_acf(self, lags: int) -> np.ndarray:
        """Autocorrelation of the skewed unit processes (one per component), lags 0..lags-1."""
        rho = self.unit_acf(lags)[:, None]
        a2 = self.skew_a**2
        return (rho + 2 * a2 * rho**2) / (1 + 2 * a2)

    def integral_time_s(self) -> np.ndarray:
        """Integral time of each velocity component, ``dt (1/2 + sum_k rho_k)``.

        Defined so that ``Var(mean) = 2 sigma^2 T_int / T`` holds for the generated samples;
        shedding adds variance but nothing at zero frequency, so it shortens ``T_int``.
        """
        return self._unit_integral_time() * np.diag(self.stress) / np.diag(self.total_stress())

    def _unit_integral_time(self) -> np.ndarray:
        raise NotImplementedError  # pragma: no cover

    def total_stress(self) -> np.ndarray:
        """Covariance of the output: turbulent stress plus shedding ``A_i A_j cos(dphi)/2``."""
        r = self.stress.copy()
        if self.shedding is not None:
            a, p = self.shedding.amplitudes(self.m), self.shedding.phases(self.m)
            r += 0.5 * np.outer(a, a) * np.cos(p[:, None] - p[None, :])
        return r

    def third_moments(self) -> np.ndarray:
        """``T[i,j,k] = <u_i u_j u_k>`` = sum_m L_im L_jm L_km s_m (shedding adds nothing)."""
        s, _ = skew_moments(self.skew_a)
        c = self.chol
        return np.einsum("im,jm,km,m->ijk", c, c, c, s)

    def fourth_moments(self) -> np.ndarray:
        """``Q[i,j,k,l] = <u_i u_j u_k u_l>`` of the fluctuations, shedding included."""
        _, fl = skew_moments(self.skew_a)
        c = self.chol
        r = self.stress
        q = np.einsum("im,jm,km,lm,m->ijkl", c, c, c, c, fl - 3.0)
        s = self.total_stress() - r
        tot = r + s
        q += (
            np.einsum("ij,kl->ijkl", tot, tot)
            + np.einsum("ik,jl->ijkl", tot, tot)
            + np.einsum("il,jk->ijkl", tot, tot)
        )
        if self.shedding is not None:
            # a purely periodic part is not Gaussian: replace its Gaussian pairing terms by
            # E[s_i s_j s_k s_l] = A_i A_j A_k A_l / 8
            #   x [cos(pi+pj-pk-pl) + cos(pi-pj+pk-pl) + cos(pi-pj-pk+pl)]
            a, p = self.shedding.amplitudes(self.m), self.shedding.phases(self.m)
            pi, pj, pk, pl = np.ix_(p, p, p, p)
            aa = np.einsum("i,j,k,l->ijkl", a, a, a, a)
            exact = (
                aa
                / 8
                * (
                    np.cos(pi + pj - pk - pl)
                    + np.cos(pi - pj + pk - pl)
                    + np.cos(pi - pj - pk + pl)
                )
            )
            gauss = (
                np.einsum("ij,kl->ijkl", s, s)
                + np.einsum("ik,jl->ijkl", s, s)
                + np.einsum("il,jk->ijkl", s, s)
            )
            q += exact - gauss
        return q


class OUGenerator(TurbulenceGenerator):
    """Gaussian (or skewed) turbulence with exponential autocorrelation: exact sampled OU.

    Parameters
    ----------
    mean : array_like, (m,)
        Mean velocity vector, m/s.
    stress : array_like, (m, m)
        Reynolds-stress tensor, m^2/s^2; must be positive definite.
    tint_s : float
        Integral time scale of the continuous process, s (``rho = exp(-dt/tint_s)`` per sample).
    rate_hz : float
        Sampling rate.
    seed : int
        Seed of ``numpy.random.default_rng``-style streams.
    skew : float or array_like
        ``a`` of the skew transform, per independent component (0: Gaussian).
    shedding : Shedding or dict, optional

    Examples
    --------
    >>> g = OUGenerator([10.0, 0.0, 0.0], np.diag([1.0, 0.5, 0.4]), 0.005, 2000.0, seed=1)
    >>> g.next_block(4).shape
    (4, 3)
    """

    def __init__(self, mean, stress, tint_s, rate_hz, seed, *, skew=0.0, shedding=None):
        super().__init__(mean, stress, rate_hz, seed, skew=skew, shedding=shedding)
        if not (math.isfinite(tint_s) and tint_s > 0):
            raise ValueError(f"tint_s must be > 0, got {tint_s}")
        self.tint_s = float(tint_s)
        self.rho = math.exp(-1.0 / (self.rate_hz * self.tint_s))
        self._innovation = math.sqrt(1.0 - self.rho**2)
        self._state = self._rng.standard_normal(self.m)  # stationary from the first sample

    def _fill(self, n, out):
        ou_mixed(
            self._rng,
            n,
            self.rho,
            self._innovation,
            self._state,
            self.skew_a,
            self._skew_norm,
            self.chol,
            self.mean,
            out,
        )

    def unit_acf(self, lags: int) -> np.ndarray:
        return self.rho ** np.arange(lags, dtype=np.float64)

    def _unit_integral_time(self) -> np.ndarray:
        r, a2 = self.rho, self.skew_a**2
        tail = (r / (1 - r) + 2 * a2 * r**2 / (1 - r**2)) / (1 + 2 * a2)
        return (0.5 + tail) / self.rate_hz


def _aliased_unit_psd(f, length_m, speed_ms, rate_hz, folds=400):
    """Von Kármán spectrum of unit variance folded about Nyquist, as ideal sampling gives it."""
    s = von_karman_psd(f, 1.0, length_m, speed_ms)
    for k in range(1, folds + 1):
        s = s + von_karman_psd(k * rate_hz - f, 1.0, length_m, speed_ms)
        s = s + von_karman_psd(k * rate_hz + f, 1.0, length_m, speed_ms)
    return s


class VonKarmanGenerator(TurbulenceGenerator):
    """Turbulence whose every component has a von Kármán spectrum shape (Taylor: ``T_int = L/U``).

    White noise is filtered by a long zero-phase FIR kernel whose gain is the square root of
    the (aliased) target spectrum, by overlap-save in fixed internal chunks, so the output
    does not depend on the caller's block sizes. The discrete process has one-sided PSD
    ``R_ii * S_unit(f)`` on [0, f_s/2] where ``S_unit`` is the unit-variance von Kármán spectrum
    folded about Nyquist (what an unfiltered probe sampled at ``rate_hz`` would see).

    Parameters
    ----------
    length_m : float
        Longitudinal integral length ``L``.
    speed_ms : float, optional
        Convection speed for Taylor's hypothesis; default the magnitude of ``mean``.
    c1 : float
        Kolmogorov constant of the 1-D spectrum used to state ``epsilon``.
    """

    def __init__(
        self,
        mean,
        stress,
        length_m,
        rate_hz,
        seed,
        *,
        speed_ms=None,
        skew=0.0,
        shedding=None,
        c1=0.49,
        taps=None,
    ):
        super().__init__(mean, stress, rate_hz, seed, skew=skew, shedding=shedding)
        if speed_ms is None:
            speed_ms = float(np.linalg.norm(self.mean))
        if not (speed_ms > 0 and length_m > 0):
            raise ValueError("von Kármán generator needs length_m > 0 and a mean speed > 0")
        self.length_m, self.speed_ms, self.c1 = float(length_m), float(speed_ms), float(c1)
        tl = self.length_m / self.speed_ms
        if taps is None:
            taps = 1 << max(10, math.ceil(math.log2(128 * tl * self.rate_hz)))
        self.taps = int(taps)
        f = np.fft.rfftfreq(self.taps, 1.0 / self.rate_hz)
        gain = np.sqrt(
            _aliased_unit_psd(f, self.length_m, self.speed_ms, self.rate_hz) * self.rate_hz / 2
        )
        h = np.roll(np.fft.irfft(gain, self.taps), self.taps // 2)
        self.kernel = h / math.sqrt(
            np.sum(h**2)
        )  # unit variance, exactly, for the discrete process
        self._chunk = max(4 * self.taps, 1 << 15)
        self._history = self._rng.standard_normal((self.taps - 1, self.m))
        self._ready = np.empty((0, self.m))

    def unit_psd(self, f_hz) -> np.ndarray:
        """One-sided PSD (Hz) of each unit process at ``f_hz`` (from the kernel's DTFT)."""
        f = np.asarray(f_hz, dtype=np.float64)
        k = np.arange(self.taps)
        dtft = np.exp(-2j * math.pi * np.outer(f / self.rate_hz, k)) @ self.kernel
        return np.abs(dtft) ** 2 * 2.0 / self.rate_hz

    def _unit_chunk(self) -> np.ndarray:
        noise = self._rng.standard_normal((self._chunk, self.m))
        buf = np.concatenate([self._history, noise])
        self._history = buf[-(self.taps - 1) :].copy()
        return sps.fftconvolve(buf, self.kernel[:, None], mode="valid", axes=0)

    def _fill(self, n, out):
        parts, have = [self._ready], self._ready.shape[0]
        while have < n:
            c = self._unit_chunk()
            parts.append(c)
            have += c.shape[0]
        pool = np.concatenate(parts) if len(parts) > 1 else self._ready
        skew_mix(
            np.ascontiguousarray(pool[:n]), self.skew_a, self._skew_norm, self.chol, self.mean, out
        )
        self._ready = pool[n:]

    def unit_acf(self, lags: int) -> np.ndarray:
        spec = np.abs(np.fft.rfft(self.kernel, 2 * self.taps)) ** 2
        acf = np.fft.irfft(spec, 2 * self.taps)[: self.taps]
        out = np.zeros(lags)
        k = min(lags, self.taps)
        out[:k] = acf[:k] / acf[0]
        return out

    def _unit_integral_time(self) -> np.ndarray:
        rho = self._y_acf(self.taps)
        return (0.5 + rho[1:].sum(axis=0)) / self.rate_hz

    def epsilon(self) -> float:
        """Dissipation rate of the u component implied by its inertial range.

        ``von_karman_epsilon(R_11, L, c1)``, times ``[(1 + 4a^2)/(1 + 2a^2)]^{3/2}`` for a skewed
        u (the skew transform raises the small-scale structure function by that factor).
        """
        a2 = self.skew_a[0] ** 2
        return (
            von_karman_epsilon(self.stress[0, 0], self.length_m, self.c1)
            * ((1 + 4 * a2) / (1 + 2 * a2)) ** 1.5
        )


class RandomSampler:
    """Laser-Doppler-like random sampling of a generator running on a fine clock.

    Each fine-clock sample is taken with probability ``p_i = data_rate_hz / rate_hz * |s_i| / |U|``
    (``|s|`` the speed over all components, ``|U|`` the mean speed): Poisson arrivals whose rate
    rises with the speed (velocity bias). A taken sample gets a time ``t`` jittered uniformly
    within its fine-clock cell and a residence-time weight ``probe_diameter_m / |s_i|`` (s).

    ``next_block(n)`` advances the fine clock by ``n`` samples and returns the rows taken,
    shape (k, m + 2), columns ``self.columns``.
    """

    def __init__(
        self,
        generator: TurbulenceGenerator,
        data_rate_hz,
        seed,
        *,
        probe_diameter_m=1e-4,
        columns=("u", "v", "w"),
    ):
        self.generator = generator
        mean_speed = float(np.linalg.norm(generator.mean))
        if mean_speed <= 0:
            raise ValueError("random sampling needs a non-zero mean speed")
        self.p_scale = float(data_rate_hz) / (generator.rate_hz * mean_speed)
        if not (0 < data_rate_hz <= 0.2 * generator.rate_hz):
            raise ValueError("data_rate_hz must be in (0, rate_hz/5] of the fine clock")
        self.data_rate_hz = float(data_rate_hz)
        self.probe_diameter_m = float(probe_diameter_m)
        self.columns = tuple(columns[: generator.m]) + ("t", "weight")
        self._rng = np.random.default_rng(np.random.SeedSequence(seed).spawn(3)[2])

    def next_block(self, n: int) -> np.ndarray:
        start = self.generator.n_generated
        x = self.generator.next_block(n)
        draws = self._rng.random((n, 2))  # fixed draws per fine sample: block-size independent
        speed = np.sqrt(np.sum(x * x, axis=1))
        take = draws[:, 0] < np.minimum(self.p_scale * speed, 1.0)
        idx = np.flatnonzero(take)
        t = (start + idx + draws[idx, 1]) / self.generator.rate_hz
        w = self.probe_diameter_m / np.maximum(speed[idx], 1e-12)
        return np.column_stack([x[idx], t, w])


def generate(generator, n: int, block: int = 65536) -> np.ndarray:
    """Concatenate ``n`` fine-clock samples of ``generator`` drawn in blocks of ``block``."""
    parts = []
    left = int(n)
    while left > 0:
        k = min(block, left)
        parts.append(generator.next_block(k))
        left -= k
    if not parts:
        return generator.next_block(0)
    return np.concatenate(parts)


# ---------------------------------------------------------------- Pope's model spectrum

#: constants of Pope's model spectrum (Pope 2000, Turbulent Flows, CUP, §6.5; REFERENCES §7)
POPE_C, POPE_BETA, POPE_P0 = 1.5, 5.2, 2.0


def _filtered_noise(gen, n: int) -> np.ndarray:
    """The next ``n`` rows of white noise convolved with ``gen.kernels`` (one FIR filter per
    component, overlap-save across chunks of ``gen._chunk`` rows); the rest is kept for the
    next call, so the series does not depend on the block sizes asked for."""
    parts, have = [gen._ready], gen._ready.shape[0]
    while have < n:
        noise = gen._rng.standard_normal((gen._chunk, gen.m))
        buf = np.concatenate([gen._history, noise])
        gen._history = buf[-(gen.taps - 1) :].copy()
        c = np.stack(
            [
                sps.fftconvolve(buf[:, i], gen.kernels[:, i], mode="valid")
                for i in range(gen.m)
            ],
            axis=1,
        )
        parts.append(c)
        have += c.shape[0]
    pool = np.concatenate(parts) if len(parts) > 1 else gen._ready
    gen._ready = pool[n:]
    return pool[:n]


class PopeSpectrum:
    """Pope's model energy spectrum for given ``k``, ``eps``, ``nu`` and its 1-D spectra.

    ``E(kappa) = C eps^{2/3} kappa^{-5/3} f_L(kappa L) f_eta(kappa eta)``, ``L = k^{3/2}/eps``,
    with ``c_L``, ``c_eta`` solved so that ``int E = k`` and ``int 2 nu kappa^2 E = eps``.
    ``E11(k1) = int_{k1}^inf E/kappa (1 - k1^2/kappa^2) dkappa`` and
    ``E22(k1) = 1/2 int_{k1}^inf E/kappa (1 + k1^2/kappa^2) dkappa`` (isotropic turbulence;
    Pope 2000, §6.5, from memory). Integrals on a fine logarithmic grid.
    """

    def __init__(self, k: float, eps: float, nu: float, grid: int = 20_001):
        from scipy.optimize import fsolve

        self.k, self.eps, self.nu = float(k), float(eps), float(nu)
        self.L = self.k**1.5 / self.eps
        self.eta = (self.nu**3 / self.eps) ** 0.25
        self._x = np.linspace(math.log(1e-6 / self.L), math.log(60.0 / self.eta), grid)
        kap = np.exp(self._x)

        def residual(c):
            e = self._energy(kap, c[0], c[1])
            return [
                np.trapezoid(e * kap, self._x) / self.k - 1.0,
                np.trapezoid(2 * self.nu * kap**3 * e, self._x) / self.eps - 1.0,
            ]

        self.c_L, self.c_eta = (float(v) for v in fsolve(residual, [6.78, 0.40], xtol=1e-12))
        e = self._energy(kap, self.c_L, self.c_eta)
        # tails from the top: A(k1) = int_{k1} E dx, B(k1) = int_{k1} E / kappa^2 dx
        # (dx = dkappa/kappa)
        dx = self._x[1] - self._x[0]
        self._a = np.r_[np.cumsum(((e[1:] + e[:-1]) * dx / 2)[::-1])[::-1], 0.0]
        eb = e / kap**2
        self._b = np.r_[np.cumsum(((eb[1:] + eb[:-1]) * dx / 2)[::-1])[::-1], 0.0]

    def _energy(self, kap, c_l, c_eta):
        kl = kap * self.L
        f_l = (kl / np.sqrt(kl**2 + c_l)) ** (5.0 / 3.0 + POPE_P0)
        f_eta = np.exp(-POPE_BETA * (((kap * self.eta) ** 4 + c_eta**4) ** 0.25 - c_eta))
        return POPE_C * self.eps ** (2.0 / 3.0) * kap ** (-5.0 / 3.0) * f_l * f_eta

    def energy(self, kappa) -> np.ndarray:
        return self._energy(np.asarray(kappa, dtype=np.float64), self.c_L, self.c_eta)

    def _tails(self, k1):
        x = np.log(np.asarray(k1, dtype=np.float64))
        a = np.interp(x, self._x, self._a, right=0.0)
        b = np.interp(x, self._x, self._b, right=0.0)
        return a, b, np.exp(x)

    def e11(self, k1) -> np.ndarray:
        a, b, k = self._tails(k1)
        return np.clip(a - k**2 * b, 0.0, None)

    def e22(self, k1) -> np.ndarray:
        a, b, k = self._tails(k1)
        return 0.5 * (a + k**2 * b)

    def psd(self, f_hz, speed_ms, transverse=False) -> np.ndarray:
        """One-sided frequency spectrum (Hz) by Taylor's hypothesis.

        ``S = 2 pi E11(2 pi f/U) / U`` (``E22`` when ``transverse``).
        """
        f = np.asarray(f_hz, dtype=np.float64)
        k1 = np.maximum(2 * math.pi * f / speed_ms, np.exp(self._x[0]))
        e = self.e22(k1) if transverse else self.e11(k1)
        return 2 * math.pi * e / speed_ms

    # ---- truth (REFERENCES §7)
    @property
    def u_rms(self) -> float:
        return math.sqrt(2.0 * self.k / 3.0)

    @property
    def tau_eta(self) -> float:
        return math.sqrt(self.nu / self.eps)

    @property
    def lambda_g(self) -> float:
        return math.sqrt(15.0 * self.nu * self.u_rms**2 / self.eps)

    @property
    def re_lambda(self) -> float:
        return self.u_rms * self.lambda_g / self.nu

    @property
    def l11(self) -> float:
        """Longitudinal integral length, pi E11(0) / (2 u'^2)."""
        return math.pi * float(self._a[0]) / (2.0 * self.u_rms**2)


class PopeGenerator(TurbulenceGenerator):
    """Isotropic turbulence with Pope's model spectrum (inertial and dissipation ranges).

    Column 0 (u) has the longitudinal spectrum E11, the others the transverse E22, each by
    Taylor's hypothesis at ``speed_ms`` (default the mean speed), folded about Nyquist as ideal
    sampling gives it; components independent with variance ``u'^2 = 2k/3``. Made, like
    :class:`VonKarmanGenerator`, by FIR filtering white noise (overlap-save, fixed chunks).
    Truth: ``spectrum`` (a :class:`PopeSpectrum`) gives eps, eta, tau_eta, lambda_g, Re_lambda.
    """

    def __init__(self, mean, k, eps, nu, rate_hz, seed, *, speed_ms=None, shedding=None, taps=None):
        mean = np.array(mean, dtype=np.float64).reshape(-1)
        m = mean.size
        self.spectrum = PopeSpectrum(k, eps, nu)
        stress = np.eye(m) * self.spectrum.u_rms**2
        super().__init__(mean, stress, rate_hz, seed, shedding=shedding)
        self.speed_ms = (
            float(speed_ms) if speed_ms is not None else float(np.linalg.norm(self.mean))
        )
        if not self.speed_ms > 0:
            raise ValueError("Pope generator needs a mean speed > 0")
        tl = self.spectrum.l11 / self.speed_ms
        if taps is None:
            taps = 1 << max(10, math.ceil(math.log2(64 * tl * self.rate_hz)))
        self.taps = int(taps)
        f = np.fft.rfftfreq(self.taps, 1.0 / self.rate_hz)
        kernels = []
        for transverse in (False, True):
            s = self.psd_unit(f, transverse)
            h = np.roll(np.fft.irfft(np.sqrt(s * self.rate_hz / 2), self.taps), self.taps // 2)
            kernels.append(h / math.sqrt(np.sum(h**2)))
        self.kernels = np.stack([kernels[0 if i == 0 else 1] for i in range(m)], axis=1)
        self._chunk = max(4 * self.taps, 1 << 15)
        self._history = self._rng.standard_normal((self.taps - 1, m))
        self._ready = np.empty((0, m))

    def psd_unit(self, f_hz, transverse=False, folds=8) -> np.ndarray:
        """Unit-variance one-sided PSD folded about Nyquist (``folds`` images each side)."""
        f = np.asarray(f_hz, dtype=np.float64)

        def one(g):
            return self.spectrum.psd(np.abs(g), self.speed_ms, transverse) / self.spectrum.u_rms**2

        s = one(f)
        for j in range(1, folds + 1):
            s = s + one(j * self.rate_hz - f) + one(j * self.rate_hz + f)
        return s

    def truth(self) -> dict:
        sp = self.spectrum
        return {
            "eps": sp.eps,
            "eta": sp.eta,
            "tau_eta": sp.tau_eta,
            "lambda_g": sp.lambda_g,
            "Re_lambda": sp.re_lambda,
            "nu": sp.nu,
            "L_u": sp.l11,
        }

    def _fill(self, n, out):
        out[:] = _filtered_noise(self, n) * self.spectrum.u_rms + self.mean

    def unit_acf(self, lags: int) -> np.ndarray:
        h = self.kernels[:, 0]
        spec = np.abs(np.fft.rfft(h, 2 * self.taps)) ** 2
        acf = np.fft.irfft(spec, 2 * self.taps)[: self.taps]
        out = np.zeros(lags)
        k = min(lags, self.taps)
        out[:k] = acf[:k] / acf[0]
        return out

    def _unit_integral_time(self) -> np.ndarray:
        rho = self.unit_acf(self.taps)
        return np.full(self.m, (0.5 + rho[1:].sum()) / self.rate_hz)


def pope_for_length(k: float, length_m: float, nu: float, tol: float = 1e-6) -> PopeSpectrum:
    """The :class:`PopeSpectrum` of energy ``k`` and viscosity ``nu`` whose longitudinal
    integral length ``l11`` is ``length_m`` (ε found by iteration; ``l11`` falls as ε grows)."""
    eps = 0.43 * k**1.5 / length_m  # L11 ~ 0.43 k^{3/2}/eps at high Reynolds number (Pope 2000)
    for _ in range(40):
        sp = PopeSpectrum(k, eps, nu)
        ratio = sp.l11 / length_m
        if abs(ratio - 1.0) < tol:
            return sp
        eps *= ratio
    raise ValueError(f"no Pope spectrum with L11 = {length_m} m for k = {k}, nu = {nu}")


class PopeShapeGenerator(TurbulenceGenerator):
    """Prescribed stresses and skewness with the time structure of Pope's model spectrum.

    Like :class:`VonKarmanGenerator` (white noise through a zero-phase FIR kernel, then the
    skew transform and the Cholesky mix of ``stress``), but the unit processes have the shape of
    Pope's model spectrum, with an inertial and a dissipation range: unit process 0 the
    longitudinal ``E11``, the others the transverse ``E22``, by Taylor's hypothesis at the mean
    speed, folded about Nyquist. The model is the one of ``k = 3 R_11 / 2``, ``nu`` and the ε
    that makes its integral length ``L11`` equal ``length_m``.

    ``epsilon()`` is the dissipation rate of u as the isotropic derivative formula sees it,
    ``15 nu <(du/dx)^2>``: the model's ε times ``(1 + 4a^2)/(1 + 2a^2)`` for a skewed u (for
    Gaussian z, z' is independent of z, so ``<y'^2> = <z'^2>(1 + 4a^2)/(1 + 2a^2)``).
    """

    def __init__(
        self, mean, stress, length_m, nu, rate_hz, seed, *, skew=0.0, shedding=None, taps=None
    ):
        super().__init__(mean, stress, rate_hz, seed, skew=skew, shedding=shedding)
        self.speed_ms = float(np.linalg.norm(self.mean))
        if not (self.speed_ms > 0 and length_m > 0 and nu > 0):
            raise ValueError("Pope-shaped generator needs length_m > 0, nu > 0, a mean speed > 0")
        self.length_m, self.nu = float(length_m), float(nu)
        self.spectrum = pope_for_length(1.5 * self.stress[0, 0], self.length_m, self.nu)
        tl = self.length_m / self.speed_ms
        if taps is None:
            taps = 1 << max(10, math.ceil(math.log2(64 * tl * self.rate_hz)))
        self.taps = int(taps)
        f = np.fft.rfftfreq(self.taps, 1.0 / self.rate_hz)
        kernels = []
        for transverse in (False, True):
            s = self._folded_unit_psd(f, transverse)
            h = np.roll(np.fft.irfft(np.sqrt(s * self.rate_hz / 2), self.taps), self.taps // 2)
            kernels.append(h / math.sqrt(np.sum(h**2)))
        self.kernels = np.stack([kernels[min(i, 1)] for i in range(self.m)], axis=1)
        self._chunk = max(4 * self.taps, 1 << 15)
        self._history = self._rng.standard_normal((self.taps - 1, self.m))
        self._ready = np.empty((0, self.m))

    def _folded_unit_psd(self, f, transverse, folds=8):
        sp = self.spectrum

        def one(g):
            return sp.psd(np.abs(g), self.speed_ms, transverse) / sp.u_rms**2

        s = one(f)
        for j in range(1, folds + 1):
            s = s + one(j * self.rate_hz - f) + one(j * self.rate_hz + f)
        return s

    def _fill(self, n, out):
        rows = _filtered_noise(self, n)
        skew_mix(
            np.ascontiguousarray(rows), self.skew_a, self._skew_norm, self.chol, self.mean, out
        )

    def _kernel_acf(self, i: int, lags: int) -> np.ndarray:
        spec = np.abs(np.fft.rfft(self.kernels[:, i], 2 * self.taps)) ** 2
        acf = np.fft.irfft(spec, 2 * self.taps)[: self.taps]
        out = np.zeros(lags)
        k = min(lags, self.taps)
        out[:k] = acf[:k] / acf[0]
        return out

    def unit_acf(self, lags: int) -> np.ndarray:
        return self._kernel_acf(0, lags)

    def _unit_integral_time(self) -> np.ndarray:
        """Integral time of each output component's turbulent part.

        Each skewed unit process m has ``T_m = dt (1/2 + sum rho_y)``; component i is
        ``sum_m L_im y_m`` of independent processes, so ``R_ii T_i = sum_m L_im^2 T_m``.
        """
        a2 = self.skew_a**2
        t_unit = np.empty(self.m)
        for i in range(self.m):
            rho = self._kernel_acf(i, self.taps)
            y = (rho + 2 * a2[i] * rho**2) / (1 + 2 * a2[i])
            t_unit[i] = (0.5 + y[1:].sum()) / self.rate_hz
        return (self.chol**2 @ t_unit) / np.diag(self.stress)

    def epsilon(self) -> float:
        """``15 nu <(du/dx)^2>`` of the sampled u: the model's ε times the ratio of the
        derivative integrals ``int (2 pi f)^2 S df`` up to Nyquist of the skewed and the Gaussian
        unit process (their spectra from the exact discrete autocorrelations; the ``z^2`` part of
        the skew transform is broader than ``z`` and folds about Nyquist)."""
        rho = self._kernel_acf(0, self.taps)
        a2 = self.skew_a[0] ** 2
        y = (rho + 2 * a2 * rho**2) / (1 + 2 * a2)

        def derivative_integral(acf):
            sym = np.r_[acf, 0.0, acf[:0:-1]]  # even sequence of length 2 taps
            spec = np.fft.rfft(sym).real
            theta = np.linspace(0.0, math.pi, spec.size)
            return float(np.sum(theta**2 * spec))

        return self.spectrum.eps * derivative_integral(y) / derivative_integral(rho)
