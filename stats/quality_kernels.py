"""Numba kernels of the signal-quality checks (state lives in :mod:`eddyvigil.stats.quality`).

Plain loops over float64 arrays; no validation, no state kept here.

``judge_window`` does the per-window work of one component column:

1. **Dropouts**: runs of identical values longer than the data allow. The chance that a
   sample repeats its predecessor, p̂, is the window's fraction of zero first differences
   (counting none that lie inside runs of 8 or more zeros, so a dropout does not excuse
   itself); a run of L equal values is flagged when N p̂^(L-1) < ``DROPOUT_ALPHA``
   (a geometric run-length bound, common practice), and at least 3 equal values whatever
   p̂. A run at the window's own minimum or maximum is pile-up at a rail, left to the
   clipping count. The run's first value is a real sample; the held copies are flagged.
2. **Spikes**: the phase-space method of Goring & Nikora (2002, J. Hydraul. Eng.
   128(1):117-126) with the median/MAD centre and scale of Wahl (2003, discussion, ibid.):
   u about its median, Δu_i = (u_{i+1} - u_{i-1})/2, Δ²u_i = (Δu_{i+1} - Δu_{i-1})/2, the
   universal threshold λ_U = √(2 ln N), three ellipses ((u, Δu), (Δu, Δ²u), and (u, Δ²u)
   rotated by θ = atan(Σ u Δ²u / Σ u²)). A point outside any ellipse is a candidate; it is
   confirmed only where its deviation from the mean of its two neighbours is the largest
   within ±2 rows (the neighbours of a spike leave the ellipses only through the spike's
   own differences). Confirmed spikes are replaced by linear interpolation and the search
   is repeated, as Goring & Nikora iterate, with the window's robust scales held fixed.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["count_flags", "extremes", "judge_window", "universal_threshold"]

#: Expected number of naturally occurring dropouts of the flagged length per window.
DROPOUT_ALPHA = 1e-3
#: Longest zero-difference run still counted in p̂ (longer runs are suspected dropouts).
_LONG_ZERO_RUN = 8
#: Consistency factor turning a MAD into a standard deviation for Gaussian data.
_MAD_TO_SIGMA = 1.482602218505602
#: Values per window the scales (MAD) and the differences' medians are taken from.
_SCALE_SAMPLES = 256
#: Windows whose scale estimates are averaged (the current one and those before it).
SCALE_WINDOWS = 8

FLAG_NONE = 0
FLAG_SPIKE = 1
FLAG_DROPOUT = 2


def universal_threshold(n: int) -> float:
    """λ_U = √(2 ln N) (Goring & Nikora 2002); NaN below 2 samples."""
    return math.sqrt(2.0 * math.log(n)) if n >= 2 else math.nan


@numba.njit(cache=True, nogil=True)
def extremes(block):
    """Per column: min, max and how many samples equal each (for pile-up at a rail)."""
    n, m = block.shape
    mn = np.full(m, np.inf)
    mx = np.full(m, -np.inf)
    cmin = np.zeros(m, dtype=np.int64)
    cmax = np.zeros(m, dtype=np.int64)
    for i in range(n):  # row-major: one pass in memory order
        for c in range(m):
            v = block[i, c]
            if v <= mn[c]:
                if v < mn[c]:
                    mn[c] = v
                    cmin[c] = 0
                cmin[c] += 1
            if v >= mx[c]:
                if v > mx[c]:
                    mx[c] = v
                    cmax[c] = 0
                cmax[c] += 1
    return mn, mx, cmin, cmax


@numba.njit(cache=True, nogil=True)
def count_flags(flags):
    """Per column: spikes and dropout samples among ``flags`` (n, m); and (row, column) of
    every flag, in row order."""
    n, m = flags.shape
    spikes = np.zeros(m, dtype=np.int64)
    drops = np.zeros(m, dtype=np.int64)
    where = np.empty((0, 2), dtype=np.int64)
    total = 0
    for i in range(n):
        for c in range(m):
            f = flags[i, c]
            if f == FLAG_SPIKE:
                spikes[c] += 1
                total += 1
            elif f == FLAG_DROPOUT:
                drops[c] += 1
                total += 1
    if total:
        where = np.empty((total, 2), dtype=np.int64)
        k = 0
        for i in range(n):
            for c in range(m):
                if flags[i, c] != FLAG_NONE:
                    where[k, 0] = i
                    where[k, 1] = c
                    k += 1
    return spikes, drops, where


@numba.njit(cache=True, nogil=True)
def _median_sorted(v):
    v.sort()
    k = v.shape[0]
    return 0.5 * (v[(k - 1) // 2] + v[k // 2])


@numba.njit(cache=True, nogil=True)
def _mad_sigma(v, centre):
    """1.4826 x median |v - centre| (v is overwritten)."""
    for i in range(v.shape[0]):
        v[i] = abs(v[i] - centre)
    return _median_sorted(v) * _MAD_TO_SIGMA


@numba.njit(cache=True, nogil=True)
def _window_estimates(y, w0, w1, est):
    """From an evenly strided subsample: est = [median u, 1.4826 MAD of u, median and MAD of
    Δu, median and MAD of Δ²u].

    Subsamples keep the sorts cheap; the scales are then averaged over the last windows
    (see ``judge_window``), so their noise stays small."""
    nw = w1 - w0
    step = max(1, nw // _SCALE_SAMPLES)
    k = (nw + step - 1) // step
    a = np.empty(k)
    b = np.empty(k)
    c = np.empty(k)
    for i in range(k):
        r = w0 + i * step
        a[i] = y[r]
        b[i] = 0.5 * (y[r + 1] - y[r - 1])
        c[i] = 0.25 * (y[r + 2] - 2.0 * y[r] + y[r - 2])
    med = _median_sorted(a.copy())
    est[0] = med
    est[1] = _mad_sigma(a, med)
    m1 = _median_sorted(b.copy())
    est[2] = m1
    est[3] = _mad_sigma(b, m1)
    m2 = _median_sorted(c.copy())
    est[4] = m2
    est[5] = _mad_sigma(c, m2)


@numba.njit(cache=True, nogil=True)
def _interpolate(y, flags, lo, hi):
    """Replace flagged rows of y[lo:hi] linearly between the nearest unflagged rows of y.

    Rows before ``lo`` are unflagged anchors by contract; rows from ``hi`` on are searched
    for a right anchor (the lookahead); with none, the left anchor is held.
    """
    n = y.shape[0]
    i = lo
    while i < hi:
        if flags[i] == FLAG_NONE:
            i += 1
            continue
        a = i - 1
        b = i
        while b < n and flags[b] != FLAG_NONE:
            b += 1
        if a < 0 and b >= n:
            return
        for k in range(i, min(b, n)):
            if a < 0:
                y[k] = y[b]
            elif b >= n:
                y[k] = y[a]
            else:
                y[k] = y[a] + (y[b] - y[a]) * (k - a) / (b - a)
        i = b


@numba.njit(cache=True, nogil=True)
def _dropouts(raw, flags, lo, hi, w0, w1, run_min):
    """Flag held copies in runs of >= run_min equal values within raw[lo:hi].

    Runs at the window's extreme values (rows w0..w1) are left alone (clipping)."""
    lo_v = np.inf
    hi_v = -np.inf
    for i in range(w0, w1):
        if raw[i] < lo_v:
            lo_v = raw[i]
        if raw[i] > hi_v:
            hi_v = raw[i]
    i = lo
    while i < hi:
        j = i + 1
        while j < hi and raw[j] == raw[i]:
            j += 1
        if j - i >= run_min and raw[i] != lo_v and raw[i] != hi_v:
            for k in range(i + 1, j):
                flags[k] = FLAG_DROPOUT
        i = j


