"""Numba kernels of the signal-quality checks (state lives in :mod:`eddyvigil.stats.quality`).

Plain loops over float64 arrays; no validation, no state kept here.

``feed_block`` is called once per block: it appends the rows a window at a time to the
point's column-major buffer and, through ``judge_held``, judges each complete window (one
``_judge_column`` per component) and releases what can go (``judge_held`` alone at the
point's end). Per window and component:

1. **Dropouts**: runs of identical values longer than the data allow. The chance that a
   sample repeats its predecessor, p̂, is the window's fraction of zero first differences
   (counting none that lie inside runs of 8 or more zeros, so a dropout does not excuse
   itself); a run of L equal values is flagged when N p̂^(L-1) < ``DROPOUT_ALPHA``
   (a geometric run-length bound, common practice), and at least 3 equal values whatever
   p̂. A run at the window's own minimum or maximum is pile-up at a rail, left to the
   clipping count. The run's first value is a real sample; the held copies are flagged.
2. **Spikes**: after the phase-space method of Goring & Nikora (2002, J. Hydraul. Eng.
   128(1):117-126) with the median/MAD scales of Wahl (2003, discussion, ibid.):
   Δu_i = (u_{i+1} - u_{i-1})/2, Δ²u_i = (Δu_{i+1} - Δu_{i-1})/2, the universal threshold
   λ_U = √(2 ln N). A spike is an isolated excursion: row i is a candidate when it jumps
   from the mean of its two neighbours by more than λ_U σ_u AND (Δu, Δ²u) lies outside
   the ellipse of semi-axes λ_U σ_Δu, λ_U σ_Δ²u (about their medians). Goring & Nikora's
   (u, Δu) and rotated (u, Δ²u) ellipses are not used: on a skewed signal that is smooth at
   the sample scale they let the tails of u through (0.76 % of v on the demo's wake), and a
   large u alone is no evidence of a spike. A clean Gaussian sample is a candidate with
   probability at most min(2 Q(λ_U σ_u/σ_e), exp(-λ_U²/2) = 1/N), σ_e the jump's standard
   deviation. A candidate is confirmed only where its jump is the largest within ±2 rows
   (a spike's neighbours jump by half as much). Confirmed spikes are replaced by linear
   interpolation and the search repeated, as Goring & Nikora iterate, with the window's
   robust scales held fixed.

Cost per window and component: one vectorised pass (sums, repeats, step, extremes: the
minima and maxima on integer keys of the floats' bits, which LLVM vectorises), the jump
test vectorised over 64-row chunks (skipped where no first difference reaches the jump: a
jump is at most the larger difference beside it) with the whole candidate test row by row
only in chunks holding a jump, a strided sample for the step, and, when due,
median/MAD selections on 256-value subsamples.
"""

from __future__ import annotations

import math

import numba
import numpy as np
from llvmlite import ir as llvm_ir
from numba.core import types
from numba.extending import intrinsic

__all__ = ["STATE_SLOTS", "feed_block", "judge_held", "universal_threshold"]

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

#: Rows per vectorised jump test (a chunk with a jump is scanned row by row).
_CHUNK = 64
#: Reassociated sums and min/max of finite samples (the pipeline rejects non-finite ones
#: before the checks): the window pass vectorises.
_SUMS = {"reassoc", "nsz", "nnan"}
#: Bits of a float64 below the sign, and those of +inf (the int64 keys of _window_pass).
_MAGNITUDE = 0x7FFFFFFFFFFFFFFF
_INF_BITS = 0x7FF0000000000000
#: Slots of judge_held's integer state.
_BASE, _FILL, _JUDGED, _WINDOWS, _ESTIMATES, _N_OUT, _MARKS, _VAR_N = range(8)
STATE_SLOTS = 8


def universal_threshold(n: int) -> float:
    """λ_U = √(2 ln N) (Goring & Nikora 2002); NaN below 2 samples."""
    return math.sqrt(2.0 * math.log(n)) if n >= 2 else math.nan


@numba.njit(cache=True, nogil=True)
def _median(v):
    """The median (mean of the two middle values for an even count), by selection."""
    return np.median(v)


