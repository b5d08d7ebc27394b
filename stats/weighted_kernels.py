"""Numba kernels of the weighted (random-sampling) statistics: plain loops, no state, no checks.

Layouts follow ``stats.monomials``: combos of order 2-4 as index rows, monomials degree by
degree with monomial ``i`` = component ``i``.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def weighted_central_sums(x, w, c2, c3, c4, mean, s2, s3, s4):
    """Two-pass weighted mean and central sums sum w (x - mean)^combo of one block; returns
    the weight total (0: nothing written but zeros)."""
    n, m = x.shape
    W = 0.0
    for j in range(m):
        mean[j] = 0.0
    for i in range(n):
        W += w[i]
        for j in range(m):
            mean[j] += w[i] * x[i, j]
    s2[:] = 0.0
    s3[:] = 0.0
    s4[:] = 0.0
    if W <= 0.0:
        return 0.0
    for j in range(m):
        mean[j] /= W
    d = np.empty(m)
    for i in range(n):
        wi = w[i]
        if wi == 0.0:
            continue
        for j in range(m):
            d[j] = x[i, j] - mean[j]
        for q in range(c2.shape[0]):
            s2[q] += wi * d[c2[q, 0]] * d[c2[q, 1]]
        for q in range(c3.shape[0]):
            s3[q] += wi * d[c3[q, 0]] * d[c3[q, 1]] * d[c3[q, 2]]
        for q in range(c4.shape[0]):
            s4[q] += wi * d[c4[q, 0]] * d[c4[q, 1]] * d[c4[q, 2]] * d[c4[q, 3]]
    return W


@numba.njit(cache=True, nogil=True)
def time_block_sums(x, w, t, t_start, tau, ref, mono, Wb, Sb):
    """Add each row's weight and weighted monomials of ``x - ref`` to its time block
    ``floor((t - t_start) / tau)`` (the caller makes sure every index fits ``Wb``)."""
    n, m = x.shape
    D = mono.shape[0]
    d = np.empty(m)
    for i in range(n):
        k = int((t[i] - t_start) / tau)
        wi = w[i]
        Wb[k] += wi
        for j in range(m):
            d[j] = x[i, j] - ref[j]
        for q in range(D):
            p = wi
            for r in range(4):
                c = mono[q, r]
                if c < 0:
                    break
                p *= d[c]
            Sb[k, q] += p
