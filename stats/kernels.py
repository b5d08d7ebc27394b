"""Numba kernels of the statistics core.

Plain loops over float64 arrays that fill ``out`` arrays or update the state arrays they are
handed; they keep nothing themselves and validate nothing: shapes and dtypes are the business
of the Python classes that call them (``moments.py``, ``blocking.py``). All release the GIL.

Two numerical choices are made here:

* Products are never taken of raw samples: either of deviations from the block's own mean
  (``central_sums``, two passes) or from a fixed reference near the stream's mean
  (``block_sums``, one pass, the "shifted data" method). Both are far stabler than raw
  power sums or per-sample Welford updates on hot-wire data with a large mean and small
  fluctuations; guarded by ``tests/test_moments.py::test_large_offset_regression``.
* The inner loops run over a short chunk of samples held transposed (component-major) in
  local scalars so LLVM vectorises the reductions; ``fastmath`` only allows re-association
  of those sums (inputs are finite by the time they get here, the wire decoder rejects
  NaN/inf).
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = [
    "block_sums",
    "blocking_push",
    "central_sums",
    "ingest_block",
    "kernel_view",
    "monomial_sums",
    "segment_push",
]

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


@numba.njit(cache=True, nogil=True)
def central_sums(x, mean, s2, s3, s4):
    """Mean and central co-moment *sums* of a block ``x`` (n, m), in two passes.

    Pass 1 the block mean, pass 2 the monomial sums of ``x - mean`` in chunks of
    ``_CHUNK`` rows (chunk sums are added, which keeps the rounding error of long blocks
    small). Fills ``mean`` (m,), ``s2`` (n2,), ``s3`` (n3,), ``s4`` (n4,) (sums, not averages).
    """
    n, m = x.shape
    _block_mean(x, mean)
    nc = (n + _CHUNK - 1) // _CHUNK
    starts = np.arange(nc) * _CHUNK
    lens = np.minimum(n - starts, _CHUNK)
    C = np.empty((nc, s2.shape[0] + s3.shape[0] + s4.shape[0] + m))
    monomial_sums(x, mean, starts, lens, C)
    _split_degrees(C.sum(axis=0), m, s2, s3, s4)


@numba.njit(cache=True, nogil=True)
def _split_degrees(T, m, s2, s3, s4):
    """Copy the degree 2, 3 and 4 parts of monomial vector ``T`` into ``s2``, ``s3``, ``s4``."""
    o = m
    for q in range(s2.shape[0]):
        s2[q] = T[o + q]
    o += s2.shape[0]
    for q in range(s3.shape[0]):
        s3[q] = T[o + q]
    o += s3.shape[0]
    for q in range(s4.shape[0]):
        s4[q] = T[o + q]


@numba.njit(cache=True, nogil=True)
def _block_mean(x, mean):
    """Pass 1: the mean of each column, summed as deviations from the first row (a 1e8
    offset would otherwise cost about six digits); NaN for an empty block."""
    n, m = x.shape
    if n == 0:
        for i in range(m):
            mean[i] = np.nan
        return
    x0 = np.empty(m)
    acc = np.zeros(m)
    for i in range(m):
        x0[i] = np.float64(x[0, i])  # float64 before subtracting float32 input
    for t in range(n):
        for i in range(m):
            acc[i] += np.float64(x[t, i]) - x0[i]
    for i in range(m):
        mean[i] = x0[i] + acc[i] / n


@numba.njit(cache=True, nogil=True)
def monomial_sums(x, c, starts, lens, out):
    """Sums of every monomial of degree 1-4 of ``x - c`` over chunks of rows.

    Chunk ``j`` is rows ``starts[j] : starts[j] + lens[j]``; ``out`` (n_chunks, D) receives
    the sums in monomial layout (``monomials.py``: degree by degree, combos in
    ``combinations_with_replacement`` order). One kernel per component count, each copying a
    chunk's components into contiguous float64 columns and keeping its sums in local scalars:
    LLVM then holds them in registers and vectorises the row loop. Measured on 16384 x 3
    float32 blocks cut in 64-row chunks: about 300 M rows/s, against 65 M rows/s for the
    earlier table-driven loops that stored every product (one core of the 2-core CI machine).
    """
    m = x.shape[1]
    if m == 3:
        _sums3(x, c, starts, lens, out)
    elif m == 2:
        _sums2(x, c, starts, lens, out)
    else:
        _sums1(x, c, starts, lens, out)


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _sums1(x, c, starts, lens, out):
    c0 = c[0]
    for j in range(starts.shape[0]):
        a0 = a1 = a2 = a3 = 0.0
        for t in range(starts[j], starts[j] + lens[j]):
            u = x[t, 0] - c0
            uu = u * u
            a0 += u
            a1 += uu
            a2 += uu * u
            a3 += uu * uu
        out[j, 0], out[j, 1], out[j, 2], out[j, 3] = a0, a1, a2, a3


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _sums2(x, c, starts, lens, out):
    L = _longest(lens)
    U, V = np.empty(L), np.empty(L)
    c0, c1 = c[0], c[1]
    for j in range(starts.shape[0]):
        s0, n = starts[j], lens[j]
        for t in range(n):
            U[t] = x[s0 + t, 0] - c0
            V[t] = x[s0 + t, 1] - c1
        a0 = a1 = a2 = a3 = a4 = a5 = a6 = a7 = a8 = a9 = a10 = a11 = a12 = a13 = 0.0
        for t in range(n):
            u = U[t]
            v = V[t]
            uu, uv, vv = u * u, u * v, v * v
            a0 += u
            a1 += v
            a2 += uu
            a3 += uv
            a4 += vv
            a5 += uu * u
            a6 += uu * v
            a7 += uv * v
            a8 += vv * v
            a9 += uu * uu
            a10 += uu * uv
            a11 += uu * vv
            a12 += uv * vv
            a13 += vv * vv
        out[j, 0], out[j, 1], out[j, 2], out[j, 3], out[j, 4] = a0, a1, a2, a3, a4
        out[j, 5], out[j, 6], out[j, 7], out[j, 8] = a5, a6, a7, a8
        out[j, 9], out[j, 10], out[j, 11], out[j, 12], out[j, 13] = a9, a10, a11, a12, a13


@numba.njit(cache=True, nogil=True, fastmath=_FAST)
def _sums3(x, c, starts, lens, out):
    L = _longest(lens)
    U, V, W = np.empty(L), np.empty(L), np.empty(L)
    c0, c1, c2 = c[0], c[1], c[2]
    for j in range(starts.shape[0]):
        s0, n = starts[j], lens[j]
        for t in range(n):
            U[t] = x[s0 + t, 0] - c0
            V[t] = x[s0 + t, 1] - c1
            W[t] = x[s0 + t, 2] - c2
        # two loops over the chunk (it sits in L1): 19 and 15 running sums each fit in the
        # vector registers, where 34 in one loop spilled (measured 52 -> 45 us per block)
        a0 = a1 = a2 = a3 = a4 = a5 = a6 = a7 = a8 = a9 = a10 = a11 = 0.0
        a12 = a13 = a14 = a15 = a16 = a17 = a18 = 0.0
        for t in range(n):
            u = U[t]
            v = V[t]
            w = W[t]
            uu, uv, uw, vv, vw, ww = u * u, u * v, u * w, v * v, v * w, w * w
            a0 += u
            a1 += v
            a2 += w
            a3 += uu
            a4 += uv
            a5 += uw
            a6 += vv
            a7 += vw
            a8 += ww
            a9 += uu * u
            a10 += uu * v
            a11 += uu * w
            a12 += uv * v
            a13 += uv * w
            a14 += uw * w
            a15 += vv * v
            a16 += vv * w
            a17 += vw * w
            a18 += ww * w
        a19 = a20 = a21 = a22 = a23 = a24 = a25 = a26 = a27 = a28 = 0.0
        a29 = a30 = a31 = a32 = a33 = 0.0
        for t in range(n):
            u = U[t]
            v = V[t]
            w = W[t]
            uu, uv, uw, vv, vw, ww = u * u, u * v, u * w, v * v, v * w, w * w
            a19 += uu * uu
            a20 += uu * uv
            a21 += uu * uw
            a22 += uu * vv
            a23 += uu * vw
            a24 += uu * ww
            a25 += uv * vv
            a26 += uv * vw
            a27 += uv * ww
            a28 += uw * ww
            a29 += vv * vv
            a30 += vv * vw
            a31 += vv * ww
            a32 += vw * ww
            a33 += ww * ww
        out[j, 0], out[j, 1], out[j, 2], out[j, 3], out[j, 4], out[j, 5] = a0, a1, a2, a3, a4, a5
        out[j, 6], out[j, 7], out[j, 8], out[j, 9], out[j, 10] = a6, a7, a8, a9, a10
        out[j, 11], out[j, 12], out[j, 13], out[j, 14], out[j, 15] = a11, a12, a13, a14, a15
        out[j, 16], out[j, 17], out[j, 18], out[j, 19], out[j, 20] = a16, a17, a18, a19, a20
        out[j, 21], out[j, 22], out[j, 23], out[j, 24], out[j, 25] = a21, a22, a23, a24, a25
        out[j, 26], out[j, 27], out[j, 28], out[j, 29], out[j, 30] = a26, a27, a28, a29, a30
        out[j, 31], out[j, 32], out[j, 33] = a31, a32, a33


@numba.njit(cache=True, nogil=True)
def _longest(lens):
    L = 1
    for j in range(lens.shape[0]):
        L = max(L, lens[j])
    return L


@numba.njit(cache=True, nogil=True)
def block_sums(x, ref, base, head_len, r_target, r_src, r_comp, mean, s2, s3, s4, R):
    """Both reductions of a block in one sweep: moments *and* base-block monomial sums.

    The sweep takes every monomial (degree 1-4) of ``x - ref``, ``ref`` a fixed point near the
    stream's mean (its first block's mean): the "shifted data" way to keep a large mean from
    costing digits (Chan, Golub & LeVeque 1983). Chunks are cut on the stream's base-block
    boundaries: ``head_len`` rows finish a base block begun earlier, then full blocks of
    ``base`` rows, then the tail; ``R`` (nb + 2, D) gets the chunk sums (row 0 the head,
    1..nb the full blocks, nb + 1 the tail; absent chunks are zero). Their total, re-centred
    exactly on the block mean (the subset expansion of table ``r_*``), gives the block's
    ``mean`` and central sums ``s2``, ``s3``, ``s4`` for the moment accumulator.
    """
    n, m = x.shape
    D = R.shape[1]
    h = min(head_len, n)
    nb = (n - h) // base
    nc = nb + 2
    starts = np.empty(nc, dtype=np.int64)
    lens = np.empty(nc, dtype=np.int64)
    starts[0], lens[0] = 0, h
    for b in range(nb):
        starts[1 + b], lens[1 + b] = h + b * base, base
    starts[nc - 1], lens[nc - 1] = h + nb * base, n - h - nb * base
    monomial_sums(x, ref, starts, lens, R)
    T = np.zeros(D)
    for j in range(nc):
        for q in range(D):
            T[q] += R[j, q]
    shift = np.empty(m)
    for i in range(m):
        mean[i] = ref[i] + T[i] / n
        shift[i] = ref[i] - mean[i]
    # sum prod(x - mean) = sum prod((x - ref) + shift): expand over subsets of positions
    C = np.zeros(D)
    for r in range(r_target.shape[0]):
        s = r_src[r]
        v = np.float64(n) if s < 0 else T[s]
        for j in range(4):
            k = r_comp[r, j]
            if k >= 0:
                v *= shift[k]
        C[r_target[r]] += v
    _split_degrees(C, m, s2, s3, s4)


@numba.njit(cache=True, nogil=True)
def _gram(rows, out):
    """``out`` (D, D) = sum over rows of r r^T: BLAS for 8 rows or more, loops below that
    (the upper blocking levels see a row or two per call; BLAS call overhead dominates)."""
    n, D = rows.shape
    if n >= 8:
        out[:, :] = np.dot(rows.T, rows)
        return
    out[:, :] = 0.0
    for t in range(n):
        for a in range(D):
            va = rows[t, a]
            for b in range(D):
                out[a, b] += va * rows[t, b]


@numba.njit(cache=True, nogil=True)
def blocking_push(y, count, S, Q, P, first, last, has_last, pending, has_pending):
    """Push block-mean vectors ``y`` (n, D), one row per block, into the dyadic blocking levels.

    Level ``k`` keeps, for the vector series of its block means: ``count[k]``, the sum
    ``S[k]`` (D,), the sum of outer products ``Q[k]`` (D, D), the symmetrised lag-one product
    sum ``P[k]`` (sum of (y_i y_{i+1}^T + y_{i+1} y_i^T) / 2), the first and last vectors, and
    a pending vector waiting for its pair. Pairs of level-``k`` values are averaged into level
    ``k + 1`` (Flyvbjerg & Petersen 1989). Returns the number of levels in use.

    The lag products cost no product of their own over the pairs that form the next level:
    for neighbours a, b, sym(a b^T) = ((a + b)(a + b)^T - a a^T - b b^T) / 2, and a + b is
    twice a next-level row for every other neighbour pair, whose outer products are the next
    level's ``Q`` increment anyway. Only the other half of the pairs needs a Gram matrix: three
    row-products per level-0 row in all levels together instead of four.
    """
    D = y.shape[1]
    nlev = count.shape[0]
    cur = y
    g_cur = np.empty((D, D))
    g_next = np.empty((D, D))
    g_other = np.empty((D, D))
    _gram(cur, g_cur)
    used = 0
    for k in range(nlev):
        n = cur.shape[0]
        if n == 0:
            break
        used = k + 1
        for t in range(n):
            for a in range(D):
                S[k, a] += cur[t, a]
        # neighbour pairs of this call (with the previous call's last row in front): those
        # averaged into level k + 1 (nxt) and the others (their sums in ``other``)
        paired = has_pending[k]
        total = n + (1 if paired else 0)
        nxt = np.empty((total // 2, D))
        other = np.empty((n // 2 + 1, D))
        j = 0
        o = 0
        if paired:
            for a in range(D):
                nxt[0, a] = 0.5 * (pending[k, a] + cur[0, a])
            j = 1
            t = 1
            has_pending[k] = False
        else:
            t = 0
            if has_last[k]:
                for a in range(D):
                    other[0, a] = last[k, a] + cur[0, a]
                o = 1
        while t + 1 < n:
            for a in range(D):
                nxt[j, a] = 0.5 * (cur[t, a] + cur[t + 1, a])
            j += 1
            if t + 2 < n:
                for a in range(D):
                    other[o, a] = cur[t + 1, a] + cur[t + 2, a]
                o += 1
            t += 2
        if paired and n >= 2:
            # (cur_0, cur_1) is not a pair of the next level
            for a in range(D):
                other[o, a] = cur[0, a] + cur[1, a]
            o += 1
        if t < n:
            for a in range(D):
                pending[k, a] = cur[t, a]
            has_pending[k] = True
        _gram(nxt, g_next)
        _gram(other[:o], g_other)
        # sum over pairs of (a a^T + b b^T): every row of the chain twice, its ends once;
        # the chain starts at the previous call's last row when there is one
        sign = 1.0 if has_last[k] else -1.0
        head = last[k] if has_last[k] else cur[0]
        tail = cur[n - 1]
        Qk = Q[k]
        Pk = P[k]
        for a in range(D):
            ha = 0.5 * sign * head[a]
            ta = 0.5 * tail[a]
            for b in range(D):
                g = g_cur[a, b]
                Qk[a, b] += g
                Pk[a, b] += (
                    2.0 * g_next[a, b] + 0.5 * g_other[a, b] - g - ha * head[b] + ta * tail[b]
                )
        if count[k] == 0:
            first[k] = cur[0]
        last[k] = cur[n - 1]
        has_last[k] = True
        count[k] += n
        cur = nxt
        g_cur, g_next = g_next, g_cur
    return used


@numba.njit(cache=True, nogil=True)
def segment_push(means, seg_sums, seg_cur, full, length, fill):
    """Add base-block component means ``means`` (nb, m) to the segment store.

    ``seg_sums`` (S, m) holds ``full`` complete segments of ``length`` base blocks each;
    ``seg_cur`` the sums of the segment being filled (``fill`` base blocks so far). When all
    S slots are full, neighbours are paired and the length doubles; the partial segment keeps
    filling against the doubled length. Returns the new ``(full, length, fill)``.
    """
    nb, m = means.shape
    S = seg_sums.shape[0]
    acc = np.empty(m)
    i = 0
    while i < nb:
        take = min(length - fill, nb - i)
        for c in range(m):
            acc[c] = 0.0
        for t in range(i, i + take):
            for c in range(m):
                acc[c] += means[t, c]
        for c in range(m):
            seg_cur[c] += acc[c]
        fill += take
        i += take
        if fill == length:
            for c in range(m):
                seg_sums[full, c] = seg_cur[c]
                seg_cur[c] = 0.0
            full += 1
            fill = 0
            if full == S:
                half = S // 2
                for j in range(half):
                    for c in range(m):
                        seg_sums[j, c] = seg_sums[2 * j, c] + seg_sums[2 * j + 1, c]
                for j in range(half, S):
                    for c in range(m):
                        seg_sums[j, c] = 0.0
                full = half
                length *= 2
    return full, length, fill


@numba.njit(cache=True, nogil=True)
def ingest_block(
    x,
    ref,
    base,
    carry_n,
    carry_sums,
    r_target,
    r_src,
    r_comp,
    mean,
    s2,
    s3,
    s4,
    count,
    S,
    Q,
    P,
    first,
    last,
    has_last,
    pending,
    has_pending,
    seg_sums,
    seg_cur,
    seg_full,
    seg_len,
    seg_fill,
):
    """One block into a blocking state, in one call: :func:`block_sums`, the base block left
    unfinished by earlier blocks (``carry_n`` rows, sums ``carry_sums``, updated in place),
    :func:`blocking_push` and :func:`segment_push` (the Python glue between them cost about a
    tenth of the block's time). Returns ``(carry_n, seg_full, seg_len, seg_fill)``.
    """
    n, m = x.shape
    D = carry_sums.shape[0]
    head_len = base - carry_n if carry_n else 0
    h = min(head_len, n)
    nb = (n - h) // base
    rest = n - h - nb * base
    R = np.empty((nb + 2, D))
    block_sums(x, ref, base, head_len, r_target, r_src, r_comp, mean, s2, s3, s4, R)
    completes = False
    if h:
        for q in range(D):
            carry_sums[q] += R[0, q]
        carry_n += h
        completes = carry_n == base
    rows = nb + (1 if completes else 0)
    y = np.empty((rows, D))
    j = 0
    if completes:
        for q in range(D):
            y[0, q] = carry_sums[q] / base
            carry_sums[q] = 0.0
        carry_n = 0
        j = 1
    for b in range(nb):
        for q in range(D):
            y[j + b, q] = R[1 + b, q] / base
    if rest:
        carry_n = rest
        for q in range(D):
            carry_sums[q] = R[nb + 1, q]
    if rows:
        blocking_push(y, count, S, Q, P, first, last, has_last, pending, has_pending)
        seg_full, seg_len, seg_fill = segment_push(
            y[:, :m], seg_sums, seg_cur, seg_full, seg_len, seg_fill
        )
    return carry_n, seg_full, seg_len, seg_fill