@numba.njit(cache=True, nogil=True)
def _mad_sigma(v, centre):
    """1.4826 x median |v - centre| (v is overwritten)."""
    for i in range(v.shape[0]):
        v[i] = abs(v[i] - centre)
    return _median(v) * _MAD_TO_SIGMA


@numba.njit(cache=True, nogil=True)
def _window_estimates(y, w0, w1, est):
    """From an evenly strided subsample: est = [median u, 1.4826 MAD of u, median and MAD of
    Δu, median and MAD of Δ²u].

    Subsamples keep the selections cheap; the scales are then averaged over the last windows
    (see ``_judge_column``), so their noise stays small."""
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
    med = _median(a.copy())
    est[0] = med
    est[1] = _mad_sigma(a, med)
    m1 = _median(b.copy())
    est[2] = m1
    est[3] = _mad_sigma(b, m1)
    m2 = _median(c.copy())
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
    """Interpolate the flagged run around row i between its unflagged neighbours; return
    the run's last row.

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
            return b
        if lo < 0:
            y[k] = y[hi]
        elif hi >= n:
            y[k] = y[lo]
        else:
            y[k] = y[lo] + (y[hi] - y[lo]) * (k - lo) / (hi - lo)
    return b


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
def _candidate(y, i, jump, m1, m2, i1, i2):
    """Is row i a spike candidate: a jump from its neighbours' mean beyond ``jump`` (λ_U σ_u)
    and (Δu, Δ²u) outside their ellipse? (the jump's arithmetic is _chunk_hits')"""
    e = y[i] - 0.5 * (y[i - 1] + y[i + 1])
    g1 = (0.5 * (y[i + 1] - y[i - 1]) - m1) * i1
    g2 = (0.25 * (y[i + 2] - 2.0 * y[i] + y[i - 2]) - m2) * i2
    return (abs(e) > jump) & (g1 * g1 + g2 * g2 > 1.0)


@intrinsic
def _bits(typingctx, x):
    """The IEEE-754 bits of a float64 as an int64 (a bit cast, no conversion)."""
    sig = types.int64(types.float64)

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], llvm_ir.IntType(64))

    return sig, codegen


@intrinsic
def _from_bits(typingctx, x):
    """The float64 whose IEEE-754 bits are the int64 x (a bit cast)."""
    sig = types.float64(types.int64)

    def codegen(context, builder, signature, args):
        return builder.bitcast(args[0], llvm_ir.DoubleType())

    return sig, codegen


@numba.njit(cache=True, nogil=True)
def _order_key(b):
    """An int64 that orders as the float64 of bits b does (finite values; -0 just below +0):
    negative floats' magnitude bits are flipped. Its own inverse."""
    return b ^ ((b >> 63) & _MAGNITUDE)


@numba.njit(cache=True, nogil=True, fastmath=_SUMS)
def _window_pass(col, w0, w1):
    """One vectorised pass over a window: sums of u and u² about its first value
    (reassociated), the zero first differences, the smallest and the largest non-zero |Δu|,
    the least and greatest value.

    Minima and maxima are taken on integer keys of the floats' bits (``_order_key``; for
    |Δu| >= 0 the bits themselves order as the values): LLVM vectorises integer min/max
    reductions but not the float compare-and-select ones, and on finite values the result is
    the same value exactly. The same bits for the same window wherever it sits in memory."""
    c = col[w0 + 1 : w1]
    p = col[w0 : w1 - 1]
    s0 = col[w0]
    sa = 0.0
    sb = 0.0
    zeros = 0
    k_lo = _order_key(_bits(s0))
    k_hi = k_lo
    q_bits = _INF_BITS
    d_max = 0
    for i in range(c.shape[0]):
        x = c[i]
        a = x - s0
        sa += a
        sb += a * a
        k = _order_key(_bits(x))
        k_lo = min(k_lo, k)
        k_hi = max(k_hi, k)
        d = _bits(x - p[i]) & _MAGNITUDE  # |Δu|'s bits
        zeros += d == 0
        q_bits = min(q_bits, d if d != 0 else _INF_BITS)
        d_max = max(d_max, d)
    lo = _from_bits(_order_key(k_lo))
    hi = _from_bits(_order_key(k_hi))
    return s0, sa, sb, zeros, _from_bits(q_bits), _from_bits(d_max), lo, hi


