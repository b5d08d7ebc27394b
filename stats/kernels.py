"""Numba kernels of the statistics core.

Plain loops over float64 arrays that fill ``out`` arrays; no state, no validation: shapes and
dtypes are the business of the Python classes that call them (``moments.py``, ``blocking.py``).

Two numerical choices are made here:

* Moments of a block are computed in two passes (block mean, then central products), which is
  both faster and far stabler than per-sample Welford updates on hot-wire data with a large mean
  and small fluctuations; guarded by ``tests/test_moments.py::test_large_offset_regression``.
* The inner loops run over a short chunk of samples held transposed (component-major) so LLVM
  can vectorise the reductions; ``fastmath`` only allows re-association of those sums (inputs
  are finite by the time they get here, the wire decoder rejects NaN/inf).
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["central_sums", "block_sums", "blocking_push", "kernel_view"]

_CHUNK = 128


def kernel_view(block: np.ndarray) -> np.ndarray:
    """The block as the one array type the kernels are compiled for: C-contiguous, aligned,
    read-only (no copy when it already is contiguous and aligned).

    numba compiles a separate specialisation per array layout, alignment and writability,
    and with re-associated sums two specialisations may round differently in the last bit.
    One type per dtype makes results independent of where a block came from (a decoded
    read-only wire buffer, a script's writable array, a replayed file); guarded by
    ``tests/test_pipeline.py::test_socket_path_and_in_process_api_give_identical_summaries``.
    """
    block = np.ascontiguousarray(block)
    if not block.flags.aligned:
        block = block.copy()
    if block.flags.writeable:
        block = block.view()
        block.flags.writeable = False
    return block
_FAST = {"nnan", "ninf", "nsz", "arcp", "contract", "reassoc"}


@numba.njit(cache=True)
def central_sums(x, c2, c3p, c3k, c4p, c4l, mean, s2, s3, s4):
    """Mean and central co-moment *sums* of a block ``x`` (n, m), in two passes.

    ``c2`` (n2, 2) lists index pairs; an order-3 combo ``q`` is order-2 combo ``c3p[q]`` times
    component ``c3k[q]``, an order-4 combo is order-3 combo ``c4p[q]`` times ``c4l[q]``.
    Fills ``mean`` (m,), ``s2`` (n2,), ``s3`` (n3,), ``s4`` (n4,) (sums, not averages).
    """
    n, m = x.shape
    _block_mean(x, mean)
    nc = (n + _CHUNK - 1) // _CHUNK
    starts = np.arange(nc) * _CHUNK
    lens = np.minimum(n - starts, _CHUNK)
    C = np.empty((1 + m + c2.shape[0] + c3p.shape[0] + c4p.shape[0], nc))
    _chunk_sums(x, mean, starts, lens, c2, c3p, c3k, c4p, c4l, C, s2, s3, s4)


@numba.njit(cache=True)
def _block_mean(x, mean):
    """Pass 1: the mean of each column, summed as deviations from the first row (a 1e8
    offset would otherwise cost about six digits); NaN for an empty block."""
    n, m = x.shape
    for i in range(m):
        if n == 0:
            mean[i] = np.nan
            continue
        x0 = np.float64(x[0, i])  # float64 before subtracting float32 input
        acc = 0.0
        for t in range(n):
            acc += np.float64(x[t, i]) - x0
        mean[i] = x0 + acc / n


@numba.njit(cache=True, fastmath=_FAST)
def _chunk_sums(x, mean, starts, lens, c2, c3p, c3k, c4p, c4l, C, s2, s3, s4):
    """Pass 2 of :func:`block_sums`: monomial sums of ``x - mean`` per chunk into ``C``."""
    n, m = x.shape
    n2 = c2.shape[0]
    n3 = c3p.shape[0]
    n4 = c4p.shape[0]
    o2 = 1 + m
    o3 = 1 + m + n2
    o4 = 1 + m + n2 + n3
    for q in range(n2):
        s2[q] = 0.0
    for q in range(n3):
        s3[q] = 0.0
    for q in range(n4):
        s4[q] = 0.0
    width = 1
    for c in range(lens.shape[0]):
        width = max(width, lens[c])
    dev = np.empty((m, width))
    p2 = np.empty((n2, width))
    p3 = np.empty((n3, width))
    for c in range(lens.shape[0]):
        start = starts[c]
        L = lens[c]
        C[0, c] = L
        for t in range(L):
            for i in range(m):
                dev[i, t] = x[start + t, i] - mean[i]
        for i in range(m):
            acc = 0.0
            for t in range(L):
                acc += dev[i, t]
            C[1 + i, c] = acc
        for q in range(n2):
            a = c2[q, 0]
            b = c2[q, 1]
            acc = 0.0
            for t in range(L):
                v = dev[a, t] * dev[b, t]
                p2[q, t] = v
                acc += v
            C[o2 + q, c] = acc
            s2[q] += acc
        for q in range(n3):
            pp = c3p[q]
            k = c3k[q]
            acc = 0.0
            for t in range(L):
                v = p2[pp, t] * dev[k, t]
                p3[q, t] = v
                acc += v
            C[o3 + q, c] = acc
            s3[q] += acc
        for q in range(n4):
            pp = c4p[q]
            k = c4l[q]
            acc = 0.0
            for t in range(L):
                acc += p3[pp, t] * dev[k, t]
            C[o4 + q, c] = acc
            s4[q] += acc


@numba.njit(cache=True)
def block_sums(
    x, ref, base, head_len, c2, c3p, c3k, c4p, c4l, r_target, r_src, r_comp, mean, s2, s3, s4, R
):
    """Both reductions of a block in one two-pass sweep: moments *and* chunk monomials.

    Pass 1: the block mean. Pass 2, over chunks cut on the stream's base-block boundaries
    (``head_len`` rows finish a base block begun earlier, then full blocks of ``base`` rows,
    then the tail): the sums of every monomial (degree 1-4) of ``d = x - mean``.
    Their degree 2-4 parts add up to the block's central sums (``mean``, ``s2``, ``s3``,
    ``s4``, as :func:`central_sums`). The chunk sums are then shifted exactly to monomial sums
    of ``x - ref`` (``R``, (D, nb + 2): column 0 the head, 1..nb the full blocks, nb + 1 the
    tail; absent chunks are zero): the shift is one linear map for the whole block,
    built from table ``r_*`` and applied by BLAS, so one set of products per sample serves
    both consumers.
    """
    n, m = x.shape
    _block_mean(x, mean)
    D = R.shape[0]
    h = min(head_len, n)
    nb = (n - h) // base
    nc = nb + 2
    starts = np.empty(nc, dtype=np.int64)
    lens = np.empty(nc, dtype=np.int64)
    starts[0], lens[0] = 0, h
    for b in range(nb):
        starts[1 + b], lens[1 + b] = h + b * base, base
    starts[nc - 1], lens[nc - 1] = h + nb * base, n - h - nb * base
    C = np.empty((D + 1, nc))
    _chunk_sums(x, mean, starts, lens, c2, c3p, c3k, c4p, c4l, C, s2, s3, s4)
    # x - ref = d + shift: sum prod(d + shift) = sum over subsets (lower sums) * shift powers
    A = np.zeros((D, D + 1))
    for r in range(r_target.shape[0]):
        v = 1.0
        for j in range(4):
            c = r_comp[r, j]
            if c >= 0:
                v *= mean[c] - ref[c]
        A[r_target[r], r_src[r] + 1] += v
    R[:, :] = np.dot(A, C)


@numba.njit(cache=True)
def blocking_push(y, count, S, Q, P, first, last, has_last, pending, has_pending):
    """Push block-mean vectors ``y`` (D, n) into the dyadic blocking levels.

    Level ``k`` keeps, for the vector series of its block means: ``count[k]``, the sum
    ``S[k]`` (D,), the sum of outer products ``Q[k]`` (D, D), the symmetrised lag-one product
    sum ``P[k]`` (sum of (y_i y_{i+1}^T + y_{i+1} y_i^T) / 2), the first and last vectors, and
    a pending vector waiting for its pair. Pairs of level-``k`` values are averaged into level
    ``k + 1`` (Flyvbjerg & Petersen 1989). The products go through BLAS (``np.dot`` on
    contiguous arrays): the per-element loop version ran at a fifth of the speed.
    Returns the number of levels in use.
    """
    D = y.shape[0]
    nlev = count.shape[0]
    cur = np.ascontiguousarray(y)
    used = 0
    for k in range(nlev):
        n = cur.shape[1]
        if n == 0:
            break
        used = k + 1
        if has_last[k]:
            # prepend the previous call's last vector so the lag products link up
            ext = np.empty((D, n + 1))
            ext[:, 0] = last[k]
            ext[:, 1:] = cur
        else:
            ext = cur
        for a in range(D):
            acc = 0.0
            for t in range(n):
                acc += cur[a, t]
            S[k, a] += acc
        m = ext.shape[1]
        if n >= 8:
            Q[k] += np.dot(cur, cur.T)
            if m > 1:
                lo = np.ascontiguousarray(ext[:, : m - 1])
                hi = np.ascontiguousarray(ext[:, 1:])
                lag = np.dot(lo, hi.T)
                P[k] += 0.5 * (lag + lag.T)
        else:
            # upper levels see a column or two per call: plain loops beat BLAS call overhead
            for t in range(n):
                for a in range(D):
                    va = cur[a, t]
                    for b in range(D):
                        Q[k, a, b] += va * cur[b, t]
            for t in range(m - 1):
                for a in range(D):
                    va = ext[a, t]
                    wa = ext[a, t + 1]
                    for b in range(D):
                        P[k, a, b] += 0.5 * (va * ext[b, t + 1] + wa * ext[b, t])
        if count[k] == 0:
            first[k] = cur[:, 0]
        last[k] = cur[:, n - 1]
        has_last[k] = True
        count[k] += n
        # pair averages for the next level
        npend = 1 if has_pending[k] else 0
        total = n + npend
        nxt = np.empty((D, total // 2))
        j = 0
        t = 0
        if has_pending[k]:
            for a in range(D):
                nxt[a, 0] = 0.5 * (pending[k, a] + cur[a, 0])
            j = 1
            t = 1
            has_pending[k] = False
        while t + 1 < n:
            for a in range(D):
                nxt[a, j] = 0.5 * (cur[a, t] + cur[a, t + 1])
            j += 1
            t += 2
        if t < n:
            for a in range(D):
                pending[k, a] = cur[a, t]
            has_pending[k] = True
        cur = nxt
    return used
