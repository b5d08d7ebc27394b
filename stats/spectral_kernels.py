"""Numba kernels of the Welch spectra (plain loops, no validation, no state).

``accumulate_power`` adds ``|X|^2`` of a batch of segment transforms into the running sums in
one pass, with no temporaries (numpy's ``(X.real**2 + X.imag**2).sum(0)`` makes three); it is
checked against scipy.signal.welch in tests/test_spectra.py.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["accumulate_power"]


@numba.njit(cache=True, nogil=True)
def accumulate_power(spec: np.ndarray, out: np.ndarray) -> None:  # pragma: no cover - compiled
    """``out[f, j] += sum_s |spec[j, s, f]|^2`` for spec (m, k, nf) complex128, out (nf, m)."""
    m, k, nf = spec.shape
    for j in range(m):
        for s in range(k):
            for f in range(nf):
                z = spec[j, s, f]
                out[f, j] += z.real * z.real + z.imag * z.imag
