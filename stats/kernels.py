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

import math
from typing import NamedTuple

import numba
import numpy as np

__all__ = [
    "BlockingLevels",
    "CentralSums",
    "RecentreTable",
    "ReportOrder",
    "Segments",
    "ShiftTable",
    "block_sums",
    "blocking_push",
    "central_sums",
    "central_terms_and_jacobian",
    "chain_rule",
    "influence_autocovariances",
    "ingest_block",
    "integral_scales",
    "inversions",
    "jonsson_lugsail",
    "kernel_view",
    "merge_comoments",
    "monomial_sums",
    "segment_push",
    "shift_comoments",
    "trend_and_halves",
]


# Bundles: the arrays of one piece of state, passed to a kernel as one argument (the kernels
# update the arrays in place). Each NamedTuple below names the fields and their order; the
# owning class builds the bundle in that order and hands the kernel a *plain* tuple: numba's
# dispatcher types an exact tuple of arrays on its fast path, a NamedTuple on the slow one
# (measured about 4 us more per BlockingAccumulator.update, -18 % at 512-row blocks).


class ShiftTable(NamedTuple):
    """Moving central sums to another centre: one row per (target combo, subset of its
    positions with size != 1); built by ``monomials.layout``."""

    order: np.ndarray  # order p of the target
    target: np.ndarray  # index of the target combo within order p
    src_order: np.ndarray  # size s of the subset (0 or 2..p)
    src: np.ndarray  # index of the subset combo within order s
    comp: np.ndarray  # (T, 4) components of the complement, -1 padded


class RecentreTable(NamedTuple):
    """Moving monomial sums to another centre (first-order sums need not vanish): one row per
    (target monomial, subset of its positions); built by ``monomials.layout``."""

    target: np.ndarray  # target monomial
    src: np.ndarray  # source monomial, or -1 (the count)
    comp: np.ndarray  # (R, 4) components of the complement, -1 padded


class ReportOrder(NamedTuple):
    """Where :func:`chain_rule` finds each statistic among the central co-moments, in report
    order; built by ``delta.StatisticTable``."""

    kfac: float  # k's factor for the number of components
    stress: np.ndarray  # positions of the Reynolds stresses
    third: np.ndarray  # of the third-order co-moments
    fourth: np.ndarray  # of the fourth-order co-moments
    c2: np.ndarray  # of uu, vv, ww
    c3: np.ndarray  # of uuu, vvv, www
    c4: np.ndarray  # of uuuu, vvvv, wwww


class CentralSums(NamedTuple):
    """Output of a block reduction: the block mean (m,) and central co-moment sums of order
    2, 3 and 4 (one entry per combo of that order)."""

    mean: np.ndarray
    s2: np.ndarray
    s3: np.ndarray
    s4: np.ndarray


class BlockingLevels(NamedTuple):
    """The dyadic levels of a blocking state (L levels, D monomials); see
    :func:`blocking_push` for what each holds."""

    count: np.ndarray  # (L,) int64
    S: np.ndarray  # (L, D)
    Q: np.ndarray  # (L, D, D)
    P: np.ndarray  # (L, D, D)
    first: np.ndarray  # (L, D)
    last: np.ndarray  # (L, D)
    has_last: np.ndarray  # (L,) bool
    pending: np.ndarray  # (L, D)
    has_pending: np.ndarray  # (L,) bool


