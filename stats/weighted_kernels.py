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


_FAST = {"reassoc"}  # re-association of the sums only (as stats.kernels)
_CHUNK = 64


def weighted_monomial_sums(x, wt, c):
    """Weight total and sums of ``wt * (x - c)^monomial`` (degree 1-4, monomial layout) of a
    block, in chunks of ``_CHUNK`` rows whose sums are added (one kernel per component count,
    sums in local scalars so LLVM vectorises them, as ``stats.kernels.monomial_sums``)."""
    n, m = x.shape
    nc = (n + _CHUNK - 1) // _CHUNK
    starts = np.arange(nc) * _CHUNK
    lens = np.minimum(n - starts, _CHUNK)
    D = {1: 4, 2: 14, 3: 34}[m]
    out = np.empty((nc, D + 1))
    (_wsums1, _wsums2, _wsums3)[m - 1](x, wt, c, starts, lens, out)
    tot = out.sum(axis=0)
    return tot[D], tot[:D]


@numba.njit(cache=True, nogil=True)
def _longest(lens):
    L = 1
    for j in range(lens.shape[0]):
        L = max(L, lens[j])
    return L


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _wsums1(x, wt, c, starts, lens, out):
    L = _longest(lens)
    U, Q = np.empty(L), np.empty(L)
    c0 = c[0]
    for j in range(starts.shape[0]):
        s0, n = starts[j], lens[j]
        for t in range(n):
            U[t] = x[s0 + t, 0] - c0
            Q[t] = wt[s0 + t]
        a0 = a1 = a2 = aw = 0.0
        for t in range(n):
            q = Q[t]
            u = U[t]
            uu = u * u
            quu = q * uu
            aw += q
            a0 += q * u
            a1 += quu
            a2 += quu * u
        a3 = 0.0
        for t in range(n):
            q = Q[t]
            u = U[t]
            uu = u * u
            quu = q * uu
            a3 += quu * uu
        out[j, 0] = a0
        out[j, 1] = a1
        out[j, 2] = a2
        out[j, 3] = a3
        out[j, 4] = aw


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _wsums2(x, wt, c, starts, lens, out):
    L = _longest(lens)
    U, V, Q = np.empty(L), np.empty(L), np.empty(L)
    c0, c1 = c[0], c[1]
    for j in range(starts.shape[0]):
        s0, n = starts[j], lens[j]
        for t in range(n):
            U[t] = x[s0 + t, 0] - c0
            V[t] = x[s0 + t, 1] - c1
            Q[t] = wt[s0 + t]
        a0 = a1 = a2 = a3 = a4 = a5 = a6 = a7 = a8 = aw = 0.0
        for t in range(n):
            q = Q[t]
            u = U[t]
            v = V[t]
            uu, uv, vv = u * u, u * v, v * v
            quu, quv, qvv = q * uu, q * uv, q * vv
            aw += q
            a0 += q * u
            a1 += q * v
            a2 += quu
            a3 += quv
            a4 += qvv
            a5 += quu * u
            a6 += quu * v
            a7 += quv * v
            a8 += qvv * v
        a9 = a10 = a11 = a12 = a13 = 0.0
        for t in range(n):
            q = Q[t]
            u = U[t]
            v = V[t]
            uu, uv, vv = u * u, u * v, v * v
            quu, quv, qvv = q * uu, q * uv, q * vv
            a9 += quu * uu
            a10 += quu * uv
            a11 += quu * vv
            a12 += quv * vv
            a13 += qvv * vv
        out[j, 0] = a0
        out[j, 1] = a1
        out[j, 2] = a2
        out[j, 3] = a3
        out[j, 4] = a4
        out[j, 5] = a5
        out[j, 6] = a6
        out[j, 7] = a7
        out[j, 8] = a8
        out[j, 9] = a9
        out[j, 10] = a10
        out[j, 11] = a11
        out[j, 12] = a12
        out[j, 13] = a13
        out[j, 14] = aw


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _wsums3(x, wt, c, starts, lens, out):
    L = _longest(lens)
    U, V, W, Q = np.empty(L), np.empty(L), np.empty(L), np.empty(L)
    c0, c1, c2 = c[0], c[1], c[2]
    for j in range(starts.shape[0]):
        s0, n = starts[j], lens[j]
        for t in range(n):
            U[t] = x[s0 + t, 0] - c0
            V[t] = x[s0 + t, 1] - c1
            W[t] = x[s0 + t, 2] - c2
            Q[t] = wt[s0 + t]
        a0 = a1 = a2 = a3 = a4 = a5 = a6 = a7 = a8 = a9 = 0.0
        a10 = a11 = a12 = a13 = a14 = a15 = a16 = a17 = a18 = aw = 0.0
        for t in range(n):
            q = Q[t]
            u = U[t]
            v = V[t]
            w = W[t]
            uu, uv, uw, vv, vw, ww = u * u, u * v, u * w, v * v, v * w, w * w
            quu, quv, quw, qvv, qvw, qww = q * uu, q * uv, q * uw, q * vv, q * vw, q * ww
            aw += q
            a0 += q * u
            a1 += q * v
            a2 += q * w
            a3 += quu
            a4 += quv
            a5 += quw
            a6 += qvv
            a7 += qvw
            a8 += qww
            a9 += quu * u
            a10 += quu * v
            a11 += quu * w
            a12 += quv * v
            a13 += quv * w
            a14 += quw * w
            a15 += qvv * v
            a16 += qvv * w
            a17 += qvw * w
            a18 += qww * w
        a19 = a20 = a21 = a22 = a23 = a24 = a25 = a26 = a27 = a28 = 0.0
        a29 = a30 = a31 = a32 = a33 = 0.0
        for t in range(n):
            q = Q[t]
            u = U[t]
            v = V[t]
            w = W[t]
            uu, uv, uw, vv, vw, ww = u * u, u * v, u * w, v * v, v * w, w * w
            quu, quv, quw, qvv, qvw, qww = q * uu, q * uv, q * uw, q * vv, q * vw, q * ww
            a19 += quu * uu
            a20 += quu * uv
            a21 += quu * uw
            a22 += quu * vv
            a23 += quu * vw
            a24 += quu * ww
            a25 += quv * vv
            a26 += quv * vw
            a27 += quv * ww
            a28 += quw * ww
            a29 += qvv * vv
            a30 += qvv * vw
            a31 += qvv * ww
            a32 += qvw * ww
            a33 += qww * ww
        out[j, 0] = a0
        out[j, 1] = a1
        out[j, 2] = a2
        out[j, 3] = a3
        out[j, 4] = a4
        out[j, 5] = a5
        out[j, 6] = a6
        out[j, 7] = a7
        out[j, 8] = a8
        out[j, 9] = a9
        out[j, 10] = a10
        out[j, 11] = a11
        out[j, 12] = a12
        out[j, 13] = a13
        out[j, 14] = a14
        out[j, 15] = a15
        out[j, 16] = a16
        out[j, 17] = a17
        out[j, 18] = a18
        out[j, 19] = a19
        out[j, 20] = a20
        out[j, 21] = a21
        out[j, 22] = a22
        out[j, 23] = a23
        out[j, 24] = a24
        out[j, 25] = a25
        out[j, 26] = a26
        out[j, 27] = a27
        out[j, 28] = a28
        out[j, 29] = a29
        out[j, 30] = a30
        out[j, 31] = a31
        out[j, 32] = a32
        out[j, 33] = a33
        out[j, 34] = aw


