"""BlockingAccumulator: standard errors of means of correlated series in O(log N) memory.

Online dyadic blocking (Flyvbjerg & Petersen 1989, J. Chem. Phys. 91:461) of the vector of
monomial means over base blocks of ``base`` samples. Each level keeps sums, outer-product sums
and lag-one product sums of its block means, so the blocking curve of *any* linear combination
of the monomials (the influence series of any statistic, see ``delta.py``) can be read off at
any time. The level is chosen by Jonsson's M-test (Jonsson 2018, Phys. Rev. E 98:043304) with
chi-squared(d - j) degrees of freedom, and the finite-block bias is cancelled by the lugsail
combination 2 V_j - V_{j-1} (Vats & Flegal).

Samples are shifted by a reference (the first block's mean) before any power is taken, so a
1e8 offset costs no precision. A short list of equal-length *segment* means of each component
is kept too, for the stationarity guard.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import special
from scipy import stats as sps

from eddyvigil.stats.kernels import (
    blocking_push,
    influence_autocovariances,
    ingest_block,
    jonsson_lugsail,
    kernel_view,
    segment_push,
)
from eddyvigil.stats.monomials import layout
from eddyvigil.stats.protocol import same_fields

__all__ = [
    "BlockingAccumulator",
    "BlockingSnapshot",
    "LevelChoice",
    "choose_level",
    "rise_block_samples",
    "MIN_BLOCKS_PER_LEVEL",
]

#: levels with fewer blocks than this take no part in the level choice
MIN_BLOCKS_PER_LEVEL = 4
#: kept segment means: between SEGMENTS // 2 and SEGMENTS - 1 complete ones
SEGMENTS = 64


@lru_cache(maxsize=256)
def _chi2_99(df: int) -> float:
    return float(sps.chi2.ppf(0.99, df))


@dataclass(frozen=True)
class LevelChoice:
    """Outcome of the blocking analysis of one series (arrays over statistics)."""

    variance: np.ndarray  # variance of the statistic's estimate (lugsail), NaN when unknown
    level: np.ndarray  # chosen level j (int, -1 when unknown)
    blocks: np.ndarray  # number of blocks at the chosen level
    block_samples: np.ndarray  # samples per block at the chosen level
    relative_error: np.ndarray  # relative standard error of sqrt(variance)
    #: when the curve rises above the chosen level (slow content): the largest variance of
    #: a level above it (NaN: no significant rise)
    top_variance: np.ndarray | None = None
    #: samples per block at the top level the record resolves, when the curve rises
    #: significantly above the chosen level (0: none): blocks this long are needed
    slow_block_samples: np.ndarray | None = None


#: false-alarm rate of the slow-content (rise) test at one look (one checkpoint)
SLOW_ALPHA = 0.01
#: the rise test's reference: the highest level that still has this many blocks (and is
#: above the row's reference floor, blocks long enough against T_int) ...
RISE_FINE_BLOCKS = 512
#: ... against the pooled levels above the highest one with at least this many blocks
RISE_COARSE_BLOCKS = 64


#: one-sided confidence of the lower bounds of the levels above the chosen one
UPPER_LEVEL_CONFIDENCE = 0.9
#: fewest blocks of a level whose lower bound counts
UPPER_LEVEL_BLOCKS = 8


@lru_cache(maxsize=4096)
def _lower_bound_factor(dof: int) -> float:
    return dof / float(sps.chi2.ppf(UPPER_LEVEL_CONFIDENCE, dof))


def _lower_bound_factors(n: np.ndarray, K: int) -> np.ndarray:
    """(n_k - 1) / chi2_{UPPER_LEVEL_CONFIDENCE}(n_k - 1) per level (0 below
    UPPER_LEVEL_BLOCKS blocks): V_k times it is a lower confidence bound of the level's
    variance (chi-squared with n_k - 1 degrees of freedom, REFERENCES §12)."""
    return np.array(
        [_lower_bound_factor(int(x) - 1) if x >= UPPER_LEVEL_BLOCKS else 0.0 for x in n[:K]]
    )


def _rise_levels(n: np.ndarray, K: int) -> tuple[int, int]:
    """``(ref_fine, ref_top)``: the highest levels below K with RISE_FINE_BLOCKS and with
    RISE_COARSE_BLOCKS blocks (0 when none)."""
    fine = np.flatnonzero(n[:K] >= RISE_FINE_BLOCKS)
    top = np.flatnonzero(n[:K] >= RISE_COARSE_BLOCKS)
    return (int(fine[-1]) if fine.size else 0), (int(top[-1]) if top.size else 0)


def _rise_test(ratio, dof_up, dof_ref) -> np.ndarray:
    """True where the coarse levels' detail energy is significantly above the reference.

    The test (slow content under the turbulence, REFERENCES §12) uses the orthogonal Haar
    split of the blocking levels: level k's sum of squares is twice level k+1's plus the
    detail energy 1/2 sum (y_2i - y_2i+1)^2 (plus an unpaired block's square), with n_k -
    n_{k+1} degrees of freedom; for white block means the details of different levels are
    independent scaled chi-squared variables, and per degree of freedom, times 2^k, all
    equal the variance of the mean times N (Percival & Walden 2000, Wavelet Methods for Time
    Series Analysis, ch. 8, from memory: the Haar wavelet variance). A short-memory signal's
    details fall short of that by a 1/B term (1.5 T/B of the value for an exponential
    correlation); the reference 2 det_r - det_{r-1} at a fine level with many blocks cancels
    it (as the lugsail does for the blocking curve), its degrees of freedom by Satterthwaite's
    rule (Satterthwaite 1946, from memory). Slow content raises the coarse details above the
    reference: the pooled ratio is compared with the F(dof_up, dof_ref) quantile at
    1 - SLOW_ALPHA, one one-sided test per look instead of one F test per level.
    """
    with np.errstate(invalid="ignore"):
        p = special.fdtrc(dof_up, dof_ref, ratio)
    return np.isfinite(p) & (p < SLOW_ALPHA)


@lru_cache(maxsize=64)
def _chi2_99_table(K: int) -> np.ndarray:
    """The chi-squared 0.99 quantiles with K - j degrees of freedom, j = 0 .. K-1 (read-only)."""
    q = np.array([_chi2_99(K - j) for j in range(K)])
    q.setflags(write=False)
    return q


def choose_level(
    c0: np.ndarray, gamma: np.ndarray, n: np.ndarray, base: int, min_level=None, ref_floor=None
) -> LevelChoice:
    """Jonsson's choice with the lugsail correction, for each row of ``c0``/``gamma`` (S, L).

    ``n`` (L,) is the number of blocks per level. Level 0 is never used on its own: the lugsail
    combination needs the level below, and it costs only a factor 2 in block count. Level j is
    the first whose M_j = sum_{k >= j} n_k (gamma_k / c0_k)^2 is below the chi2(K - j) 0.99
    quantile, over the K levels with at least MIN_BLOCKS_PER_LEVEL blocks. ``min_level`` (S,)
    raises the choice where blocks must be longer (the point's minimum block length in
    integral times); a row whose minimum is above the top usable level has no estimate yet.
    ``ref_floor`` (S,, default ``min_level``): the rise test's reference lies above it.

    A rise of the curve above the chosen level is tested too (``top_variance``,
    ``slow_block_samples``; see _rise_test: one pooled test at the false-alarm rate
    SLOW_ALPHA per look).
    """
    S, L = c0.shape
    usable = np.flatnonzero(n >= MIN_BLOCKS_PER_LEVEL)
    var = np.full(S, np.nan)
    level = np.full(S, -1, dtype=np.int64)
    blocks = np.zeros(S, dtype=np.int64)
    block_samples = np.zeros(S, dtype=np.int64)
    rel = np.full(S, np.nan)
    top = np.full(S, np.nan)
    ratio, dof_up, dof_ref = np.empty(S), np.empty(S), np.empty(S)
    if usable.size < 2:
        return LevelChoice(var, level, blocks, block_samples, rel, top, np.zeros(S, np.int64))
    K = int(usable[-1]) + 1
    if L <= K:  # the rise test reads level K too (in a record: at least 2 blocks there)
        c0 = np.concatenate([c0, np.zeros((S, K + 1 - L))], axis=1)
        gamma = np.concatenate([gamma, np.zeros((S, K + 1 - L))], axis=1)
        n = np.concatenate([n, np.zeros(K + 1 - L)])
    jonsson_lugsail(
        np.ascontiguousarray(c0, dtype=np.float64),
        np.ascontiguousarray(gamma, dtype=np.float64),
        np.ascontiguousarray(n, dtype=np.float64),
        _chi2_99_table(K),
        _lower_bound_factors(n, K),
        *_rise_levels(n, K),
        np.zeros(S, dtype=np.int64)
        if min_level is None
        else np.ascontiguousarray(min_level, dtype=np.int64),
        np.ascontiguousarray(
            (np.zeros(S) if min_level is None else min_level) if ref_floor is None else ref_floor,
            dtype=np.int64,
        ),
        int(base),
        var,
        level,
        blocks,
        block_samples,
        rel,
        ratio,
        dof_up,
        dof_ref,
        top,
    )
    rises = _rise_test(ratio, dof_up, dof_ref)
    top = np.where(rises, top, np.nan)
    slow_samples = np.where(rises, rise_block_samples(n, base, level), 0)
    return LevelChoice(var, level, blocks, block_samples, rel, top, slow_samples)


def rise_block_samples(n: np.ndarray, base: int, level):
    """Samples per block a rise of the blocking curve asks for, given the blocks per level
    ``n`` and the chosen ``level`` (array or int): the curve rises up to the top level the
    record resolves, so blocks one level above both the chosen one and the highest with
    RISE_COARSE_BLOCKS blocks are needed (at most the top level with MIN_BLOCKS_PER_LEVEL)."""
    n = np.asarray(n)
    K = int(np.flatnonzero(n >= MIN_BLOCKS_PER_LEVEL)[-1]) + 1
    lvl_up = np.maximum(level, _rise_levels(n, K)[1]) + 1
    return int(base) * 2 ** np.minimum(lvl_up, K - 1)


@dataclass(frozen=True)
class BlockingSnapshot:
    """What a blocking state says about the component means, read-only.

    ``c0[k, i]``: the lag-0 autocovariance of component ``i``'s level-``k`` block means about the
    mean of all base blocks (divided by ``blocks[k]``); ``means``: the chosen level and lugsail
    variance of each component mean (:func:`choose_level`).
    """

    n: int
    base: int
    ref: np.ndarray | None
    blocks: np.ndarray
    c0: np.ndarray
    means: LevelChoice


def _recentring_map(lay, shift: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(T, c)`` with monomials of ``y + shift`` = ``T @ monomials of y + c`` (exact).

    A monomial of the shifted vector is a product of ``y_i + shift_i``; expanding it over the
    subsets of its factors (binomially) gives lower monomials of ``y`` times products of the
    shift, and the empty subset a constant. The table is the one the kernels use to move sums
    about the block mean to sums about ``ref`` (``monomials.layout(m).recentre``).
    """
    D = lay.n_monomials
    T = np.zeros((D, D))
    c = np.zeros(D)
    for t, s, comp in zip(*lay.recentre, strict=True):
        coef = 1.0
        for k in comp:
            if k >= 0:
                coef *= shift[k]
        if s < 0:
            c[t] += coef
        else:
            T[t, s] += coef
    return T, c


class BlockingAccumulator:
    """Dyadic blocking of monomial means of ``x - ref`` over base blocks of ``base`` samples.

    >>> import numpy as np
    >>> x = np.random.default_rng(1).normal(size=(4096, 1))
    >>> acc = BlockingAccumulator(1, base=16).update(x[:1000]).update(x[1000:])
    >>> acc.n, int(acc.snapshot().blocks[0])
    (4096, 256)
    >>> # level 0 holds the 16-sample block means: their spread equals numpy's
    >>> y = x.reshape(256, 16).mean(axis=1)
    >>> bool(np.isclose(acc.snapshot().c0[0, 0], y.var()))
    True
    """

    def __init__(self, m: int, base: int = 64, max_levels: int = 40, ref=None):
        if base < 2 or base & (base - 1):
            raise ValueError("base must be a power of two >= 2")
        self.layout = layout(m)
        self.m = m
        self.base = base
        D = self.layout.n_monomials
        self.D = D
        # the first block's mean unless given; merge() re-centres parts with other references
        self.ref: np.ndarray | None = None if ref is None else np.asarray(ref, dtype=np.float64)
        #: samples taken in (complete base blocks and the carry)
        self.n = 0
        # a base block begun but not finished: its row count and monomial sums about ref
        self.carry_n = 0
        self.carry_sums = np.zeros(D)
        L = max_levels
        self.count = np.zeros(L, dtype=np.int64)
        self.S = np.zeros((L, D))
        self.Q = np.zeros((L, D, D))
        self.P = np.zeros((L, D, D))
        self.first = np.zeros((L, D))
        self.last = np.zeros((L, D))
        self.has_last = np.zeros(L, dtype=np.bool_)
        self.pending = np.zeros((L, D))
        self.has_pending = np.zeros(L, dtype=np.bool_)
        # joins of independent records per level (no lag pair across them) and the sums of
        # the two block means beside each join
        self.seams = np.zeros(L, dtype=np.int64)
        self.seam_ends = np.zeros((L, D))
        # segment store (component means of x - ref)
        self.seg_sums = np.zeros((SEGMENTS, m))
        self.seg_full = 0
        self.seg_len = 1  # in base blocks
        self.seg_fill = 0
        self.seg_cur = np.zeros(m)

    @classmethod
    def empty(cls, m: int, base: int = 64, ref=None) -> BlockingAccumulator:
        return cls(m, base, ref=ref)

    def copy(self) -> BlockingAccumulator:
        new = BlockingAccumulator.__new__(BlockingAccumulator)
        for k, v in self.__dict__.items():
            setattr(new, k, v.copy() if isinstance(v, np.ndarray) else v)
        return new

    def __getstate__(self):
        return {k: v for k, v in self.__dict__.items() if k != "layout"}

    def __setstate__(self, state):
        self.__dict__.update(state)
        self.layout = layout(self.m)

    def __eq__(self, other) -> bool:
        """Same state, array for array (bit for bit)."""
        if not isinstance(other, BlockingAccumulator):
            return NotImplemented
        return same_fields(self, other, skip=("layout",))

    __hash__ = None  # mutable

    def update(self, block: np.ndarray, moments=None) -> BlockingAccumulator:
        """Add a block (n, m) of samples in time order; returns self.

        One sweep over the samples: :func:`eddyvigil.stats.kernels.block_sums` (products of
        ``x - ref``) gives the monomial sums of every base block and, re-centred exactly, the
        block's central co-moment sums, which are combined into ``moments`` (a
        :class:`~eddyvigil.stats.moments.MomentAccumulator`) when one is given. Base blocks are
        aligned on the stream, not on the blocks it arrives in, so any split of the stream
        gives the same blocking state.
        """
        block = kernel_view(block)
        n = block.shape[0]
        if n == 0:
            return self
        lay = self.layout
        out = (  # a kernels.CentralSums bundle: mean, s2, s3, s4
            np.empty(self.m),
            np.empty(len(lay.combos[2])),
            np.empty(len(lay.combos[3])),
            np.empty(len(lay.combos[4])),
        )
        if self.ref is None:
            self.ref = block.mean(axis=0, dtype=np.float64)
        self.carry_n, self.seg_full, self.seg_len, self.seg_fill = ingest_block(
            block,
            self.ref,
            self.base,
            self.carry_n,
            self.carry_sums,
            lay.recentre,
            out,
            self._levels(),
            self._segments(),
            self.seg_full,
            self.seg_len,
            self.seg_fill,
        )
        self.n += n
        if moments is not None:
            moments._combine(n, *out)
        return self

    def _levels(self) -> tuple:
        """The level arrays as the one bundle the kernels take, in
        :class:`~eddyvigil.stats.kernels.BlockingLevels` order (the arrays themselves, not
        copies: merge and recentred replace them, so the bundle is built per call)."""
        return (
            self.count,
            self.S,
            self.Q,
            self.P,
            self.first,
            self.last,
            self.has_last,
            self.pending,
            self.has_pending,
        )

    def _segments(self) -> tuple:
        """The segment store as a :class:`~eddyvigil.stats.kernels.Segments` bundle."""
        return (self.seg_sums, self.seg_cur)

    def _add_segments(self, means: np.ndarray) -> None:
        """Add base-block component means ``means`` (nb, m) to the segment store."""
        self.seg_full, self.seg_len, self.seg_fill = segment_push(
            means, self._segments(), self.seg_full, self.seg_len, self.seg_fill
        )

    def segment_means(self) -> np.ndarray:
        """(n_segments, m) means of x over the complete, equal-length segments."""
        if self.ref is None:
            return np.empty((0, self.m))
        return self.seg_sums[: self.seg_full] / self.seg_len + self.ref

    def segment_samples(self) -> int:
        return self.seg_len * self.base

    def recentred(self, ref) -> BlockingAccumulator:
        """The same state about another reference: a new object (``self`` untouched).

        Every kept quantity is a sum of monomial means of ``x - ref`` or of their products, and
        the monomials about ``ref'`` are an affine map ``T y + c`` of those about ``ref``
        (binomial expansion, :func:`_recentring_map`), so sums ``S``, outer-product sums
        ``Q`` and lag-product sums ``P`` move exactly (to rounding): ``S' = T S + n c``,
        ``Q' = T Q T' + T S c' + c S' T' + n c c'``, and ``P`` likewise over the pairs.
        """
        ref = np.asarray(ref, dtype=np.float64)
        new = self.copy()
        if self.ref is None:
            new.ref = ref.copy()
            return new
        d = self.ref - ref
        if not np.any(d):
            return new
        T, c = _recentring_map(self.layout, d)
        cnt = self.count.astype(np.float64)
        TS = self.S @ T.T  # (L, D): T S_k per level
        cc = np.outer(c, c)
        new.S = TS + cnt[:, None] * c
        TQT = T @ self.Q @ T.T  # per level (matmul broadcasts over the first axis)
        new.Q = TQT + np.einsum("ka,b->kab", TS, c) + np.einsum("a,kb->kab", c, TS)
        new.Q += cnt[:, None, None] * cc
        # pairs: each block mean is in two pairs except the first, the last and those beside
        # a seam; the pair-element sums are 2 S - first - last - seam_ends
        pairs = np.maximum(cnt - 1.0 - self.seams, 0.0)
        E = 2.0 * self.S - self.first - self.last - self.seam_ends
        TE = E @ T.T
        TPT = T @ self.P @ T.T
        half = 0.5 * (np.einsum("ka,b->kab", TE, c) + np.einsum("a,kb->kab", c, TE))
        new.P = TPT + half + pairs[:, None, None] * cc
        live = (self.count > 0)[:, None]
        new.first = np.where(live, self.first @ T.T + c, 0.0)
        new.last = np.where(live, self.last @ T.T + c, 0.0)
        new.pending = np.where(self.has_pending[:, None], self.pending @ T.T + c, 0.0)
        new.seam_ends = self.seam_ends @ T.T + 2.0 * self.seams[:, None] * c
        new.carry_sums = T @ self.carry_sums + self.carry_n * c if self.carry_n else new.carry_sums
        new.seg_sums = self.seg_sums.copy()
        new.seg_sums[: self.seg_full] += self.seg_len * d
        new.seg_cur = self.seg_cur + self.seg_fill * d
        new.ref = ref.copy()
        return new

    def merge(self, other: BlockingAccumulator, independent: bool = True) -> BlockingAccumulator:
        """Blocking state of ``self`` followed by ``other`` (inputs untouched).

        ``other`` is first re-centred exactly to ``self.ref`` (:meth:`recentred`). Level sums
        add; each part keeps its own block alignment, so the result is statistically
        equivalent to, but not digit for digit the same as, one pass over the concatenation.
        Independent records (the default: repeats of a point, saved states) are joined with
        no lag pair across the seam; ``independent=False`` links the last block mean of
        ``self`` with the first of ``other`` at each level, for a record cut in two.
        """
        if other.m != self.m or other.base != self.base:
            raise ValueError("cannot merge blocking states of different shape")
        if other.ref is None:
            return self.copy()
        if self.ref is None:
            return other.copy()
        if not np.array_equal(self.ref, other.ref):
            other = other.recentred(self.ref)
        new = self.copy()
        both = (self.count > 0) & (other.count > 0)
        new.P = self.P + other.P
        new.seams = self.seams + other.seams
        new.seam_ends = self.seam_ends + other.seam_ends
        if independent:
            new.seams = new.seams + both
            new.seam_ends = new.seam_ends + np.where(both[:, None], self.last + other.first, 0.0)
        else:
            link = np.einsum("ka,kb->kab", self.last, other.first)
            link = 0.5 * (link + np.swapaxes(link, 1, 2))
            new.P = new.P + np.where(both[:, None, None], link, 0.0)
        new.S = self.S + other.S
        new.Q = self.Q + other.Q
        new.first = np.where((self.count > 0)[:, None], self.first, other.first)
        new.last = np.where((other.count > 0)[:, None], other.last, self.last)
        new.has_last = self.has_last | other.has_last
        new.count = self.count + other.count
        new.n = self.n + other.n
        # the later part's unpaired block means wait for their pairs; the earlier part's lone
        # pending values stay counted at their own level only
        new.pending = other.pending.copy()
        new.has_pending = other.has_pending.copy()
        new._merge_segments(other)
        # the two unfinished base blocks (< base samples each) become one; if that reaches a
        # base block it is pushed as one (slightly longer, when over) base-block mean
        total = self.carry_n + other.carry_n
        sums = self.carry_sums + other.carry_sums
        new.carry_n, new.carry_sums = 0, np.zeros(self.D)
        if total >= self.base:
            y = (sums / total)[None, :]
            blocking_push(y, new._levels())
            new._add_segments(y[:, : self.m])
        elif total:
            new.carry_n, new.carry_sums = total, sums
        return new

    def _merge_segments(self, other: BlockingAccumulator) -> None:
        def coarsened(sums, full, length, target):
            sums = sums[:full]
            while length < target:
                half = sums.shape[0] // 2
                sums = sums[0 : 2 * half : 2] + sums[1 : 2 * half : 2]
                length *= 2
            return sums

        target = max(self.seg_len, other.seg_len)
        both = np.concatenate(
            [
                coarsened(self.seg_sums, self.seg_full, self.seg_len, target),
                coarsened(other.seg_sums, other.seg_full, other.seg_len, target),
            ]
        )
        while both.shape[0] >= SEGMENTS:
            half = both.shape[0] // 2
            both = both[0 : 2 * half : 2] + both[1 : 2 * half : 2]
            target *= 2
        self.seg_sums = np.zeros((SEGMENTS, self.m))
        self.seg_sums[: both.shape[0]] = both
        self.seg_full = both.shape[0]
        self.seg_len = target
        self.seg_fill = 0
        self.seg_cur = np.zeros(self.m)

    def _autocovariances(self, grad: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(c0, gamma, n)`` of the series ``grad @ y`` per row of ``grad`` and level in use."""
        L = int(np.count_nonzero(self.count))
        n = self.count[:L].astype(np.float64)
        S = grad.shape[0]
        if L == 0:
            return np.zeros((S, 0)), np.zeros((S, 0)), n
        mu = self.S[0] / self.count[0]  # global means of the monomials (all base blocks)
        c0 = np.empty((S, L))
        gamma = np.empty((S, L))
        influence_autocovariances(
            np.ascontiguousarray(grad, dtype=np.float64),
            n,
            self.S[:L],
            self.Q[:L],
            self.P[:L],
            self.first[:L],
            self.last[:L],
            mu,
            c0,
            gamma,
        )
        seams = self.seams[:L]
        if seams.any():
            # joins of independent records: the kernel counted n - 1 pairs and both block means
            # beside each join as the end of two pairs; with zm = g @ mu and ze = g @ seam_ends,
            # gamma n loses no pair products (none were summed across a join) but the mean
            # correction changes by zm ze - seams zm^2 (the delta.py formula with seams)
            zm = grad @ mu
            ze = grad @ self.seam_ends[:L].T
            gamma += (zm[:, None] * ze - seams[None, :] * zm[:, None] ** 2) / n[None, :]
        return c0, gamma, n

    def analyse(self, grad: np.ndarray, min_level=None) -> LevelChoice:
        """Blocking analysis of the series ``grad @ y`` for each row of ``grad`` (S, D);
        ``min_level``: see choose_level."""
        c0, gamma, n = self._autocovariances(grad)
        return choose_level(c0, gamma, n, self.base, min_level)

    def snapshot(self) -> BlockingSnapshot:
        """The blocking curve and level choice of each component mean (read-only arrays)."""
        grad = np.eye(self.D)[: self.m]
        c0, gamma, n = self._autocovariances(grad)
        choice = choose_level(c0, gamma, n, self.base)
        ref = None if self.ref is None else self.ref.copy()
        for a in (c0, n, choice.variance, choice.level, choice.blocks):
            a.setflags(write=False)
        if ref is not None:
            ref.setflags(write=False)
        c0t = np.ascontiguousarray(c0.T)
        c0t.setflags(write=False)
        blocks = n.astype(np.int64)
        blocks.setflags(write=False)
        return BlockingSnapshot(self.n, self.base, ref, blocks, c0t, choice)