@numba.njit(cache=True, nogil=True)
def _fill_run(y, fl, i):
    """Interpolate the flagged run around row i between its unflagged neighbours.

    Unflagged rows of y hold raw values, so the anchors are samples (held at the end)."""
    n = y.shape[0]
    a = i
    while a > 0 and fl[a - 1] != FLAG_NONE:
        a -= 1
    b = i
    while b < n - 1 and fl[b + 1] != FLAG_NONE:
        b += 1
    lo = a - 1
    hi = b + 1
    for k in range(a, b + 1):
        if lo < 0 and hi >= n:
            return
        if lo < 0:
            y[k] = y[hi]
        elif hi >= n:
            y[k] = y[lo]
        else:
            y[k] = y[lo] + (y[hi] - y[lo]) * (k - lo) / (hi - lo)


@numba.njit(cache=True, nogil=True)
def _peak(y, i):
    """Does row i stand out most from its neighbours' mean within ±2 rows?"""
    n = y.shape[0]
    di = abs(y[i] - 0.5 * (y[i - 1] + y[i + 1]))
    for k in range(max(i - 2, 1), min(i + 3, n - 1)):
        if k != i and abs(y[k] - 0.5 * (y[k - 1] + y[k + 1])) > di:
            return False
    return True


@numba.njit(cache=True, nogil=True)
def judge_window(buf, flags, work, w0, w1, lam, stats, hist, nest, estimate):
    """Judge rows w0..w1 of ``buf`` (n, m) for spikes and its rows 2..w1 for dropouts.

    ``buf`` rows 0-1 are cleaned context (already output), rows 2..w0 pending rows judged
    before, w0..w1 the new window, w1..n the lookahead (raw). ``flags`` (n, m) int8 holds the
    pending rows' flags on entry and all of them on return; ``work`` (n, m) receives the
    cleaned values. ``stats`` (m, 7) receives per component: new spikes, new dropout
    samples, the window's smallest non-zero |Δu|, the fraction of non-zero |Δu| that are
    whole multiples of it, the window's sum and sum of squares about its centre, the centre.
    ``hist`` (m, SCALE_WINDOWS, 6) holds the scale estimates of earlier windows, ``nest`` of
    them made so far; with ``estimate`` this window adds one (slot ``nest % SCALE_WINDOWS``).
    The ellipses use the window's own mean of u as centre and the mean of the held
    estimates as scales (a median centre would cost a sort per window; spikes below the 1 %
    suspect threshold move the mean by less than 0.1 σ).

    A window costs a few scans of each column; dropout runs are looked for only where the
    longest run of repeats is long enough, or rows are pending from the window before.
    """
    n, m = buf.shape
    nw = w1 - w0
    for c in range(m):
        col = buf[:, c]
        fl = flags[:, c]
        # --- pass 1: centre; tan θ = Σ u Δ²u / Σ u² over the whole window (u about its
        # centre, as Goring & Nikora define the angle; sums about the first value, for
        # round-off); repeats of the previous value (for p̂); the quantisation step
        zeros = 0
        long_zeros = 0
        run = 0
        longest = 0
        qmin = np.inf
        s0 = col[w0]
        sa = 0.0
        sb = 0.0
        sc = 0.0
        sd = 0.0
        prev = col[w0 - 1]
        for i in range(w0, w1):
            x = col[i]
            a = x - s0
            g = 0.25 * (col[i + 2] - 2.0 * x + col[i - 2])
            sa += a
            sb += a * a
            sc += a * g
            sd += g
            d = abs(x - prev)
            prev = x
            if i == w0:
                continue
            if d == 0.0:
                zeros += 1
                run += 1
            else:
                if run >= _LONG_ZERO_RUN:
                    long_zeros += run
                if run > longest:
                    longest = run
                run = 0
                if d < qmin:
                    qmin = d
        if run >= _LONG_ZERO_RUN:
            long_zeros += run
        if run > longest:
            longest = run
        centre = s0 + sa / nw
        var = sb / nw - (sa / nw) ** 2
        tan_theta = (sc / nw - (sa / nw) * (sd / nw)) / var if var > 0.0 else 0.0
        usable = (nw - 1) - long_zeros
        p = (zeros - long_zeros) / usable if usable > 0 else 0.0
        run_min = 3
        if p > 0.0 and p < 1.0:
            need = 1.0 + math.log(DROPOUT_ALPHA / max(nw, 2)) / math.log(p)
            run_min = max(3, int(math.ceil(need)))
        elif p >= 1.0:
            run_min = n + 1  # nothing but repeats: no basis for calling a run too long
        # --- scales: the mean of the held estimates
        if estimate:
            _window_estimates(col, w0, w1, hist[c, nest % SCALE_WINDOWS])
        held = min(nest + (1 if estimate else 0), SCALE_WINDOWS)
        su = 0.0
        m1 = 0.0
        s1 = 0.0
        m2 = 0.0
        s2 = 0.0
        for h in range(held):
            su += hist[c, h, 1] / held
            m1 += hist[c, h, 2] / held
            s1 += hist[c, h, 3] / held
            m2 += hist[c, h, 4] / held
            s2 += hist[c, h, 5] / held
        judge = su > 0.0 and s1 > 0.0 and s2 > 0.0 and nw >= 8
        ct = 1.0
        st = 0.0
        aa = -1.0
        bb = -1.0
        iu = 0.0
        i1 = 0.0
        i2 = 0.0
        if judge:
            theta = math.atan(tan_theta)
            ct = math.cos(theta)
            st = math.sin(theta)
            c2 = ct * ct - st * st
            au = (lam * su) ** 2
            a2 = (lam * s2) ** 2
            if c2 != 0.0:
                aa = (au * ct * ct - a2 * st * st) / c2
                bb = (a2 * ct * ct - au * st * st) / c2
            iu = 1.0 / (lam * su)
            i1 = 1.0 / (lam * s1)
            i2 = 1.0 / (lam * s2)
        rotated = aa > 0.0 and bb > 0.0
        # --- whole multiples of the step, on every 8th difference (a cheap, ample sample)
        whole = 0
        nonzero = 0
        for i in range(w0 + 1, w1, 8):
            d = abs(col[i] - col[i - 1])
            if d > 0.0:
                nonzero += 1
                r = d / qmin
                if abs(r - math.floor(r + 0.5)) < 0.02:
                    whole += 1
        # --- dropouts: only where a long enough run exists or rows are pending
        y = col.copy()
        new_spikes = 0
        new_drop = 0
        if w0 > 2 or longest + 1 >= run_min:
            old = fl.copy()
            for i in range(2, n):  # dropout flags are recomputed over all pending rows
                if i >= w1 or fl[i] == FLAG_DROPOUT:
                    fl[i] = FLAG_NONE
            _dropouts(col, fl, 2, w1, w0, w1, run_min)
            for i in range(2, w1):
                if fl[i] == FLAG_DROPOUT and old[i] != FLAG_DROPOUT:
                    new_drop += 1
            _interpolate(y, fl, 2, n)
        # --- spikes: one scan; a confirmed spike is replaced at once (interpolation over its
        # flagged run) and the scan steps back two rows, which is Goring & Nikora's iteration
        # done locally (with the scales fixed only rows within ±2 of a replacement change)
        if judge:
            ia = 1.0 / aa if rotated else 0.0
            ib = 1.0 / bb if rotated else 0.0
            i = w0
            while i < w1:
                # the three ellipses, written out (this loop is most of a window's cost)
                xu = y[i] - centre
                g1 = (0.5 * (y[i + 1] - y[i - 1]) - m1) * i1
                g2r = 0.25 * (y[i + 2] - 2.0 * y[i] + y[i - 2]) - m2
                g2 = g2r * i2
                x0 = xu * iu
                q1 = g1 * g1
                out = x0 * x0 + q1 > 1.0 or q1 + g2 * g2 > 1.0
                if not out and rotated:
                    r1 = xu * ct + g2r * st
                    r2 = g2r * ct - xu * st
                    out = r1 * r1 * ia + r2 * r2 * ib > 1.0
                if out and fl[i] == FLAG_NONE and _peak(y, i):
                    fl[i] = FLAG_SPIKE
                    new_spikes += 1
                    _fill_run(y, fl, i)
                    i = max(w0, i - 2)
                    continue
                i += 1
        work[:, c] = y
        med = centre
        # sums about the window's centre for the point's r.m.s. (σ/q̂), from pass 1's
        s = 0.0
        ss = max(sb - sa * sa / nw, 0.0)
        stats[c, 0] = new_spikes
        stats[c, 1] = new_drop
        stats[c, 2] = qmin
        stats[c, 3] = whole / nonzero if nonzero > 0 else np.nan
        stats[c, 4] = s
        stats[c, 5] = ss
        stats[c, 6] = med