class Segments(NamedTuple):
    """Segment store of component means: ``sums`` (SEGMENTS, m) of the complete segments and
    ``cur`` (m,) of the one being filled."""

    sums: np.ndarray
    cur: np.ndarray

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
def block_sums(x, ref, base, head_len, table, out, R):
    """Both reductions of a block in one sweep: moments *and* base-block monomial sums.

    The sweep takes every monomial (degree 1-4) of ``x - ref``, ``ref`` a fixed point near the
    stream's mean (its first block's mean): the "shifted data" way to keep a large mean from
    costing digits (Chan, Golub & LeVeque 1983). Chunks are cut on the stream's base-block
    boundaries: ``head_len`` rows finish a base block begun earlier, then full blocks of
    ``base`` rows, then the tail; ``R`` (nb + 2, D) gets the chunk sums (row 0 the head,
    1..nb the full blocks, nb + 1 the tail; absent chunks are zero). Their total, re-centred
    exactly on the block mean (the subset expansion of ``table``, a :class:`RecentreTable`
    bundle), gives the block's mean and central sums (``out``, a :class:`CentralSums` bundle)
    for the moment accumulator.
    """
    r_target, r_src, r_comp = table
    mean, s2, s3, s4 = out
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
def blocking_push(y, levels):
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
    row-products per level-0 row in all levels together instead of four. ``levels`` is a
    :class:`BlockingLevels`, updated in place.
    """
    count, S, Q, P, first, last, has_last, pending, has_pending = levels
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
def segment_push(means, segments, full, length, fill):
    """Add base-block component means ``means`` (nb, m) to the segment store.

    ``segments`` (a :class:`Segments` bundle): ``sums`` (S, m) holds ``full`` complete
    segments of ``length`` base blocks each, ``cur`` the sums of the segment being filled
    (``fill`` base blocks so far). When all
    S slots are full, neighbours are paired and the length doubles; the partial segment keeps
    filling against the doubled length. Returns the new ``(full, length, fill)``.
    """
    seg_sums, seg_cur = segments
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
    x, ref, base, carry_n, carry_sums, table, out, levels, segments, seg_full, seg_len, seg_fill
):
    """One block into a blocking state, in one call: :func:`block_sums`, the base block left
    unfinished by earlier blocks (``carry_n`` rows, sums ``carry_sums``, updated in place),
    :func:`blocking_push` and :func:`segment_push` (the Python glue between them cost about a
    tenth of the block's time). Bundles: ``table`` a :class:`RecentreTable`, ``out`` a
    :class:`CentralSums` (filled), ``levels`` a :class:`BlockingLevels` and ``segments`` a
    :class:`Segments` (updated). Returns ``(carry_n, seg_full, seg_len, seg_fill)``.
    """
    n, m = x.shape
    D = carry_sums.shape[0]
    head_len = base - carry_n if carry_n else 0
    h = min(head_len, n)
    nb = (n - h) // base
    rest = n - h - nb * base
    R = np.empty((nb + 2, D))
    block_sums(x, ref, base, head_len, table, out, R)
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
        blocking_push(y, levels)
        seg_full, seg_len, seg_fill = segment_push(y[:, :m], segments, seg_full, seg_len, seg_fill)
    return carry_n, seg_full, seg_len, seg_fill


@numba.njit(cache=True, nogil=True)
def shift_comoments(n, sums, shift, table, out, accumulate=False):
    """Sums of products of ``(x - c) + shift`` of order 2, 3, 4 from the central sums ``sums``
    (the triple s2, s3, s4) of ``n`` samples about ``c``, by the subset expansion of
    ``table`` (a :class:`ShiftTable`); written into (or, with ``accumulate``, added to) the
    triple ``out``."""
    s2, s3, s4 = sums
    o2, o3, o4 = out
    t_order, t_target, t_src_order, t_src, t_comp = table
    if not accumulate:
        for q in range(o2.shape[0]):
            o2[q] = 0.0
        for q in range(o3.shape[0]):
            o3[q] = 0.0
        for q in range(o4.shape[0]):
            o4[q] = 0.0
    for r in range(t_order.shape[0]):
        so = t_src_order[r]
        if so == 0:
            v = n
        elif so == 2:
            v = s2[t_src[r]]
        elif so == 3:
            v = s3[t_src[r]]
        else:
            v = s4[t_src[r]]
        for j in range(4):
            c = t_comp[r, j]
            if c >= 0:
                v *= shift[c]
        p = t_order[r]
        if p == 2:
            o2[t_target[r]] += v
        elif p == 3:
            o3[t_target[r]] += v
        else:
            o4[t_target[r]] += v


@numba.njit(cache=True, nogil=True)
def merge_comoments(na, mean_a, a, nb, mean_b, b, table, mean, out):
    """Pairwise merge of central sums (Pebay 2008): the triples ``a`` (of ``na`` samples about
    ``mean_a``) and ``b`` re-centred on the combined mean (written to ``mean``) and added into
    the triple ``out``."""
    n = na + nb
    m = mean_a.shape[0]
    sa = np.empty(m)
    sb = np.empty(m)
    for i in range(m):
        delta = mean_b[i] - mean_a[i]
        sa[i] = -delta * (nb / n)
        sb[i] = delta * (na / n)
        mean[i] = mean_a[i] + delta * (nb / n)
    shift_comoments(na, a, sa, table, out)
    shift_comoments(nb, b, sb, table, out, True)


@numba.njit(cache=True, nogil=True)
def central_terms_and_jacobian(raw, m, mono, comp, owner, terms, J):
    """Terms of the central co-moments (T,) and their Jacobian ``J`` (C, D) from monomial means.

    ``raw`` (D,) are the monomial means of ``x - ref``; ``delta = raw[:m]``. Term ``t`` of the
    expansion table (see :class:`StatisticTable`) is ``raw[mono[t]] * prod(-delta[comp[t]])``
    and belongs to co-moment ``owner[t]``; index D of ``raw`` and index m of ``-delta`` stand
    for 1. The Jacobian collects d/d raw[mono] (the product) and d/d delta_i (-1 times the
    product of the other factors), in that order.
    """
    D = raw.shape[0]
    T = mono.shape[0]
    J[:, :] = 0.0
    f = np.empty(4)
    for t in range(T):
        for p in range(4):
            c = comp[t, p]
            f[p] = -raw[c] if c < m else 1.0
        coef = f[0] * f[1] * f[2] * f[3]
        mo = mono[t]
        if mo < D:
            terms[t] = raw[mo] * coef
            J[owner[t], mo] += coef
        else:
            terms[t] = coef
    for p in range(4):
        for t in range(T):
            c = comp[t, p]
            if c >= m:
                continue
            others = 1.0
            first = True
            for q in range(4):
                if q == p:
                    continue
                cq = comp[t, q]
                fq = -raw[cq] if cq < m else 1.0
                if first:
                    others = fq
                    first = False
                else:
                    others = others * fq
            mo = mono[t]
            r = raw[mo] if mo < D else 1.0
            J[owner[t], c] += -r * others


@numba.njit(cache=True, nogil=True, error_model="numpy")
def chain_rule(raw, ref, cen, J, order, values, grad):
    """Every statistic (values (S,), gradient (S, D)) from the central co-moments ``cen`` and
    their Jacobian ``J``, in report order: means, stresses, k, third and fourth moments,
    skewness, flatness; ``order`` (a :class:`ReportOrder` bundle) says where each is in ``cen``.
    Same expressions as :meth:`StatisticTable.evaluate`.
    """
    kfac, stress, third, fourth, c2, c3, c4 = order
    m = c2.shape[0]
    D = J.shape[1]
    grad[:, :] = 0.0
    r = 0
    for i in range(m):  # means: ref + first-order monomial mean
        values[r] = ref[i] + raw[i]
        grad[r, i] = 1.0
        r += 1
    for q in stress:
        values[r] = cen[q]
        grad[r, :] = J[q, :]
        r += 1
    k = 0.0
    for i in range(m):
        k += cen[c2[i]]
    values[r] = kfac * k
    for d in range(D):
        acc = J[c2[0], d]
        for i in range(1, m):
            acc += J[c2[i], d]
        grad[r, d] = kfac * acc
    r += 1
    for pos in (third, fourth):
        for q in pos:
            values[r] = cen[q]
            grad[r, :] = J[q, :]
            r += 1
    # skewness uuu / uu^1.5, then flatness uuuu / uu^2: s_k / s2^p and its gradient
    for ck, p in ((c3, 1.5), (c4, 2.0)):
        for i in range(m):
            s2, sk = cen[c2[i]], cen[ck[i]]
            a, b = s2**p, p * sk / s2 ** (p + 1.0)
            values[r] = sk / a
            for d in range(D):
                grad[r, d] = J[ck[i], d] / a - b * J[c2[i], d]
            r += 1


@numba.njit(cache=True, nogil=True, error_model="numpy")
def influence_autocovariances(grad, n, S, Q, P, first, last, mu, c0, gamma):
    """Lag-0 and lag-1 autocovariances of every statistic's influence series, per level.

    The influence series of statistic ``s`` is ``grad[s] @ y`` over the monomial block means
    ``y``; a blocking level ``k`` keeps ``n[k]`` of them as sums: ``S`` (L, D), outer-product
    sums ``Q`` and symmetrised lag-one sums ``P`` (L, D, D), ``first``/``last`` (L, D). With
    ``g = grad[s]``, ``zq = g Q_k g``, ``zp = g P_k g``, ``zs``, ``zf``, ``zl`` the projections
    of ``S``, ``first``, ``last``, and ``zmu = g @ mu`` the global mean (all base blocks):

        c0[s, k]    = (zq - 2 zmu zs + n zmu^2) / n
        gamma[s, k] = (zp - zmu (2 zs - zf - zl) + (n - 1) zmu^2) / n

    i.e. about the *global* mean, not each level's own (REFERENCES §2 pitfall). A gradient
    touches only the monomials of its statistic's components and order, so only its nonzero
    entries enter the products (exact zeros add nothing; a NaN entry is kept).
    """
    n_stat, D = grad.shape
    L = Q.shape[0]
    idx = np.empty(D, dtype=np.int64)
    g = np.empty(D)
    for s in range(n_stat):
        nz = 0
        for a in range(D):
            if grad[s, a] != 0.0:
                idx[nz] = a
                g[nz] = grad[s, a]
                nz += 1
        zmu = 0.0
        for i in range(nz):
            zmu += g[i] * mu[idx[i]]
        for k in range(L):
            zq = 0.0
            zp = 0.0
            zs = 0.0
            zf = 0.0
            zl = 0.0
            for i in range(nz):
                a = idx[i]
                ga = g[i]
                rq = 0.0
                rp = 0.0
                for j in range(nz):
                    b = idx[j]
                    rq += Q[k, a, b] * g[j]
                    rp += P[k, a, b] * g[j]
                zq += ga * rq
                zp += ga * rp
                zs += ga * S[k, a]
                zf += ga * first[k, a]
                zl += ga * last[k, a]
            nk = n[k]
            c0[s, k] = (zq - 2.0 * zmu * zs + nk * zmu**2) / nk
            gamma[s, k] = (zp - zmu * (2.0 * zs - zf - zl) + (nk - 1.0) * zmu**2) / nk


@numba.njit(cache=True, nogil=True, error_model="numpy")
def jonsson_lugsail(
    c0, gamma, n, q, lbf, ref_fine, ref_top, min_level, ref_floor, base, var, level, blocks,
    block_samples, rel,
    ratio, dof_up, dof_ref, top,
):
    """Row by row: the first level j >= 1 whose M_j passes, its lugsail variance (choose_level),
    and the statistic of the rise test (blocking._rise_test; NaN where none can be formed).

    ``c0``, ``gamma`` (S, L'); levels 0 .. K-1 take part, K = q.size (K >= 2), and level K's
    c0 exists (a level with 4 blocks has one above it). Haar detail energy per degree of
    freedom, on the scale of the variance of the mean: det_k = (n_k c0_k - 2 n_{k+1}
    c0_{k+1}) 2^k / (n_k - n_{k+1}). ``ratio``: the pooled det_k of the coarse levels
    k > max(ref_top, j) over the reference 2 det_r - det_{r-1} at r = max(ref_fine,
    ref_floor + 1); ``dof_up``, ``dof_ref``: their degrees of freedom; ``top``: the largest
    V_k of the coarse levels (at least the chosen variance). ``min_level`` (S,) the lowest
    level each row may use (above K - 1: unknown); ``ref_floor`` (S,) the level whose blocks
    are just long enough against the integral time (the reference is above it).
    """
    S = c0.shape[0]
    K = q.shape[0]
    r2 = np.empty(K)
    for s in range(S):
        top[s] = np.nan
        ratio[s] = np.nan
        dof_up[s] = np.nan
        dof_ref[s] = np.nan
        for jj in range(K):
            r = n[jj] * (gamma[s, jj] / c0[s, jj]) ** 2
            r2[jj] = r if np.isfinite(r) else np.inf
        # M_j = sum_{k >= j} r2_k, summed from the top level down
        first_ok = -1
        acc = 0.0
        for jj in range(K - 1, -1, -1):
            acc += r2[jj]
            if acc < q[jj]:
                first_ok = jj
        j = min(max(first_ok, 1), K - 1)  # never level 0 alone
        if min_level[s] > j:
            j = min_level[s]
        nj, nm = (n[j], n[j - 1]) if j < K else (0.0, 0.0)
        if first_ok < 0 or not (nj >= 2 and nm >= 2):
            var[s], level[s], blocks[s], block_samples[s], rel[s] = np.nan, -1, 0, 0, np.nan
            continue
        vj = c0[s, j] / (nj - 1)
        vm = c0[s, j - 1] / (nm - 1)
        # lugsail 2 V_j - V_{j-1}; never below V_j; rounding can leave c0 a hair below zero
        # (NaN propagates, as np.maximum does)
        v = 2.0 * vj - vm
        if vj > v or np.isnan(vj):
            v = vj
        if v < 0.0:
            v = 0.0
        # a level above whose variance is surely higher (its lower confidence bound) raises it
        for kk in range(j + 1, K):
            vlb = lbf[kk] * c0[s, kk] / (n[kk] - 1)
            if vlb > v:
                v = vlb
        var[s] = v
        level[s] = j
        blocks[s] = np.int64(nj)
        block_samples[s] = base * 2**j
        # relative SE of the lugsail variance: 4*2/n + 2/(2n) - 4*0.707*sqrt(2/n)*sqrt(1/n)
        # = 5/n for white block means at level j-1 (Gaussian, corr(V_j, V_{j-1}) = 1/sqrt(2));
        # the standard error's relative error is half of its square root.
        rel[s] = 0.5 * np.sqrt(5.0 / max(nj - 1, 1.0))
        # slow content: Haar detail energy of the coarse levels against a fine reference
        r = ref_fine
        if ref_floor[s] + 1 > r:
            r = ref_floor[s] + 1
        u = max(ref_top, j) + 1
        if r < 1 or r >= K - 1 or u <= r or u > K - 1:
            continue
        d_r = n[r] - n[r + 1]
        d_m = n[r - 1] - n[r]
        det_r = (n[r] * c0[s, r] - 2.0 * n[r + 1] * c0[s, r + 1]) * 2.0**r / d_r
        det_m = (n[r - 1] * c0[s, r - 1] - 2.0 * n[r] * c0[s, r]) * 2.0 ** (r - 1) / d_m
        ref = 2.0 * det_r - det_m
        if not ref > 0.0:
            continue
        up = 0.0
        dof = 0.0
        vmax = v
        for kk in range(u, K):
            d_k = n[kk] - n[kk + 1]
            up += (n[kk] * c0[s, kk] - 2.0 * n[kk + 1] * c0[s, kk + 1]) * 2.0**kk
            dof += d_k
            vk = c0[s, kk] / (n[kk] - 1)
            if vk > vmax:
                vmax = vk
        ratio[s] = up / dof / ref
        dof_up[s] = dof
        # Satterthwaite: Var(2 X - Y) for X, Y independent scaled chi-squared (d_r, d_m)
        dof_ref[s] = 2.0 * ref**2 / (8.0 * det_r**2 / d_r + 2.0 * det_m**2 / d_m)
        top[s] = vmax


@numba.njit(cache=True, nogil=True, error_model="numpy")
def integral_scales(duration_s, var, rel, m, values, se):
    """Append Tint, Neff and L of each component to ``values`` and fill ``se`` (S,).

    ``values`` holds the moment statistics followed by 3 m free places; ``var`` and ``rel``
    are the variances and relative standard errors of the moment statistics. From the error
    of the mean: Var(mean) = 2 sigma^2 Tint / T, N_eff = sigma^2 / Var(mean) (REFERENCES §1);
    the integral length by Taylor's hypothesis, convected at the local mean speed |U|. The
    relative error of a variance estimate is twice that of its square root; the mean speed's
    own relative error adds in quadrature for the length.
    """
    k = var.shape[0]
    for i in range(k):
        se[i] = np.sqrt(var[i])
    speed2 = 0.0
    spread2 = 0.0
    for i in range(m):
        speed2 += values[i] ** 2
        spread2 += (values[i] * se[i]) ** 2
    speed = np.sqrt(speed2)
    rel_speed = np.sqrt(spread2) / speed**2
    for i in range(m):
        sig2 = values[m + i]
        tint = duration_s * var[i] / (2.0 * sig2)
        neff = sig2 / var[i]
        length = speed * tint
        rel_t = 2 * rel[i]
        values[k + i] = tint
        values[k + m + i] = neff
        values[k + 2 * m + i] = length
        se[k + i] = rel_t * tint
        se[k + m + i] = rel_t * neff
        se[k + 2 * m + i] = np.sqrt(rel_t**2 + rel_speed**2) * length


@numba.njit(cache=True, nogil=True)
def inversions(x, out):
    """``out[c] = #{i < j : x[i, c] > x[j, c]}`` for every column ``c`` of ``x`` (n, k)."""
    n, k = x.shape
    for c in range(k):
        a = 0
        for i in range(n - 1):
            xi = x[i, c]
            for j in range(i + 1, n):
                if xi > x[j, c]:
                    a += 1
        out[c] = a


@numba.njit(cache=True, nogil=True)
def trend_and_halves(x, t, slope, first, second):
    """Per column ``c`` of ``x`` (n, k): the regression ``t`` and ``slope`` of the values against
    their centred index (NaN when n < 3 or the fit is perfect), and the means ``first`` and
    ``second`` of the first and last ``n // 2`` values (NaN when n < 2)."""
    n, k = x.shape
    h = n // 2
    sxx = 0.0
    for r in range(n):
        i = r - 0.5 * (n - 1)
        sxx += i * i
    for c in range(k):
        s = 0.0
        for r in range(n):
            s += x[r, c]
        mean = s / n if n > 0 else np.nan
        sxy = 0.0
        for r in range(n):
            sxy += (r - 0.5 * (n - 1)) * (x[r, c] - mean)
        b = sxy / sxx if n >= 3 else np.nan
        ss = 0.0
        for r in range(n):
            e = (x[r, c] - mean) - b * (r - 0.5 * (n - 1))
            ss += e * e
        slope[c] = b
        t[c] = np.nan
        if n >= 3:
            s2 = ss / (n - 2)
            if s2 > 0.0:
                t[c] = b / math.sqrt(s2 / sxx)
        f = 0.0
        g = 0.0
        for r in range(h):
            f += x[r, c]
            g += x[n - h + r, c]
        first[c] = f / h if h > 0 else np.nan
        second[c] = g / h if h > 0 else np.nan
