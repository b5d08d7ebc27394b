"""Numba kernels of the Welch spectra (plain loops, no validation, no state).

``window_pairs`` cuts a batch of overlapping segments out of the column-major sample buffer,
removes each segment's mean (summed in float64) and applies the window, in one pass per segment,
two consecutive segments of a column packed as the real and imaginary parts of one complex row
of a preallocated work array (one complex transform then serves two real segments: pocketfft's
SIMD complex transforms cost ~20 % less per segment than its real ones in batches of 8 or more
pairs). ``accumulate_pairs`` separates the two segments' power from the packed transform and
adds it into the running sums in one pass, with no temporaries. Both are checked against
scipy.signal.welch in tests/test_spectra.py.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = [
    "accumulate_pair_groups", "accumulate_pairs", "flattest_run", "segment_sum", "window_pairs",
]


@numba.njit(cache=True, nogil=True)
def segment_sum(x: np.ndarray, start: int, n: int) -> float:  # pragma: no cover - compiled
    """``sum(x[start:start + n])`` in float64 over eight interleaved partial sums (a fixed order,
    eight independent chains instead of one long one)."""
    a0 = a1 = a2 = a3 = a4 = a5 = a6 = a7 = 0.0
    t = start
    stop = start + n
    while t + 8 <= stop:
        a0 += x[t]
        a1 += x[t + 1]
        a2 += x[t + 2]
        a3 += x[t + 3]
        a4 += x[t + 4]
        a5 += x[t + 5]
        a6 += x[t + 6]
        a7 += x[t + 7]
        t += 8
    while t < stop:
        a0 += x[t]
        t += 1
    return ((a0 + a1) + (a2 + a3)) + ((a4 + a5) + (a6 + a7))


@numba.njit(cache=True, nogil=True)
def window_pairs(
    buf: np.ndarray, first: int, step: int, k: int, window: np.ndarray, out: np.ndarray
) -> None:  # pragma: no cover - compiled
    """Segments ``2p`` and ``2p + 1`` of ``k`` as the real and imaginary parts of ``out[j, p]``:
    ``window[t] * (x[s step + t] - mean_t x[s step + t])``, x = buf[j, first:], s the segment.

    buf (m, rows) column-major samples, out (m, ceil(k / 2), n) complex of buf's precision,
    window (n,) float64. An odd last segment gets a zero imaginary part. The windowed difference
    is formed in float64 and rounded once to out's precision, so a segment gives the same bits
    whatever block carried it and wherever it sits in the buffer.
    """
    m, pairs, n = out.shape
    half = n - n // 2
    # a segment's sum is that of its two halves; at 50 % overlap (step = half, n even) the second
    # half of one segment is the first of the next, summed once. The halves sit on the same grid
    # whatever the batch (the buffer always starts at a segment start), so the bits do not change
    shared = step == half and n - half == half
    for j in range(m):
        x = buf[j]
        nxt = 0.0
        for p in range(pairs):
            o = out[j, p]
            r0 = first + 2 * p * step
            head = nxt if shared and p > 0 else segment_sum(x, r0, half)
            nxt = segment_sum(x, r0 + half, n - half)
            mean_a = (head + nxt) / n
            seg_a = x[r0 : r0 + n]
            if 2 * p + 1 < k:
                r1 = r0 + step
                head = nxt if shared else segment_sum(x, r1, half)
                nxt = segment_sum(x, r1 + half, n - half)
                mean_b = (head + nxt) / n
                seg_b = x[r1 : r1 + n]
                for t in range(n):
                    o[t] = complex(window[t] * (seg_a[t] - mean_a), window[t] * (seg_b[t] - mean_b))
            else:
                for t in range(n):
                    o[t] = complex(window[t] * (seg_a[t] - mean_a), 0.0)


@numba.njit(cache=True, nogil=True)
def accumulate_pairs(spec: np.ndarray, out: np.ndarray) -> None:  # pragma: no cover - compiled
    """``out[j, t] += sum_p |Z[j, p, t]|^2`` for spec (m, pairs, n) complex, out (m, n) float64.

    Z = A + iB is the transform of two real segments a, b packed by :func:`window_pairs`. Since
    ``A_f = (Z_f + conj Z_{n-f}) / 2`` and ``B_f = (Z_f - conj Z_{n-f}) / 2i``, the pair's power
    ``|A_f|^2 + |B_f|^2 = (|Z_f|^2 + |Z_{n-f}|^2) / 2``: the sums are kept over all n bins and
    folded once, by ``spectra._fold_pairs``, when the spectrum is read (an odd last segment, B = 0,
    gives ``|A_f|^2``). ``|Z|^2`` is formed in float64 and added pair by pair in order, so the
    sums do not depend on how the pairs were batched.
    """
    m, pairs, n = spec.shape
    for j in range(m):
        o = out[j]
        for p in range(pairs):
            z = spec[j, p]
            for t in range(n):
                re = np.float64(z[t].real)
                im = np.float64(z[t].imag)
                o[t] += re * re + im * im


@numba.njit(cache=True, nogil=True)
def flattest_run(
    x: np.ndarray,
    pw: np.ndarray,
    py: np.ndarray,
    pyy: np.ndarray,
    usable: np.ndarray,
    min_span: float,
    tol: float,
    widen: float,
    limit: np.ndarray,
) -> tuple:  # pragma: no cover - compiled
    """The widest flat run of bands for ``dissipation._flattest_band``; (-1, -1) when none.

    x (nb,) centred log frequencies; pw (5, nb + 1), py (3, nb + 1), pyy (nb + 1) prefix sums
    of w x^p, w y x^p and w y^2; usable (nb,) bool; limit[n] the 0.999 chi^2 quantile with n
    dof. Every run a..b of usable bands, b - a >= 4 and x[b] - x[a] >= min_span: the weighted
    quadratic in x through y from the 3x3 normal equations (adjugate over determinant), its
    largest deviation from the run's level at the ends and the vertex widened by ``widen``
    standard errors, against ``tol``, and the scatter against ``limit``. The widest passing
    run wins, the lowest start of equals.
    """
    nb = x.size
    best_a, best_b, best = -1, -1, -np.inf
    for a in range(nb):
        if not usable[a]:
            continue
        for b in range(a + 1, nb):
            if not usable[b]:
                break  # a run may not cross an unusable band
            if b - a < 4 or x[b] - x[a] < min_span:
                continue
            s0 = pw[0, b + 1] - pw[0, a]
            s1 = pw[1, b + 1] - pw[1, a]
            s2 = pw[2, b + 1] - pw[2, a]
            s3 = pw[3, b + 1] - pw[3, a]
            s4 = pw[4, b + 1] - pw[4, a]
            r0 = py[0, b + 1] - py[0, a]
            r1 = py[1, b + 1] - py[1, a]
            r2 = py[2, b + 1] - py[2, a]
            c00, c01, c02 = s2 * s4 - s3 * s3, s2 * s3 - s1 * s4, s1 * s3 - s2 * s2
            c11, c12, c22 = s0 * s4 - s2 * s2, s1 * s2 - s0 * s3, s0 * s2 - s1 * s1
            det = s0 * c00 + s1 * c01 + s2 * c02
            scale = max(abs(s0), abs(s1), abs(s2), abs(s3), abs(s4))
            if not abs(det) > 1e-12 * scale**3:
                continue
            i00, i01, i02 = c00 / det, c01 / det, c02 / det
            i11, i12, i22 = c11 / det, c12 / det, c22 / det
            beta0 = i00 * r0 + i01 * r1 + i02 * r2
            beta1 = i01 * r0 + i11 * r1 + i12 * r2
            beta2 = i02 * r0 + i12 * r1 + i22 * r2
            chi2 = (pyy[b + 1] - pyy[a]) - (beta0 * r0 + beta1 * r1 + beta2 * r2)
            xm, x2m = s1 / s0, s2 / s0
            vertex = -beta1 / (2 * beta2) if beta2 != 0 else x[a]
            vertex = min(max(vertex, x[a]), x[b])
            worst = 0.0
            for e in range(3):
                xe = x[a] if e == 0 else (x[b] if e == 1 else vertex)
                g1, g2 = xe - xm, xe * xe - x2m  # the gradient (0, g1, g2) of the level at xe
                q = g1 * g1 * i11 + 2.0 * g1 * g2 * i12 + g2 * g2 * i22
                w = abs(g1 * beta1 + g2 * beta2) + widen * np.sqrt(max(q, 0.0))
                if w > worst or w != w:  # a NaN stays (and fails the test below)
                    worst = w
            n = max(b - a - 2, 1)  # bands minus the quadratic's three parameters
            span = x[b] - x[a]
            if worst <= tol and chi2 <= limit[n] and span > best:
                best_a, best_b, best = a, b, span
    return best_a, best_b


@numba.njit(cache=True, nogil=True)
def accumulate_pair_groups(
    spec: np.ndarray,
    out: np.ndarray,
    pairs_per_group: int,
    lo: np.ndarray,
    hi: np.ndarray,
    weight: np.ndarray,
    bands: np.ndarray,
) -> None:  # pragma: no cover - compiled
    """:func:`accumulate_pairs` (the same sums, added in the same order: the same bits), and
    beside it, per group of ``pairs_per_group`` pairs, ``bands[g, j, k] += sum weight[t]
    |Z[j, p, t]|^2`` over the group's pairs p and the bins t of band k, which lie in the two
    ranges ``lo[h, k] <= t < hi[h, k]`` (h = 0: bins up to n/2; h = 1: the mirrored bins above;
    ``segment_groups.band_layout``). A group's power is summed in a scratch row first (plain
    stores, which vectorise), then once per band with two interleaved partial sums."""
    m, pairs, n = spec.shape
    nb = lo.shape[1]
    row = np.empty(n)
    for j in range(m):
        o = out[j]
        for first in range(0, pairs, pairs_per_group):
            row[:] = 0.0
            for p in range(first, min(first + pairs_per_group, pairs)):
                z = spec[j, p]
                for t in range(n):
                    re = np.float64(z[t].real)
                    im = np.float64(z[t].imag)
                    pw = re * re + im * im
                    o[t] += pw
                    row[t] += pw
            g = first // pairs_per_group
            for k in range(nb):
                s0 = 0.0
                s1 = 0.0
                for h in range(2):
                    t = lo[h, k]
                    stop = hi[h, k]
                    while t + 1 < stop:
                        s0 += weight[t] * row[t]
                        s1 += weight[t + 1] * row[t + 1]
                        t += 2
                    if t < stop:
                        s0 += weight[t] * row[t]
                bands[g, j, k] += s0 + s1
