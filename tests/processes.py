"""Processes with known truth for the statistics tests (not part of the product).

Exact AR(1) / sampled Ornstein-Uhlenbeck series, x_n = rho x_{n-1} + sqrt(1 - rho^2) sigma xi_n,
started from the stationary distribution (REFERENCES §10; Gillespie 1996), mixed by the
Cholesky factor of a prescribed Reynolds-stress tensor (Lund, Wu & Squires 1998,
J. Comput. Phys. 140:233), so every component keeps the exponential autocorrelation.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import lfilter

#: A Reynolds-stress tensor used across the tests (m^2/s^2); positive definite.
STRESS = np.array([[1.0, -0.3, 0.0], [-0.3, 0.5, 0.05], [0.0, 0.05, 0.4]])
MEAN = np.array([10.0, 0.5, 0.0])


def ar1(rng: np.random.Generator, n: int, m: int, rho: float) -> np.ndarray:
    """(n, m) independent unit-variance AR(1) series, stationary from the first sample."""
    e = rng.normal(size=(n, m)) * np.sqrt(1.0 - rho**2)
    x0 = rng.normal(size=m)
    return lfilter([1.0], [1.0, -rho], e, axis=0, zi=(rho * x0)[None, :])[0]


def turbulence(rng, n, rho, mean=MEAN, stress=STRESS) -> np.ndarray:
    """Gaussian 3-component velocity with prescribed mean, stresses and exponential ACF."""
    a = np.linalg.cholesky(stress)
    return ar1(rng, n, len(mean), rho) @ a.T + mean


def skewed(z: np.ndarray, a: float) -> np.ndarray:
    """y = z + a (z^2 - 1): skewness (6a + 8a^3)/(1 + 2a^2)^(3/2) (REFERENCES §10)."""
    return z + a * (z**2 - 1.0)


def ar1_mean_variance(rho: float, n: int, sigma: float = 1.0) -> float:
    """Exact Var(mean) of n AR(1) samples (REFERENCES §1, checked against the brute-force sum)."""
    return sigma**2 / n * ((1 + rho) / (1 - rho) - 2 * rho * (1 - rho**n) / (n * (1 - rho) ** 2))


def two_scale(rng, n, w, t_fast=5.0, t_slow=5000.0, mean=MEAN, stress=STRESS) -> np.ndarray:
    """Turbulence with slow facility content: each latent component is
    sqrt(1 - w) AR(1, T = t_fast) + sqrt(w) AR(1, T = t_slow) (samples), unit variance, then
    mixed like :func:`turbulence`. Var(mean) follows REFERENCES §12 (sum over the parts)."""
    m = len(mean)
    z = np.sqrt(1 - w) * ar1(rng, n, m, np.exp(-1 / t_fast))
    z += np.sqrt(w) * ar1(rng, n, m, np.exp(-1 / t_slow))
    return z @ np.linalg.cholesky(stress).T + mean


def two_scale_mean_variance(n, w, t_fast=5.0, t_slow=5000.0) -> float:
    """Exact Var(mean) of n samples of a unit-variance latent component of :func:`two_scale`."""
    return (1 - w) * ar1_mean_variance(np.exp(-1 / t_fast), n) + w * ar1_mean_variance(
        np.exp(-1 / t_slow), n
    )


def heavy_ar1(rng, n, m, rho, kind="t5") -> np.ndarray:
    """(n, m) unit-variance AR(1) driven by Student-t(5) ("t5") or Laplace ("laplace")
    innovations scaled to unit variance (started after a burn-in of 20 integral times)."""
    burn = int(20 / max(1e-9, -np.log(rho)))
    if kind == "t5":
        e = rng.standard_t(5, size=(n + burn, m)) / np.sqrt(5 / 3)
    else:
        e = rng.laplace(size=(n + burn, m)) / np.sqrt(2.0)
    return lfilter([1.0], [1.0, -rho], e * np.sqrt(1 - rho**2), axis=0)[burn:]


def ar1_flatness(rho: float, innovation_excess: float) -> float:
    """Flatness of an AR(1) from its innovations' excess kurtosis (REFERENCES §12):
    3 + excess x (1 - rho^2)^2 / (1 - rho^4)."""
    return 3.0 + innovation_excess * (1 - rho**2) ** 2 / (1 - rho**4)
