"""Numba kernels of :class:`~eddyvigil.stats.field.FieldStatistics` (rakes and PIV fields).

Memory layout: probe-major. Every array of the state has the probe axis first, so all of one
probe's state (running sums, base block, every blocking level) is one contiguous stretch; the
ingest kernel loops over the probes outside and over the block's snapshots inside, so a probe's
state stays in the first-level cache while its samples of the whole block go through it, and
the snapshots of a probe are summed in time order (the same sums, bit for bit, whatever the
split of the rows into calls). The field accumulator batches: one call per block of snapshots,
no allocation per snapshot or probe. Measured against the earlier level-major layout (time
outside, probes inside): about 1.7x the ingest rate (benchmarks/bench_field.py). No fastmath:
re-associated sums would differ in the last bit with the split of the rows.

Bundles (plain tuples, in the field order of these NamedTuples; DEVELOPERS "The kernels rule"):
:class:`FieldRunning` and :class:`FieldLevels`, built by ``FieldStatistics._running()`` and
``_levels()``.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

__all__ = ["FieldRunning", "FieldLevels", "field_ingest", "field_forms", "TILE", "CHUNK"]

#: Probes per tile and snapshots per chunk of field_ingest (64 x 64 x 3 components: 96 KiB).
TILE = 64
CHUNK = 64


class FieldRunning(NamedTuple):
    """Per probe: reference (first valid sample), running totals, the base block in progress."""

    ref: np.ndarray  # (P, m) float64
    has_ref: np.ndarray  # (P,) bool
    count: np.ndarray  # (P,) int64 valid samples
    tot: np.ndarray  # (P, M) sums of the monomials about ref
    bsum: np.ndarray  # (P, M) sums of the base block in progress
    bcnt: np.ndarray  # (P,) int64 samples in it


class FieldLevels(NamedTuple):
    """Per probe and dyadic level: blocks, sums of block means, lag-0/1 product sums."""

    nb: np.ndarray  # (P, L) int64 blocks
    S1: np.ndarray  # (P, L, M) sum of block means
    Q0: np.ndarray  # (P, L, M, M) lag-0 products (upper triangle)
    Q1: np.ndarray  # (P, L, M, M) lag-1 products (previous block x this one)
    first: np.ndarray  # (P, L, M) first block mean
    last: np.ndarray  # (P, L, M) last block mean
    pend: np.ndarray  # (P, L, M) the block waiting for its pair
    pflag: np.ndarray  # (P, L) bool: a block waits


@numba.njit(cache=True, nogil=True)
def field_ingest(x, valid, masked, running, levels, base, pa, pb):
    """Add the rows of ``x`` (n, P, m) to every probe's sums and levels.

    ``masked``: use ``valid`` (n, P) (False rows of a probe are skipped); otherwise every row
    is valid and ``valid`` is not read. Per probe: reference on its first valid sample,
    monomials ``y_a = x_a - r_a`` and ``y_a y_b`` (pairs ``pa``, ``pb``), totals, the base
    block in progress and, at each full base block, the push of its mean through the levels
    (sums of block means, lag-0 products' upper triangle, lag-1 products, first/last block;
    a level's pair of blocks averaged into the level above). Probes go in tiles of
    ``TILE`` and the snapshots in chunks of ``CHUNK``: a tile's chunk is copied probe-major first
    (one strided read), then each probe runs through its snapshots in time order with its
    state in cache.
    """
    ref, has_ref, count, tot, bsum, bcnt = running
    nb, S1, Q0, Q1, first, last, pend, pflag = levels
    n, P, m = x.shape
    npair = pa.shape[0]
    M = m + npair
    L = nb.shape[1]
    y = np.empty(M)
    b = np.empty(M)
    T = TILE
    xt = np.empty((T, CHUNK, m))
    for i0 in range(0, n, CHUNK):
        i1 = min(n, i0 + CHUNK)
        for p0 in range(0, P, T):
            p1 = min(P, p0 + T)
            for i in range(i0, i1):
                for p in range(p0, p1):
                    for a in range(m):
                        xt[p - p0, i - i0, a] = x[i, p, a]
            for p in range(p0, p1):
                q = p - p0
                cnt = bcnt[p]
                got = 0
                for i in range(i0, i1):
                    if masked and not valid[i, p]:
                        continue
                    if not has_ref[p]:
                        for a in range(m):
                            ref[p, a] = xt[q, i - i0, a]
                        has_ref[p] = True
                    for a in range(m):
                        y[a] = xt[q, i - i0, a] - ref[p, a]
                    for j in range(npair):
                        y[m + j] = y[pa[j]] * y[pb[j]]
                    got += 1
                    for a in range(M):
                        tot[p, a] += y[a]
                        bsum[p, a] += y[a]
                    cnt += 1
                    if cnt < base:
                        continue
                    for a in range(M):
                        b[a] = bsum[p, a] / base
                        bsum[p, a] = 0.0
                    cnt = 0
                    lev = 0
                    while lev < L:
                        k = nb[p, lev]
                        if k == 0:
                            for a in range(M):
                                first[p, lev, a] = b[a]
                        else:
                            for a in range(M):
                                la = last[p, lev, a]
                                for c in range(M):
                                    Q1[p, lev, a, c] += la * b[c]
                        for a in range(M):
                            ba = b[a]
                            S1[p, lev, a] += ba
                            last[p, lev, a] = ba
                            for c in range(a, M):  # symmetric: the upper triangle only
                                Q0[p, lev, a, c] += ba * b[c]
                        nb[p, lev] = k + 1
                        if pflag[p, lev]:
                            for a in range(M):
                                b[a] = 0.5 * (pend[p, lev, a] + b[a])
                            pflag[p, lev] = False
                            lev += 1
                        else:
                            for a in range(M):
                                pend[p, lev, a] = b[a]
                            pflag[p, lev] = True
                            break
                bcnt[p] = cnt
                count[p] += got

@numba.njit(cache=True, nogil=True)
def field_forms(G, nz, nnz, levels, c0, gamma):
    """Lag-0 and lag-1 autocovariances (P, S, L) of every statistic's block means per level.

    ``G`` (P, S, M): gradients; ``nz`` (S, K) the monomials where statistic s's gradient may be
    nonzero (the first ``nnz[s]``; the same pattern for every probe). For gradient g and a
    level's block means b_i (i = 1..n) about mu (the base blocks' mean):
    c0 = g' [Q0/n - (S1 mu' + mu S1')/n + mu mu'] g and
    gamma = g' [Q1 - (S1 - last) mu' - mu (S1 - first)' + (n - 1) mu mu'] g / n.
    Levels without blocks are NaN.
    """
    nb, S1, Q0, Q1, first, last, pend, pflag = levels
    P, S, M = G.shape
    L = nb.shape[1]
    mu = np.empty(M)
    for p in range(P):
        n0 = nb[p, 0]
        if n0 >= 1:
            for a in range(M):
                mu[a] = S1[p, 0, a] / n0
        for lev in range(L):
            n = nb[p, lev]
            if n < 1:
                for s in range(S):
                    c0[p, s, lev] = np.nan
                    gamma[p, s, lev] = np.nan
                continue
            for s in range(S):
                K = nnz[s]
                gm = 0.0
                gs = 0.0
                gh = 0.0
                gt = 0.0
                q0 = 0.0
                q1 = 0.0
                for ia in range(K):
                    a = nz[s, ia]
                    g = G[p, s, a]
                    gm += g * mu[a]
                    s1 = S1[p, lev, a]
                    gs += g * s1
                    gh += g * (s1 - last[p, lev, a])
                    gt += g * (s1 - first[p, lev, a])
                    r1 = 0.0
                    r0 = 0.0
                    for ic in range(K):
                        c = nz[s, ic]
                        gc = G[p, s, c]
                        r1 += Q1[p, lev, a, c] * gc
                        if c > a:
                            r0 += Q0[p, lev, a, c] * gc
                    q0 += g * (Q0[p, lev, a, a] * g + 2.0 * r0)
                    q1 += g * r1
                c0[p, s, lev] = (q0 - 2.0 * gs * gm) / n + gm * gm
                gamma[p, s, lev] = (q1 - gh * gm - gm * gt + (n - 1.0) * gm * gm) / n