@numba.njit(cache=True, nogil=True)
def weighted_mean(x, wt, mean):
    """Pass 1: sum wt (x - x[0]) / sum wt + x[0] into ``mean``; returns the weight total."""
    n, m = x.shape
    acc = np.zeros(m)
    W = 0.0
    for t in range(n):
        q = wt[t]
        W += q
        for i in range(m):
            acc[i] += q * (x[t, i] - x[0, i])
    for i in range(m):
        mean[i] = x[0, i] + acc[i] / W if W > 0.0 else np.nan
    return W


@numba.njit(cache=True, nogil=True)
def slot_pairs(t, a, w, group, first_new, dtau, nslots, sums):
    """Pairs (i < j, j >= first_new) with lag in slots 1..nslots-1, added to the time group
    of the later sample: ``sums[group[j], c, k, :]`` += (ww, ww a_i, ww a_j, ww a_i a_j,
    ww a_i^2, ww a_j^2) with ``ww = w_i w_j``; ``sums`` is (groups, m, nslots, 6)."""
    n, m = a.shape
    max_lag = (nslots - 0.5) * dtau
    for j in range(first_new, n):
        g = group[j]
        i = j - 1
        while i >= 0:
            lag = t[j] - t[i]
            if lag >= max_lag:
                break
            k = int(lag / dtau + 0.5)
            if k >= 1:
                ww = w[i] * w[j]
                for c in range(m):
                    ai = a[i, c]
                    aj = a[j, c]
                    s = sums[g, c, k]
                    s[0] += ww
                    s[1] += ww * ai
                    s[2] += ww * aj
                    s[3] += ww * ai * aj
                    s[4] += ww * ai * ai
                    s[5] += ww * aj * aj
            i -= 1
