"""Numba kernels of the simulator: plain loops over float64 arrays, no validation.

The wrappers in :mod:`eddyvigil.simulator.signals` check shapes and parameters. Kernels draw their
normal deviates from a ``numpy.random.Generator`` passed in; numba advances the very same
bit generator and uses numpy's algorithm, so a kernel and ``rng.standard_normal`` give the
same stream (guarded by ``tests/test_simulator_signals.py::test_block_size_independence``).
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["ou_mixed", "skew_mix"]


@numba.njit(cache=True)
def ou_mixed(rng, n, rho, innovation, state, skew_a, skew_norm, chol, mean, out):
    """Advance ``m`` independent unit AR(1) processes ``n`` steps and mix them.

    Per step and component ``j``: ``x_j <- rho x_j + innovation xi`` (exact sampled OU),
    ``y_j = (x_j + a_j (x_j^2 - 1)) * skew_norm_j`` (unit variance), then
    ``out[i] = mean + chol @ y``. ``state`` (the ``x_j``) is updated in place.
    """
    m = state.shape[0]
    y = np.empty(m)
    for i in range(n):
        for j in range(m):
            x = rho * state[j] + innovation * rng.standard_normal()
            state[j] = x
            y[j] = (x + skew_a[j] * (x * x - 1.0)) * skew_norm[j]
        for r in range(m):
            acc = mean[r]
            for c in range(r + 1):
                acc += chol[r, c] * y[c]
            out[i, r] = acc


@numba.njit(cache=True)
def skew_mix(x, skew_a, skew_norm, chol, mean, out):
    """Skew transform and mix unit Gaussian rows ``x`` (n, m) into ``out`` (n, m)."""
    n, m = x.shape
    y = np.empty(m)
    for i in range(n):
        for j in range(m):
            z = x[i, j]
            y[j] = (z + skew_a[j] * (z * z - 1.0)) * skew_norm[j]
        for r in range(m):
            acc = mean[r]
            for c in range(r + 1):
                acc += chol[r, c] * y[c]
            out[i, r] = acc