@numba.njit(cache=True, nogil=True)
def _zero_runs(col, w0, w1):
    """Longest run of zero differences in the window, and the zeros inside long runs."""
    run = 0
    longest = 0
    long_zeros = 0
    for i in range(w0 + 1, w1):
        if col[i] == col[i - 1]:
            run += 1
        else:
            if run >= _LONG_ZERO_RUN:
                long_zeros += run
            if run > longest:
                longest = run
            run = 0
    if run >= _LONG_ZERO_RUN:
        long_zeros += run
    if run > longest:
        longest = run
    return longest, long_zeros


@numba.njit(cache=True, nogil=True)
def _whole_share(col, w0, w1, step):
    """Share of non-zero |Δu| that are whole multiples of ``step``, on every 8th difference
    (a cheap, ample sample); NaN with none. Only whether it reaches 0.99 matters, so the
    count stops (returning 0) once more than 1 % of the sample has missed."""
    whole = 0
    nonzero = 0
    allowed = 0.01 * ((w1 - w0 - 1 + 7) // 8)
    for i in range(w0 + 1, w1, 8):
        d = abs(col[i] - col[i - 1])
        if d > 0.0:
            nonzero += 1
            r = d / step
            if abs(r - math.floor(r + 0.5)) < 0.02:
                whole += 1
            elif nonzero - whole > allowed:
                return 0.0
    return whole / nonzero if nonzero > 0 else np.nan


@numba.njit(cache=True, nogil=True)
def _chunk_hits(y, i, j, jump):
    """How many of rows i..j jump from their neighbours' mean by more than ``jump`` (a
    branch-free, vectorised count): the first half of the candidate test, which clean data
    pass rarely; the rows of a chunk with a hit get the whole test (``_candidate``)."""
    # shifted views indexed from 0: no negative-index wraparound test, so LLVM vectorises;
    # the arithmetic is _candidate's, term for term, so no candidate is missed
    c = y[i:j]
    cm1 = y[i - 1 : j - 1]
    cp1 = y[i + 1 : j + 1]
    hits = 0
    for k in range(c.shape[0]):
        hits += abs(c[k] - 0.5 * (cm1[k] + cp1[k])) > jump
    return hits


@numba.njit(cache=True, nogil=True)
def _spike_scan(y, fl, w0, w1, jump, m1, m2, i1, i2):
    """Flag and replace the spikes of rows w0..w1 of y; return how many.

    The jump test runs vectorised over 64-row chunks; a chunk with a jump is scanned row by
    row (the whole candidate test): a confirmed spike is replaced at once (interpolation over its
    flagged run) and the scan steps back two rows (Goring & Nikora's iteration done
    locally; with the scales fixed only rows within ±2 of a replacement change, so the scan
    runs on past the chunk while a replacement reaches beyond it)."""
    found = 0
    i = w0
    while i < w1:
        j = min(i + _CHUNK, w1)
        if _chunk_hits(y, i, j, jump) == 0:
            i = j
            continue
        r = i
        while r < j:
            if (
                fl[r] == FLAG_NONE
                and _candidate(y, r, jump, m1, m2, i1, i2)
                and _peak(y, r)
            ):
                fl[r] = FLAG_SPIKE
                found += 1
                b = _fill_run(y, fl, r)
                j = max(j, min(b + 3, w1))
                r = max(w0, r - 2)
                continue
            r += 1
        i = j
    return found


@numba.njit(cache=True, nogil=True)
def _may_jump(col, w0, w1, dmax, lo, hi, jump):
    """Can any row of w0..w1 jump from its neighbours' mean by more than ``jump``?

    The jump e_i = (Δu_i - Δu_(i+1))/2 is at most the larger |Δu| beside row i, so where every
    difference from row w0 - 1 to row w1 (``dmax`` inside the window, the two edges here) stays
    below the jump, no row is a candidate and the chunk test need not run. The margin (1e-12
    of the values' magnitude) covers the rounding of e and of the differences, so the answer
    is never "no" where the candidate test could say "yes"."""
    a = col[w0 - 1]
    b = col[w1]
    d = max(dmax, abs(col[w0] - a), abs(b - col[w1 - 1]))
    scale = max(abs(lo), abs(hi), abs(a), abs(b))
    return d + 1e-12 * scale > jump


@numba.njit(cache=True, nogil=True)
def _judge_column(col, fl, y, w0, w1, lam, hist, nest, estimate, spikes, res):
    """Judge rows w0..w1 of one component (``col`` raw, rows 0-1 cleaned context, w1..
    lookahead) for spikes and rows 2..w1 for dropouts; ``y`` receives the cleaned values,
    ``fl`` the flags (the pending rows' on entry). ``res`` receives: new spikes, new dropout
    samples, the smallest non-zero |Δu|, the share of sampled non-zero |Δu| on whole
    multiples of it, the window's centre and its sum of squares about it, its least and
    greatest value.

    Cost: two vectorised passes (sums, repeats, step, extremes; the jump test, 64 rows at a
    time), one scalar pass only over the 64-row chunks that hold a jump, a strided sample for
    the step
    and, when due, the scale estimates; dropout runs only where repeats are long enough.
    """
    n = col.shape[0]
    nw = w1 - w0
    s0, sa, sb, zeros, qmin, dmax, lo, hi = _window_pass(col, w0, w1)
    longest, long_zeros = _zero_runs(col, w0, w1) if zeros > 0 else (0, 0)
    centre = s0 + sa / nw
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
        _window_estimates(col, w0, w1, hist[nest % SCALE_WINDOWS])
    held = min(nest + (1 if estimate else 0), SCALE_WINDOWS)
    su = 0.0
    m1 = 0.0
    s1 = 0.0
    m2 = 0.0
    s2 = 0.0
    for h in range(held):
        su += hist[h, 1] / held
        m1 += hist[h, 2] / held
        s1 += hist[h, 3] / held
        m2 += hist[h, 4] / held
        s2 += hist[h, 5] / held
    judge = spikes and su > 0.0 and s1 > 0.0 and s2 > 0.0 and nw >= 8
    whole = _whole_share(col, w0, w1, qmin)
    # --- dropouts: only where a long enough run exists or rows are pending
    y[:] = col
    new_spikes = 0
    new_drop = 0
    cleaned = w0 > 2 or longest + 1 >= run_min  # y may then differ from col
    if cleaned:
        old = fl[:w1].copy()
        for i in range(2, n):  # dropout flags are recomputed over all pending rows
            if i >= w1 or fl[i] == FLAG_DROPOUT:
                fl[i] = FLAG_NONE
        _dropouts(col, fl, 2, w1, w0, w1, run_min)
        for i in range(2, w1):
            if fl[i] == FLAG_DROPOUT and old[i] != FLAG_DROPOUT:
                new_drop += 1
        _interpolate(y, fl, 2, n)
    # --- spikes: the jump test vectorised over 64-row chunks; a chunk with a jump is
    # scanned row by row (the whole candidate test): a confirmed spike is replaced at once (interpolation over its
    # flagged run) and the scan steps back two rows (Goring & Nikora's iteration done
    # locally; with the scales fixed only rows within ±2 of a replacement change, so the
    # scan runs on past the chunk while a replacement reaches beyond it)
    if judge:
        jump = lam * su
        i1 = 1.0 / (lam * s1)
        i2 = 1.0 / (lam * s2)
        if cleaned or _may_jump(col, w0, w1, dmax, lo, hi, jump):
            new_spikes = _spike_scan(y, fl, w0, w1, jump, m1, m2, i1, i2)
    res[0] = new_spikes
    res[1] = new_drop
    res[2] = qmin
    res[3] = whole
    res[4] = centre
    res[5] = max(sb - sa * sa / nw, 0.0)
    res[6] = lo
    res[7] = hi


@numba.njit(cache=True, nogil=True)
def _rails(col, lo, hi, rails, at_rails):
    """Fold a window's least and greatest value into the point's extremes ``rails`` (2,)
    and the counts of samples equal to each ``at_rails`` (2,): samples are counted only
    when the window reaches a rail (rarely, once the point's range is set)."""
    if lo < rails[0]:
        rails[0] = lo
        at_rails[0] = 0
    if hi > rails[1]:
        rails[1] = hi
        at_rails[1] = 0
    if lo == rails[0] or hi == rails[1]:
        cmin = 0
        cmax = 0
        for i in range(col.shape[0]):
            cmin += col[i] == lo
            cmax += col[i] == hi
        if lo == rails[0]:
            at_rails[0] += cmin
        if hi == rails[1]:
            at_rails[1] += cmax


@numba.njit(cache=True, nogil=True)
def _releasable(buf, flags, base, stop, limit):
    """Rows 0..end may go: none inside a trailing flagged run or an open run of repeats."""
    m = buf.shape[0]
    end = stop
    while end > limit:
        i = base + 2 + end - 1
        bad = False
        for c in range(m):
            if flags[c, i] != FLAG_NONE or buf[c, i] == buf[c, i + 1]:
                bad = True
        if not bad:
            break
        end -= 1
    return end if end > limit else stop


@numba.njit(cache=True, nogil=True)
def _release(buf, flags, work, base, end, st, counts, exclude, out, out_n, marks, mark_values):
    """Count the flags of released rows 0..end (row order into the ``marks`` ring), copy
    their cleaned values to ``out`` under "exclude"; the last two become the context."""
    m = buf.shape[0]
    any_flag = False
    for c in range(m):
        f = flags[c, base + 2 : base + 2 + end]
        s = 0
        for i in range(end):
            s += f[i] != FLAG_NONE
        any_flag = any_flag or s > 0
    if any_flag:
        kept = marks.shape[0]
        for i in range(end):
            for c in range(m):
                f = flags[c, base + 2 + i]
                if f == FLAG_NONE:
                    continue
                counts[c, 0 if f == FLAG_SPIKE else 1] += 1
                if exclude:
                    counts[c, 2] += 1
                slot = st[_MARKS] % kept
                marks[slot, 0] = st[_N_OUT] + i
                marks[slot, 1] = c
                marks[slot, 2] = f
                mark_values[slot] = buf[c, base + 2 + i]
                st[_MARKS] += 1
    if exclude:
        for c in range(m):
            src = work[c, base + 2 : base + 2 + end]
            dst = out[out_n : out_n + end, c]
            for i in range(end):
                dst[i] = src[i]
    for c in range(m):  # the last two released rows, cleaned, are the next context
        buf[c, base + end] = work[c, base + end]
        buf[c, base + end + 1] = work[c, base + end + 1]
    st[_N_OUT] += end


@numba.njit(cache=True, nogil=True)
def judge_held(buf, flags, work, st, hist, acc, counts, rails, at_rails, marks, mark_values,
               out, window, max_pending, final, exclude, spikes):
    """Judge every complete window held in the column-major ``buf`` (all that is held when
    ``final``) and release what can be released; returns the rows written to ``out``.

    ``st`` (int64): base column of the context, rows held, of those judged, windows,
    scale estimates, rows released, marks made, rows in the r.m.s. record. ``hist`` (m,
    SCALE_WINDOWS, 6) the scale estimates; ``acc`` (m, 4): quantised windows, their
    smallest step, the r.m.s. record's mean and M2 (Chan et al. 1979 pairwise merge);
    ``counts`` (m, 3): spikes, dropout samples, replaced; ``rails``, ``at_rails`` (m, 2) the
    extremes of the judged rows and how many samples equal each. Buffer columns base, base+1 hold
    the context (the last two released rows, cleaned), then the held rows.
    """
    m = buf.shape[0]
    res = np.empty(8)
    out_n = 0
    while True:
        base, fill, judged = st[_BASE], st[_FILL], st[_JUDGED]
        if final:
            if fill == 0:
                break
            stop = fill
            for c in range(m):  # the last row, held twice, is the lookahead
                buf[c, base + 2 + fill] = buf[c, base + 1 + fill]
                buf[c, base + 3 + fill] = buf[c, base + 1 + fill]
        elif fill - judged >= window + 2:
            stop = judged + window
        else:
            break
        n = stop + 4
        w0 = 2 + judged
        w1 = 2 + stop
        nw = stop - judged
        for c in range(m):
            fl = flags[c, base : base + n]
            fl[0] = FLAG_NONE
            fl[1] = FLAG_NONE
            fl[w0:] = FLAG_NONE
        if nw > 0:
            lam = math.sqrt(2.0 * math.log(nw)) if nw >= 2 else np.nan
            due = st[_ESTIMATES] < SCALE_WINDOWS or st[_WINDOWS] % SCALE_WINDOWS == 0
            var_n = st[_VAR_N]
            for c in range(m):
                _judge_column(
                    buf[c, base : base + n], flags[c, base : base + n],
                    work[c, base : base + n], w0, w1, lam, hist[c], st[_ESTIMATES], due, spikes,
                    res,
                )
                _rails(buf[c, base + w0 : base + w1], res[6], res[7], rails[c], at_rails[c])
                # quantisation record: q̂ where the differences sit on whole steps
                if math.isfinite(res[2]) and res[3] >= 0.99:
                    acc[c, 0] += 1
                    acc[c, 1] = min(acc[c, 1], res[2])
                # r.m.s. record: Chan et al. (1979) pairwise merge of the window's
                delta = res[4] - acc[c, 2]
                tot = var_n + nw
                acc[c, 2] += delta * nw / tot
                acc[c, 3] += res[5] + delta * delta * var_n * nw / tot
            st[_VAR_N] += nw
            st[_ESTIMATES] += 1 if due else 0
            st[_WINDOWS] += 1
        else:
            for c in range(m):
                y = work[c, base : base + n]
                y[:] = buf[c, base : base + n]
                _interpolate(y, flags[c, base : base + n], 2, n)
        end = stop if final else _releasable(
            buf, flags, base, stop, max(0, stop - max_pending * window)
        )
        _release(buf, flags, work, base, end, st, counts, exclude, out, out_n, marks,
                 mark_values)
        out_n += end if exclude else 0
        st[_BASE] = base + end
        st[_FILL] = fill - end
        st[_JUDGED] = stop - end
        if final:
            break
    return out_n


@numba.njit(cache=True, nogil=True)
def _compact(buf, flags, st):
    """Move the context and the held rows (and the pending rows' flags) to the front."""
    base, fill, judged = st[_BASE], st[_FILL], st[_JUDGED]
    if base == 0:
        return
    for c in range(buf.shape[0]):
        for i in range(2 + fill):  # forwards: the source lies after the destination
            buf[c, i] = buf[c, base + i]
        for i in range(judged):
            flags[c, 2 + i] = flags[c, base + 2 + i]
    st[_BASE] = 0


@numba.njit(cache=True, nogil=True)
def feed_block(block, buf, flags, work, st, hist, acc, counts, rails, at_rails, marks,
               mark_values, out, window, max_pending, exclude, spikes):
    """Take the rows of ``block`` (n, m) a window at a time: append them to the buffer
    (column-major), judge each window as soon as it is complete, release, compact; so the
    buffer stays about two windows long whatever the block size. Returns (rows written to
    ``out``, rows of ``block`` taken): fewer than n when the buffer is full (pending rows
    held back), and the caller grows it and calls again with the rest."""
    n, m = block.shape
    pos = 0
    out_n = 0
    while pos < n:
        fill, judged = st[_FILL], st[_JUDGED]
        k = min(n - pos, window + 2 - (fill - judged), buf.shape[1] - 4 - fill)
        if k <= 0:
            break
        for c in range(m):
            dst = buf[c, 2 + fill : 2 + fill + k]
            src = block[pos : pos + k, c]
            for i in range(k):
                dst[i] = src[i]
        st[_FILL] = fill + k
        pos += k
        out_n += judge_held(buf, flags, work, st, hist, acc, counts, rails, at_rails, marks,
                            mark_values, out[out_n:], window, max_pending, False, exclude,
                            spikes)
        _compact(buf, flags, st)
    return out_n, pos
