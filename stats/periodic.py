"""Periodic content and the errors of the means and second moments: a line (vortex shedding, a
vibrating probe) taken out before blocking.

A sinusoid of period P adds to the variance of block means as (A^2/2) sinc^2(pi b / P) at block
length b: the blocking curve of a mean over-states its error wherever blocks are not much longer
than P, although the sinusoid's own share of the mean's error, its partial-period average over
the record, falls as 1/T, not 1/sqrt(T). The remedy here treats an identified line as
deterministic and blocks the remainder:

1. :class:`RowStore` keeps the record as at most ``ROWS`` equal-length row means per component
   and per product of two components (with each row's centre time), halving the count by
   pairing neighbours when full: bounded memory (ROWS x (m + 1) (m + 2) / 2 doubles),
   mergeable, and it always spans the whole record, so a line with up to ~ROWS/4 periods in
   the record is resolved.
2. :func:`find_lines`, run again each time the record has grown by SEARCH_GROWTH (the
   frequencies kept in the state): a twice zero-padded Hann periodogram of the rows; a bin is
   a line when it stands above the larger of the mean levels of FLANK natural bins on either
   side by the F(2, 2 FLANK) quantile at 1 - ALPHA / bins (Bonferroni over the bins
   searched), with at least ~23 periods in the record and at most a quarter cycle per row.
   Its frequency is refined on a fine grid of the plain periodogram (the least-squares
   frequency of one sinusoid in noise). Up to MAX_LINES, each searched in the remainder of
   the ones before.
3. :func:`line_mean_error`: least squares of the rows on a constant and cos/sin of each line.
   The record mean is exactly ``beta_0 + d`` (residuals sum to zero), ``d`` the fitted
   sinusoids' average over the record. The remainder is blocked level by level and the level
   chosen as everywhere (blocking.choose_level: Jonsson + lugsail, the point's minimum block
   length); each level's sums are scaled by (n_k - 1)/(n_k - d_k), d_k = tr(P M_k) the
   degrees of freedom the fit took from that level's block means (P: the fit's hat matrix,
   M_k: block averaging; exact for white block means: the expected residual sum of squares of
   a linear fit, Seber & Lee 2003, Linear Regression Analysis, from memory), and by the
   intercept's variance inflation N [(X'X)^-1]_00. The error of the mean is then
   sqrt(VIF V + d^2): the known partial-period average is added in quadrature (for a bias of
   known size d, a normal error and the interval 1.96 sqrt(V + d^2) cover 0.950 or more
   whatever d / sqrt(V); from the normal distribution).

4. :meth:`RowStore.second_errors`: a second moment (uu, uv, k, ...) is a smooth function of the
   means of x - ref and of the products (x - ref)_a (x - ref)_b, so the row means of its
   influence series are ``rows @ g1 + rows2 @ g2`` (g: its gradient, exact for the
   linearisation the blocking errors use). The store keeps the m (m + 1) / 2 product rows
   beside the m first-order ones (4096 x (m + 1) (m + 2) / 2 doubles). Lines at f_a and f_b in
   components a and b put lines at f_a + f_b and |f_a - f_b| into the products (sin^2 = (1 -
   cos 2 w t) / 2), aliased into the rows' band; those at f_a cancel against the mean's term
   of the gradient. They are fitted and the remainder blocked as for a mean (3.); the
   statistic itself is unchanged (a line is part of the variance it measures).

Skewness, flatness and the other higher moments keep blocking's errors (their rows would need
the monomials of degree 3 and 4). With no line found nothing is changed (the point's errors
are exactly the blocking ones).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.fft import rfft

from eddyvigil.stats.blocking import choose_level
from eddyvigil.stats.kernels import kernel_view
from eddyvigil.stats.periodic_kernels import row_push
from eddyvigil.stats.protocol import same_fields

__all__ = [
    "RowStore",
    "RowsSnapshot",
    "Line",
    "MeanError",
    "find_lines",
    "line_mean_error",
    "ROWS",
    "MIN_PERIODS",
]

#: most rows kept per component (between ROWS/2 and ROWS once the record is longer)
ROWS = 4096
#: fewest rows before lines are looked for
MIN_ROWS = 256
#: a line must repeat at least this often in the record to be separated from the mean
MIN_PERIODS = 10  # (the flanks raise it: see find_lines)
#: and span at least four rows per period (row averaging attenuates it by < 10 %)
MAX_CYCLES_PER_ROW = 0.25
#: false-alarm rate of the line test per column and search
ALPHA = 0.01
#: natural bins averaged on each side of a candidate (two apart), and their distance from it
FLANK = 10
GAP = 3
#: lines looked for per column
MAX_LINES = 2
#: lines are looked for again each time the record has grown by this factor (their
#: frequencies kept in the state; amplitude and phase are fitted afresh at every evaluation)
SEARCH_GROWTH = 1.5
#: highest frequency (cycles per row) of a derived line in a second moment's rows (sum and
#: difference frequencies; kept clear of the rows' Nyquist frequency, where a sinusoid's two
#: columns become one)
MAX_FOLDED = 0.45
#: fine-grid points across +- half a natural bin when refining a line's frequency
REFINE = 11


@dataclass(frozen=True)
class Line:
    """A line found in a component: frequency (cycles per sample) and fitted amplitude
    (units of the samples; the row averaging undone)."""

    cycles_per_sample: float
    amplitude: float


@dataclass(frozen=True)
class MeanError:
    """The error of one component mean with its lines taken out (arrays of one row, as
    choose_level gives them) and the lines; ``partial_mean``: the fitted sinusoids' average
    over the record, added in quadrature into ``variance``."""

    variance: float
    level: int
    blocks: int
    block_samples: int
    relative_error: float
    top_variance: float
    slow_block_samples: int
    lines: tuple[Line, ...]
    partial_mean: float
    inflation: float


@lru_cache(maxsize=8)
def _hann(n: int) -> np.ndarray:
    w = 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)
    w.setflags(write=False)
    return w


def find_lines(y: np.ndarray, tau: np.ndarray, max_lines: int = MAX_LINES) -> list[float]:
    """Frequencies (cycles per row) of the lines in the row series ``y`` at times ``tau``
    (in rows; nearly regular), strongest first, each searched in the remainder of the ones
    before.

    Candidates are the bins of the twice zero-padded Hann periodogram. The broadband level
    beside a candidate is the larger of the means of FLANK natural bins on either side, GAP
    bins away and two bins apart (Hann's transforms two bins apart are nearly uncorrelated),
    so under noise the ratio of a bin to one flank mean is F(2, 2 FLANK) distributed, with
    P(ratio > x) = (1 + x / FLANK)^-FLANK; the larger flank only lowers that. The threshold
    puts ALPHA on the candidates searched (Bonferroni).
    """
    N = y.size
    if N < MIN_ROWS:
        return []
    reach = GAP + 2 * (FLANK - 1)  # natural bins from a candidate to its farthest flank bin
    lo = max(MIN_PERIODS, reach + 2)
    hi = min(int(N * MAX_CYCLES_PER_ROW), N // 2 - reach - 2)
    if hi - lo < 4:
        return []
    cand = np.arange(2 * lo, 2 * hi)  # padded bins
    thr = FLANK * ((ALPHA / cand.size) ** (-1.0 / FLANK) - 1.0)
    # flank sums: W[b] = nat[b] + nat[b + 2] + ... + nat[b + 2 (FLANK - 1)] by shifted adds
    # (no running sum: a strong line would swamp the differences of one in rounding)
    left_top = cand // 2 - GAP
    right_low = (cand + 1) // 2 + GAP
    w = _hann(N)
    found: list[float] = []
    r = y - y.mean()
    for _ in range(max_lines):
        p = np.abs(rfft(w * r, 2 * N)) ** 2
        nat = p[::2]
        width = nat.size - 2 * (FLANK - 1)
        W = np.zeros(width)
        for i in range(FLANK):
            W += nat[2 * i : 2 * i + width]
        left = W[left_top - 2 * (FLANK - 1)]
        right = W[right_low]
        level = np.maximum(left, right)
        # no broadband power beside a bin (a constant or noiseless record): a line only where
        # the bin itself has power
        ratio = np.divide(
            p[cand] * FLANK, level, out=np.where(p[cand] > 0, np.inf, 0.0), where=level > 0
        )
        k = int(np.argmax(ratio))
        if not ratio[k] > thr:
            break
        f = _refine(r, tau, cand[k] / (2.0 * N), 0.5 / N)
        found.append(f)
        X = _design(tau, found)
        beta, *_ = np.linalg.lstsq(X, y, rcond=None)
        r = y - X @ beta
    return found


def _refine(r: np.ndarray, tau: np.ndarray, f: float, width: float) -> float:
    """The frequency near ``f`` (within ``width``) of the largest plain periodogram value, on a
    fine grid with a parabola through the best three points."""
    grid = f + width * np.linspace(-1.0, 1.0, REFINE)
    ph = np.exp(-2j * np.pi * np.outer(grid, tau))
    p = np.abs(ph @ r) ** 2
    i = int(np.argmax(p))
    if 0 < i < REFINE - 1:
        a, b, c = p[i - 1], p[i], p[i + 1]
        den = a - 2.0 * b + c
        if den < 0:
            return float(grid[i] + 0.5 * (a - c) / den * (grid[1] - grid[0]))
    return float(grid[i])


def _design(tau: np.ndarray, freqs) -> np.ndarray:
    cols = [np.ones_like(tau)]
    for f in freqs:
        cols += [np.cos(2 * np.pi * f * tau), np.sin(2 * np.pi * f * tau)]
    return np.column_stack(cols)


def line_mean_error(
    y: np.ndarray, tau: np.ndarray, freqs, row_len: int, min_level: int = 0
) -> MeanError | None:
    """The error of the mean of rows ``y`` (times ``tau`` in rows) with sinusoids at ``freqs``
    (cycles per row) fitted and the remainder blocked (module text); None when no level can
    be chosen. ``min_level``: lowest level of rows allowed (blocks long enough against the
    integral time)."""
    N = y.size
    X = _design(tau, freqs)
    # normal equations through the Cholesky factor of X'X = L L' (the columns, a constant and
    # sinusoids of >= MIN_PERIODS periods, are nearly orthogonal: well conditioned)
    G = X.T @ X
    try:
        L = np.linalg.cholesky(G)
    except np.linalg.LinAlgError:
        return None
    Linv = np.linalg.inv(L)
    Ginv = Linv.T @ Linv
    beta = Ginv @ (X.T @ y)
    fit = X @ beta
    r = y - fit
    partial = float(fit.mean() - beta[0])
    Q = X @ Linv.T  # orthonormal columns spanning X
    inflation = float(N * Ginv[0, 0])  # N [(X'X)^-1]_00
    # the remainder and the fit's orthonormal columns, block-averaged level by level (pairs of
    # the level below, the odd last one left out, as the blocking levels do)
    z = np.column_stack([r - r.mean(), Q])
    c0, gamma, n = [], [], []
    size = 1
    while z.shape[0] >= 2:
        nk = z.shape[0]
        zr, qb = z[:, 0], z[:, 1:]
        lost = size * float(np.einsum("ij,ij->", qb, qb))  # tr(P M_k)
        if not nk - lost > 1.0:
            break
        scale = (nk - 1.0) / (nk - lost)
        c0.append(scale * float(zr @ zr) / nk)
        gamma.append(scale * float(zr[:-1] @ zr[1:]) / nk)
        n.append(nk)
        half = nk // 2
        z = 0.5 * (z[0 : 2 * half : 2] + z[1 : 2 * half : 2])
        size *= 2
    if len(n) < 2:
        return None
    choice = choose_level(
        np.array([c0]), np.array([gamma]), np.array(n, dtype=np.int64), row_len,
        np.array([min_level], dtype=np.int64),
    )
    v = float(choice.variance[0])
    if not math.isfinite(v):
        return None
    lines = []
    for i, f in enumerate(freqs):
        amp = math.hypot(beta[1 + 2 * i], beta[2 + 2 * i])
        fs = f / row_len
        s = math.sin(math.pi * fs)
        atten = math.sin(math.pi * fs * row_len) / (row_len * s) if s else 1.0
        lines.append(Line(fs, amp / atten if atten > 0 else amp))
    return MeanError(
        variance=inflation * v + partial**2,
        level=int(choice.level[0]),
        blocks=int(choice.blocks[0]),
        block_samples=int(choice.block_samples[0]),
        relative_error=float(choice.relative_error[0]),
        top_variance=inflation * float(choice.top_variance[0]) + partial**2,
        slow_block_samples=int(choice.slow_block_samples[0]),
        lines=tuple(lines),
        partial_mean=partial,
        inflation=inflation,
    )


def _fold(f: float) -> float:
    """A frequency (cycles per row) as the rows see it: aliased into [0, 0.5]."""
    f = abs(f) % 1.0
    return 1.0 - f if f > 0.5 else f


def _distinct(freqs: list[float], rows: int) -> list[float]:
    """``freqs`` without those within a natural bin (1 / rows) of one kept before (two
    sinusoids closer than that are one column of the fit, nearly)."""
    kept: list[float] = []
    for f in freqs:
        if all(abs(f - g) * rows >= 1.0 for g in kept):
            kept.append(f)
    return kept


def _shift2(p2: np.ndarray, p1: np.ndarray, delta: np.ndarray, count: float) -> np.ndarray:
    """Second-order products (or their sums over ``count`` samples) about a reference moved
    by ``-delta``: (y + delta)_a (y + delta)_b = y_a y_b + delta_a y_b + delta_b y_a +
    delta_a delta_b, pairs a <= b in ``combos[2]`` order; ``p1``: the first-order values."""
    a, b = _pairs(delta.size)
    return p2 + delta[a] * p1[..., b] + delta[b] * p1[..., a] + count * delta[a] * delta[b]


@lru_cache(maxsize=8)
def _pairs(m: int) -> tuple[np.ndarray, np.ndarray]:
    """The components (a, b), a <= b, of each second-order column, in ``combos[2]`` order."""
    a, b = np.triu_indices(m)
    return a, b


@dataclass(frozen=True)
class RowsSnapshot:
    """What a row store holds: samples taken, row length, the rows (values of x) and their
    centre times (sample index), and whether the rows share one clock."""

    n: int
    row_len: int
    rows: np.ndarray
    times: np.ndarray
    clock: bool


class RowStore:
    """Row means of ``x - ref`` over the whole record, at most ROWS of them (module text).

    >>> import numpy as np
    >>> x = np.random.default_rng(2).normal(size=(10_000, 2))
    >>> st = RowStore(2).update(x[:3000]).update(x[3000:])
    >>> st.full, st.row_len, st.seen   # 10000 samples: rows of 4 once 4096 rows of 2 filled
    (2500, 4, 10000)
    >>> bool(np.allclose(st.rows[:2500] + st.ref, x.reshape(2500, 4, 2).mean(axis=1)))
    True
    """

    def __init__(self, m: int, rows: int = ROWS, ref=None):
        if rows < 2 or rows % 2:
            raise ValueError("rows must be an even number >= 2")
        self.m = m
        # the first block's mean unless given
        self.ref: np.ndarray | None = None if ref is None else np.asarray(ref, dtype=np.float64)
        self.rows = np.zeros((rows, m))
        # row means of the second-order products (x - ref)_a (x - ref)_b, a <= b: the rows of
        # any second moment's influence series (second_errors)
        self.rows2 = np.zeros((rows, m * (m + 1) // 2))
        self.times = np.zeros(rows)  # centre sample index of each row
        self.carry = np.zeros(m)
        self.carry2 = np.zeros(m * (m + 1) // 2)
        #: highest order of the rows kept (1: a state saved before the second-order rows)
        self.orders = 2
        self.full = 0
        self.row_len = 1
        self.carry_n = 0
        self.seen = 0
        #: samples left out of the rows by merges (an unfinished row in the middle)
        self.dropped = 0
        #: False once independent records were joined: no common time axis, no line fit
        self.clock = True
        #: lines found at the last search, cycles per sample (NaN: none), and when (samples)
        self.lines = np.full((m, MAX_LINES), np.nan)
        self.searched_at = 0

    @classmethod
    def empty(cls, m: int, rows: int = ROWS) -> RowStore:
        return cls(m, rows)

    @property
    def n(self) -> int:
        """Samples taken in (rows, the unfinished row and any left out by merges)."""
        return self.seen

    def snapshot(self) -> RowsSnapshot:
        """The complete rows as values of x (read-only copies) with their centre times."""
        if self.ref is None:
            rows = np.empty((0, self.m))
        else:
            rows = self.rows[: self.full] + self.ref
        times = self.times[: self.full].copy()
        rows.setflags(write=False)
        times.setflags(write=False)
        return RowsSnapshot(self.seen, self.row_len, rows, times, self.clock)

    def copy(self) -> RowStore:
        new = RowStore.__new__(RowStore)
        for k, v in self.__dict__.items():
            setattr(new, k, v.copy() if isinstance(v, np.ndarray) else v)
        return new

    def __eq__(self, other) -> bool:
        """Same state, array for array (bit for bit)."""
        if not isinstance(other, RowStore):
            return NotImplemented
        return same_fields(self, other)

    def _tau(self) -> np.ndarray:
        """Row times in rows from the first row."""
        return (self.times[: self.full] - self.times[0]) / self.row_len

    def _search(self) -> None:
        """Look for lines in every component now (find_lines); kept in ``lines``."""
        self.lines = np.full((self.m, MAX_LINES), np.nan)
        self.searched_at = self.seen
        if not self.clock or self.full < MIN_ROWS:
            return
        tau = self._tau()
        for c in range(self.m):
            freqs = find_lines(self.rows[: self.full, c], tau)
            for k, f in enumerate(freqs[:MAX_LINES]):
                self.lines[c, k] = f / self.row_len

    __hash__ = None  # mutable

    def update(self, block: np.ndarray) -> RowStore:
        """Add a block (n, m) of samples in time order; returns self."""
        block = kernel_view(block)
        n = block.shape[0]
        if n == 0:
            return self
        if self.ref is None:
            self.ref = block.mean(axis=0, dtype=np.float64)
        i = 0
        while i < n:
            # stop at the sample count of the next search, so that any split of the stream
            # searches at the same moments (the state does not depend on the split)
            due = self.next_search()
            take = n - i if not self.clock else min(n - i, due - self.seen)
            state = np.array([self.full, self.row_len, self.carry_n, self.seen], dtype=np.int64)
            bundle = (self.rows, self.rows2, self.times, self.carry, self.carry2, state)
            row_push(block[i : i + take], self.ref, bundle)
            self.full, self.row_len, self.carry_n, self.seen = (int(v) for v in state)
            i += take
            if self.clock and self.seen == due:
                self._search()
        return self

    def next_search(self) -> int:
        """Samples at which lines are looked for next: MIN_ROWS, then SEARCH_GROWTH times the
        last search's count."""
        if self.searched_at == 0:
            return MIN_ROWS
        return max(int(SEARCH_GROWTH * self.searched_at), self.searched_at + 1)

    def _coarsened(self, row_len: int) -> tuple[np.ndarray, np.ndarray, int]:
        """(rows, times, samples dropped) paired up to ``row_len``; rows: the first- and
        second-order rows side by side."""
        rows = np.concatenate([self.rows[: self.full], self.rows2[: self.full]], axis=1)
        times = self.times[: self.full]
        length, dropped = self.row_len, 0
        while length < row_len:
            half = rows.shape[0] // 2
            dropped += (rows.shape[0] - 2 * half) * length
            rows = 0.5 * (rows[0 : 2 * half : 2] + rows[1 : 2 * half : 2])
            times = 0.5 * (times[0 : 2 * half : 2] + times[1 : 2 * half : 2])
            length *= 2
        return rows, times, dropped

    def merge(self, other: RowStore, independent: bool = True) -> RowStore:
        """``self`` followed by ``other`` (inputs untouched). Rows are paired up to the longer
        row length and joined; ``self``'s unfinished row is left out (``dropped``).
        Independent records share no time axis: the result keeps no clock and no line is
        fitted on it (errors as blocking gives them). Not associative to the digit: where rows
        are paired across a join depends on the grouping of the merges."""
        if other.m != self.m or other.rows.shape != self.rows.shape:
            raise ValueError("cannot merge row stores of different shape")
        if other.ref is None:
            return self.copy()
        if self.ref is None:
            new = other.copy()
            new.clock = new.clock and self.clock
            return new
        new = self.copy()
        length = max(self.row_len, other.row_len)
        a, ta, da = self._coarsened(length)
        b, tb, db = other._coarsened(length)
        delta = other.ref - self.ref
        b = np.concatenate(
            [b[:, : self.m] + delta, _shift2(b[:, self.m :], b[:, : self.m], delta, 1.0)], axis=1
        )
        rows = np.concatenate([a, b])
        times = np.concatenate([ta, tb + self.seen])
        dropped = da + db + self.carry_n
        while rows.shape[0] >= self.rows.shape[0]:
            half = rows.shape[0] // 2
            dropped += (rows.shape[0] - 2 * half) * length
            rows = 0.5 * (rows[0 : 2 * half : 2] + rows[1 : 2 * half : 2])
            times = 0.5 * (times[0 : 2 * half : 2] + times[1 : 2 * half : 2])
            length *= 2
        new.rows = np.zeros_like(self.rows)
        new.rows2 = np.zeros_like(self.rows2)
        new.times = np.zeros_like(self.times)
        new.rows[: rows.shape[0]] = rows[:, : self.m]
        new.rows2[: rows.shape[0]] = rows[:, self.m :]
        new.times[: rows.shape[0]] = times
        new.full = rows.shape[0]
        new.row_len = length
        # other's unfinished row continues (its samples about self.ref)
        new.carry_n = other.carry_n
        new.carry = other.carry + other.carry_n * delta
        new.carry2 = _shift2(other.carry2, other.carry, delta, float(other.carry_n))
        new.orders = min(self.orders, other.orders)
        if new.carry_n >= length:  # cannot happen (carry_n < other.row_len <= length)
            raise AssertionError("unfinished row longer than a row")
        new.seen = self.seen + other.seen
        new.dropped = self.dropped + other.dropped + dropped
        new.clock = self.clock and other.clock and not independent
        new._search()
        return new

    def mean_errors(self, per_sample_s: float, tint_s, min_block_tints: float) -> dict:
        """``{column index: MeanError}`` for the components with a line; ``tint_s``: each
        component's integral time (s) for the minimum block length (NaN: no minimum)."""
        if not self.clock or self.full < MIN_ROWS or not per_sample_s > 0:
            return {}
        if np.isnan(self.lines).all():
            return {}
        tau = self._tau()
        out = {}
        for c in range(self.m):
            y = self.rows[: self.full, c]
            # the lines of the last search still inside the searched band at today's rows
            cyc = self.lines[c][~np.isnan(self.lines[c])] * self.row_len
            freqs = [
                f for f in cyc.tolist() if MIN_PERIODS <= f * self.full and f <= MAX_CYCLES_PER_ROW
            ]
            err = self._error(y, tau, freqs, tint_s[c], per_sample_s, min_block_tints)
            if err is not None:
                out[c] = err
        return out

    def second_errors(
        self, grads: dict, per_sample_s: float, tint_s: dict, min_block_tints: float
    ) -> dict:
        """``{key: MeanError}`` for second-order statistics whose components carry a line.

        ``grads``: ``{key: (g1, g2)}``, a statistic's gradient with respect to the means of
        ``x - ref`` (``g1``, m) and of the products (``g2``, in ``combos[2]`` order) about
        this store's ``ref``: its influence series has the row means ``rows @ g1 + rows2 @
        g2`` (exact for the moments' linearisation). Where products of components a, b carry
        lines at f_a and f_b, the series carries lines at f_a + f_b and |f_a - f_b| (folded
        into the rows' band; the lines at f_a cancel with the mean's term); those are fitted
        and the remainder blocked as for a mean (line_mean_error). ``tint_s``: ``{key:
        integral time (s)}`` for the minimum block length."""
        if self.orders < 2 or not self.clock or self.full < MIN_ROWS or not per_sample_s > 0:
            return {}
        if np.isnan(self.lines).all():
            return {}
        tau = self._tau()
        pa, pb = _pairs(self.m)
        out = {}
        for key, (g1, g2) in grads.items():
            freqs: list[float] = []
            for q in np.flatnonzero(g2).tolist():
                fa = self.lines[pa[q]][~np.isnan(self.lines[pa[q]])] * self.row_len
                fb = self.lines[pb[q]][~np.isnan(self.lines[pb[q]])] * self.row_len
                for x in fa.tolist():
                    for y in fb.tolist():
                        freqs += [_fold(x + y), _fold(x - y)]
            freqs = _distinct(
                [f for f in freqs if MIN_PERIODS <= f * self.full and f <= MAX_FOLDED], self.full
            )
            y = self.rows[: self.full] @ g1 + self.rows2[: self.full] @ g2
            err = self._error(y, tau, freqs, tint_s[key], per_sample_s, min_block_tints)
            if err is not None:
                out[key] = err
        return out

    def _error(self, y, tau, freqs, t, per_sample_s, min_block_tints) -> MeanError | None:
        """line_mean_error of the rows ``y`` with the lines ``freqs`` (cycles per row), blocks
        at least ``min_block_tints`` integral times ``t`` (s) long; None without a line."""
        if not freqs:
            return None
        need = min_block_tints * t / per_sample_s / self.row_len if t > 0 else 0.0
        min_level = max(0, math.ceil(math.log2(need))) if need > 1.0 else 0
        return line_mean_error(y, tau, freqs, self.row_len, min_level)


def method_text(err: MeanError, rate_hz: float) -> str:
    """One line for the statistics entry: which lines were taken out, and how."""
    lines = ", ".join(
        f"{ln.cycles_per_sample * rate_hz:.4g} Hz (amplitude {ln.amplitude:.3g})"
        for ln in err.lines
    )
    return (
        f"periodic: blocking of the remainder after a fitted line at {lines}; its partial-period "
        f"mean ({err.partial_mean:.3g}) added in quadrature"
    )
