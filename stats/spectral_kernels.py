"""Numba kernels of the Welch spectra (plain loops, no validation, no state).

``window_segments`` cuts a batch of overlapping segments out of the column-major sample buffer,
removes each segment's mean (summed in float64) and applies the window, in one pass per segment
into a preallocated work array of the buffer's dtype (numpy needed a windowed copy, a mean and a
correction of two bins after the transform for this). ``accumulate_power`` adds ``|X|^2`` of a
batch of segment transforms into the running sums in one pass, with no temporaries (numpy's
``(X.real**2 + X.imag**2).sum(0)`` makes three). Both are checked against scipy.signal.welch in
tests/test_spectra.py.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["accumulate_power", "segment_sum", "window_segments"]


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
def window_segments(
    buf: np.ndarray, step: int, window: np.ndarray, out: np.ndarray
) -> None:  # pragma: no cover - compiled
    """``out[j, s, t] = window[t] * (buf[j, s step + t] - mean_t buf[j, s step + t])``.

    buf (m, rows) column-major samples, out (m, k, n) of buf's dtype, window (n,) float64. The
    windowed difference is formed in float64 and rounded once to out's dtype. A segment gives
    the same bits whatever block carried it and wherever it sits in the buffer.
    """
    m, k, n = out.shape
    half = n - n // 2
    # a segment's sum is that of its two halves; at 50 % overlap (step = half, n even) the second
    # half of one segment is the first of the next, summed once. The halves sit on the same grid
    # whatever the batch (the buffer always starts at a segment start), so the bits do not change
    shared = step == half and n - half == half
    for j in range(m):
        x = buf[j]
        nxt = 0.0
        for s in range(k):
            r0 = s * step
            first = nxt if shared and s > 0 else segment_sum(x, r0, half)
            nxt = segment_sum(x, r0 + half, n - half)
            mean = (first + nxt) / n
            seg = x[r0 : r0 + n]
            o = out[j, s]
            for t in range(n):
                o[t] = window[t] * (seg[t] - mean)


@numba.njit(cache=True, nogil=True)
def accumulate_power(spec: np.ndarray, out: np.ndarray) -> None:  # pragma: no cover - compiled
    """``out[j, f] += sum_s |spec[j, s, f]|^2`` for spec (m, k, nf) complex, out (m, nf) float64.

    Segment by segment in order, so the sums do not depend on how the segments were batched;
    ``|X|^2`` is formed in the transform's precision and added in float64.
    """
    m, k, nf = spec.shape
    for j in range(m):
        o = out[j]
        for s in range(k):
            z = spec[j, s]
            for f in range(nf):
                re = z[f].real
                im = z[f].imag
                o[f] += re * re + im * im
