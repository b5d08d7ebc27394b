"""PointStatistics: everything eddyvigil knows about one measurement point.

Composes the moment accumulator (values), the blocking accumulator (errors for correlated
data), the delta-method table (which series to block for each statistic), the stationarity
guard and the stopping rule, and turns them into an immutable :class:`PointSnapshot`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import NamedTuple

import numpy as np
from scipy import special

from eddyvigil.stats import slow_spectrum
from eddyvigil.stats.blocking import (
    MIN_BLOCKS_PER_LEVEL,
    BlockingAccumulator,
    choose_level,
    rise_block_samples,
)
from eddyvigil.stats.convergence import (
    CHECKPOINT_GROWTH,
    ETA_MIN_BLOCKS,
    MIN_BLOCK_TINTS,
    MIN_BLOCKS,
    MIN_RECORD_TINTS,
    STOP_MARGIN,
    Checkpoints,
    eta_seconds,
    passes,
    trustworthy,
)
from eddyvigil.stats.delta import StatisticTable
from eddyvigil.stats.kernels import integral_scales
from eddyvigil.stats.moments import MomentAccumulator
from eddyvigil.stats.names import components_of, family, statistic_names
from eddyvigil.stats.periodic import RowStore, method_text
from eddyvigil.stats.slow_spectrum import (
    LOOK_ALPHA,
    SPECTRAL_ALPHA,
    low_band_variance,
    low_frequency_rise,
)
from eddyvigil.stats.snapshot import Estimate, PointSnapshot
from eddyvigil.stats.stationarity import assess_columns
from eddyvigil.stats.tails import TAIL_MARGIN, TailAccumulator, needed_order
from eddyvigil.stats.targets import Targets

__all__ = ["PointStatistics", "DEFAULT_BASE_BLOCK"]

#: samples per base block of the blocking hierarchy (its level 0); see blocking.py
DEFAULT_BASE_BLOCK = 64


def k_method(columns) -> str:
    """How k is formed from the components present, naming the assumption it rests on.

    >>> k_method(("u", "w"))
    'k = 3/4 (uu + ww): two components, assuming vv = (uu + ww)/2 (common practice)'
    """
    cols = tuple(columns)
    if len(cols) >= 3:
        return "k = (" + " + ".join(c + c for c in cols) + ")/2"
    if len(cols) == 2:
        a, b = cols
        missing = [c for c in "uvw" if c not in cols]
        other = missing[0] if len(missing) == 1 else "the third component"
        other = other + other if len(missing) == 1 else other + "'s variance"
        return (
            f"k = 3/4 ({a}{a} + {b}{b}): two components, assuming {other} = "
            f"({a}{a} + {b}{b})/2 (common practice)"
        )
    (a,) = cols
    return f"k = 3/2 {a}{a}: one component, assuming isotropy (common practice)"


#: reported half-width = INTERVAL_INFLATION x t x stderr: estimated errors at the moment a
#: sequential rule stops are still a little low (REFERENCES §11 inflates by 1.1 for the same
#: reason); without it the stops covered 0.935-0.955 per statistic (bench_stopping.py)
INTERVAL_INFLATION = 1.05
#: ... from this many blocks up; with fewer blocks the widening grows (_inflation)
INFLATION_BLOCKS = 256

#: degrees of freedom of the lugsail variance per block: its relative variance is 5/(n - 1)
#: where a plain blocking variance has 2/(n - 1) (blocking.choose_level), so by
#: Satterthwaite's rule (Satterthwaite 1946, Biometrics Bull. 2:110, from memory) it carries
#: 2 (n - 1) / 5 degrees of freedom, not n - 1
LUGSAIL_DOF = 0.4


@lru_cache(maxsize=4096)
def _t_quantile(p: float, blocks: int) -> float:
    if blocks < 2:
        return math.nan
    return float(special.stdtrit(LUGSAIL_DOF * (blocks - 1), p))


@lru_cache(maxsize=64)
def _t_low_band(p: float, dof: int) -> float:
    """Student t quantile ``p`` on ``dof`` degrees of freedom (the low-band floor's)."""
    return float(special.stdtrit(dof, p))


@lru_cache(maxsize=8)
def _excess_ratio(dof: int, alpha: float) -> float:
    """The upper ``alpha`` point of chi-squared(dof) / dof: a low-band variance above
    blocking's by more than this factor is published as unresolved error."""
    return float(special.chdtri(dof, alpha)) / dof


def _t_quantiles(p: float, blocks: np.ndarray) -> np.ndarray:
    """Student t quantile ``p`` on ``LUGSAIL_DOF (blocks - 1)`` degrees of freedom, NaN below
    2 blocks.

    ``scipy.special.stdtrit`` is the function under ``scipy.stats.t.ppf`` (same values). The
    statistics of a point share a handful of block counts and a count recurs at the next
    checkpoints, so each (p, count) is computed once: an inversion costs about 0.7 us, and
    the whole array of them was a fifth of a checkpoint evaluation.
    """
    return np.array([_t_quantile(p, b) for b in blocks.tolist()], dtype=np.float64)


#: the statistics whose interval is formed on the log scale with the skew and kurtosis
#: corrections of :func:`_variance_intervals` (positive, chi-squared-like estimates)
VARIANCE_ROWS = frozenset(("uu", "vv", "ww", "k"))

#: skewness of the block means of a variance-type statistic per sqrt(blocks) x relative
#: standard error, and their excess kurtosis per blocks x relative variance: the long-block
#: limits for a Gaussian series of exponential autocorrelation (see _variance_intervals;
#: a chi-squared count, equal weights, would give 2 and 6, the least at a given variance)
BLOCK_SKEW = 3.0
BLOCK_KURTOSIS = 15.0
#: the log-scale interval is used up to this half-width on the log scale (w t SE / value);
#: beyond it the plain symmetric interval (_variance_intervals)
MAX_LOG_HALF_WIDTH = 0.5
#: a statistic that converged at a checkpoint is no longer shown converged once its interval
#: has grown past this many times its target (the signal changed since; see _estimates)
LAPSE_FACTOR = 1.5


def _inflation(blocks: np.ndarray) -> np.ndarray:
    """The widening of each interval: INTERVAL_INFLATION from INFLATION_BLOCKS blocks up, and
    below that its excess over 1 in proportion to the relative error of the standard error,
    sqrt(5 / (b - 1)) / 2 (never less than before: the finite-block part stays).

    A sequential rule stops on draws whose standard error happens to be low, by a share of
    that error's own noise (REFERENCES §11: "stopping on low-noise draws"); the noise, and
    the shortfall with it, grows as the blocks get fewer. The 5 % was measured where the
    default targets stop (288-512 blocks, 256 after a jump of the level); at 68 blocks (a
    record of a few hundred T_int, where the block length in T_int, not the target, decides
    the stop) it is 10 %. Measured
    there (tests/test_coverage_hard.py, 400 records, T_int = 2000 samples): U outside its
    interval in 3 % of the stops, not 4.25 %; uu 4.5 %, not 5.75 %.

    >>> [round(float(f), 3) for f in _inflation(np.array([68, 256, 4096]))]
    [1.098, 1.05, 1.05]
    """
    b = np.clip(np.asarray(blocks, dtype=np.float64), 2.0, INFLATION_BLOCKS)
    return 1.0 + (INTERVAL_INFLATION - 1.0) * np.sqrt((INFLATION_BLOCKS - 1.0) / (b - 1.0))


def _variance_intervals(p, values, se, blocks, plain, inflation=INTERVAL_INFLATION):
    """``(half_width, shift)``: the interval ``value + shift -+ half_width`` of variance-type
    statistics (positive, chi-squared-like: uu, vv, ww, k); where it cannot be formed (a
    value or standard error of zero, too few blocks) the symmetric ``plain`` half-width.

    With b blocks of B samples each and r = SE / value, the relative variance of one block
    mean is about b r^2 (2 T_int / B for u'^2 of a Gaussian u). A block mean of u'^2 is a
    quadratic form of Gaussians, skewed and heavy-tailed: with the cumulants 2^(p-1) (p-1)!
    tr(C^p) / B^p of such a form and Szegő's limit tr(C^p) ~ B times the integral of S(f)^p
    for an exponential autocorrelation (derived here), its skewness is 3 sqrt(b) r and its
    excess kurtosis 15 b r^2 (BLOCK_SKEW, BLOCK_KURTOSIS; a chi-squared count gives 2 and 6).
    Measured on AR(1), T_int = 2000 samples: skewness 2.55-2.9 sqrt(b) r and kurtosis 9-16
    b r^2 at blocks of 2-16 T_int. At b = 68 blocks of 4 T_int (a record of a few hundred
    T_int) that is skewness 1.7 and kurtosis 3.9, and two things follow:

    * the lugsail variance of such block means is noisier than the Gaussian count assumes:
      with level j - 1's block means white and their kurtosis twice level j's (kappa), the
      relative variance of 2 V_j - V_(j-1) is (5 + kappa) / b, not 5 / b (derived here from
      the fourth cumulants of the two sums of squares), so the t quantile's degrees of
      freedom are LUGSAIL_DOF (b - 1) / (1 + kappa (b - 1) / (5 b)) (Satterthwaite's rule);
    * the estimate and its standard error rise and fall together (a record with less energy
      has both low), so a symmetric interval misses on the low side: 5.35 % below and 0.65 %
      above at nominal 5 % (2000 records of 68 x 8192 samples, T_int = 2000). The interval is
      formed on the log scale, where the standard error no longer scales with the estimate,
      and moved up by the first Edgeworth term of the studentized mean, gamma (2 t^2 + 1) /
      (6 sqrt(b)) standard errors (Hall 1992, The Bootstrap and Edgeworth Expansion, §2.6,
      from memory).

    Measured on the same records, with the widening of _inflation: 1.75 % below and 1.15 %
    above (the half-width 18 % wider there). Stopping on the verdict at T_int = 2000 samples
    (tests/test_coverage_hard.py) uu then missed in 4.5 % of 400 records (6.25 % before). On
    long records r is small and both corrections fade: at the default targets' stop (r ~ 0.02,
    300-500 blocks) the half-width grows under 1 % (benchmarks/bench_stopping.py compare).
    """
    v = np.asarray(values, dtype=np.float64)
    b = np.asarray(blocks, dtype=np.float64)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        r = se / v
        kurt = BLOCK_KURTOSIS * b * r * r
        dof = LUGSAIL_DOF * (b - 1.0) / (1.0 + kurt * (b - 1.0) / (5.0 * b))
        ok = (v > 0.0) & np.isfinite(r) & (b >= 2) & (dof > 0)
        t = np.full(v.shape, np.nan)
        t[ok] = special.stdtrit(dof[ok], p)
        shift_log = BLOCK_SKEW * r * (2.0 * t * t + 1.0) / 6.0 * r
        a = inflation * t * r
        # the corrections are the first terms of expansions in r: beyond a half-width of
        # about half the value (where no target stops) they are no guide, and for r ~ 1 they
        # would put the whole interval far above the value; the plain interval is kept there
        ok &= a <= MAX_LOG_HALF_WIDTH
        lo = v * np.exp(np.where(ok, shift_log - a, 0.0))
        hi = v * np.exp(np.where(ok, shift_log + a, 0.0))
    half = np.where(ok, 0.5 * (hi - lo), plain)
    shift = np.where(ok, 0.5 * (hi + lo) - v, 0.0)
    return half, shift


class Hold(NamedTuple):
    """Why a slow-content guard keeps a targeted statistic from converging at this look."""

    reason: str
    #: the least total record (s) the hold asks for (its ETA)
    need_s: float
    #: only a look's wait (the periodogram test's p below LOOK_ALPHA, not SPECTRAL_ALPHA): the
    #: row keeps its own state and shows the reason; not a `suspect` hold
    wait: bool = False


@dataclass(frozen=True)
class _Evaluation:
    names: tuple[str, ...]
    values: np.ndarray
    stderr: np.ndarray
    blocks: np.ndarray
    se_rel_err: np.ndarray
    half_width: np.ndarray
    suspect: dict
    targets: list  # resolved target of each name: float (NaN: not yet known), None: untargeted
    long_enough: list  # record and blocks long enough against the integral time (bool)
    min_total_s: list  # least record (s) the minimum-record guards ask for
    held: list  # None, or the Hold of a slow-content guard
    no_interval: list  # None, or why no honest interval exists
    unresolved: np.ndarray  # standard error the record does not resolve yet (0 when none)
    #: per name: the blocking level the slow-content test asks for now (-1: none); None when
    #: the evaluation has no such test (random sampling)
    rise_level: list | None = None
    error_method: dict | None = None  # row -> how its error was found, where not by blocking
    #: interval centre minus value per name (None: every interval symmetric about the value)
    shift: np.ndarray | None = None
    #: the widening of each interval (_inflation; None: INTERVAL_INFLATION throughout)
    widening: np.ndarray | None = None


class PointStatistics:
    """Mean, Reynolds stresses, k, third/fourth moments, skewness, flatness, integral time
    scales and effective sample counts of one point, with standard errors and verdicts.

    Parameters
    ----------
    columns
        Velocity component names in column order, e.g. ``("u", "v", "w")``.
    rate_hz
        Uniform sampling rate; None for random sampling (then ``update`` takes ``duration_s``).
    targets
        Tolerances (default: :meth:`Targets.defaults`).
    confidence
        Confidence of reported intervals (default: the targets' confidence).

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(3).normal([8.0, 0.2], [0.5, 0.3], size=(20_000, 2))
    >>> ps = PointStatistics(("u", "v"), rate_hz=1000.0)
    >>> for block in np.array_split(x, 5):
    ...     ps = ps.update(block)
    >>> snap = ps.snapshot()
    >>> ps.n, snap.duration_s
    (20000, 20.0)
    >>> bool(np.isclose(snap.estimate("uv").value, np.cov(x.T, bias=True)[0, 1]))
    True
    >>> # white noise: the standard error of U is numpy's std / sqrt(n), to a few per cent
    >>> se = x[:, 0].std() / np.sqrt(len(x))
    >>> bool(abs(snap.estimate("U").stderr / se - 1) < 0.1)
    True
    """

    def __init__(
        self,
        columns,
        rate_hz: float | None,
        targets: Targets | None = None,
        confidence: float | None = None,
        base: int = DEFAULT_BASE_BLOCK,
        ref=None,
    ):
        self.columns = tuple(columns)
        m = len(self.columns)
        self.rate_hz = None if rate_hz is None else float(rate_hz)
        self.targets = targets if targets is not None else Targets.defaults()
        self.confidence = float(confidence if confidence is not None else self.targets.confidence)
        self.moments = MomentAccumulator(m)
        self.blocking = BlockingAccumulator(m, base=base, ref=ref)
        self.tails = TailAccumulator(m)
        # row means of the whole record for the periodic correction of the means (regular
        # sampling only: the rows need a time axis)
        self.periodic = RowStore(m, ref=ref) if self.rate_hz is not None else None
        self.table = StatisticTable(self.columns, self.moments.layout)
        # the moment statistics (table.names), then Tint_c, Neff_c, L_c: the one name table's order
        self.names = tuple(statistic_names(self.columns))
        # per-name lookups done once: target resolution, components a name depends on
        self._plan = self.targets.plan(self.names)
        self._components = tuple(frozenset(components_of(name)) for name in self.names)
        col = {c: i for i, c in enumerate(self.columns)}
        self._comp_idx = tuple(
            tuple(sorted(col[c] for c in comps if c in col)) or tuple(range(m))
            for comps in self._components
        )
        self._order = tuple(needed_order(family(name)) for name in self.names)
        self._variance_rows = np.array(
            [i for i, name in enumerate(self.names) if name in VARIANCE_ROWS], dtype=np.int64
        )
        self.k_method = k_method(self.columns)
        self._modelled_k = m < 3 and not self.targets.accept_modelled_k
        # Tint_c, Neff_c, L_c take their block count and relative error from the mean C
        self._source = np.r_[np.arange(len(self.table.names)), np.tile(np.arange(m), 3)]
        # the moment rows a checkpoint needs: the targeted statistics (Tint, Neff, L through
        # their mean) and the means, whose errors the stationarity guard uses
        needed = self._source[list(self._plan.targeted)].tolist() + list(range(m))
        self._checkpoint_rows = np.zeros(len(self.table.names), dtype=bool)
        self._checkpoint_rows[needed] = True
        self.checkpoints = Checkpoints()
        self._duration_s = 0.0
        self._cache: _Evaluation | None = None
        self._checkpoint_ev: _Evaluation | None = None  # the last update's checkpoint, if any

    @classmethod
    def empty(cls, columns, rate_hz, targets=None, confidence=None, **kw) -> PointStatistics:
        return cls(columns, rate_hz, targets, confidence, **kw)

    def copy(self) -> PointStatistics:
        """An independent copy (same state, bit for bit)."""
        new = self._like()
        new.moments = self.moments.copy()
        new.blocking = self.blocking.copy()
        new.tails = self.tails.copy()
        new.periodic = None if self.periodic is None else self.periodic.copy()
        new.checkpoints = self.checkpoints.copy()
        new._duration_s = self._duration_s
        return new

    def _like(self) -> PointStatistics:
        """A new, empty point with the same columns, rate, targets, confidence and base."""
        return PointStatistics(
            self.columns, self.rate_hz, self.targets, self.confidence, base=self.blocking.base
        )

    def __getstate__(self):
        # Targets hold read-only mappings, which do not pickle: go through the saved-state form
        from eddyvigil.stats.pointstate import to_state

        return to_state(self)

    def __setstate__(self, state):
        from eddyvigil.stats.pointstate import from_state

        self.__dict__.update(from_state(*state).__dict__)

    def __eq__(self, other) -> bool:
        """Same settings and state, bit for bit (what a saved state holds)."""
        if not isinstance(other, PointStatistics):
            return NotImplemented
        from eddyvigil.stats.pointstate import same_state

        return same_state(self, other)

    __hash__ = None  # mutable

    # ------------------------------------------------------------------ state
    @property
    def n(self) -> int:
        return self.moments.n

    @property
    def duration_s(self) -> float:
        if self.rate_hz is not None:
            return self.n / self.rate_hz
        return self._duration_s

    def update(self, block: np.ndarray, duration_s: float | None = None) -> PointStatistics:
        """Add a block (n, m) of velocity samples in time order; returns self."""
        block = np.asarray(block)
        if block.ndim != 2 or block.shape[1] != len(self.columns):
            raise ValueError(
                f"expected a block of shape (n, {len(self.columns)}), got {block.shape}"
            )
        if block.dtype not in (np.float32, np.float64):
            block = block.astype(np.float64)
        if block.shape[0] == 0:
            return self
        if not np.isfinite(block).all():
            bad = np.flatnonzero(~np.isfinite(block).all(axis=1))
            raise ValueError(
                f"block has non-finite samples (NaN or inf) in {bad.size} of {block.shape[0]} "
                f"rows, first at row {int(bad[0])}; nothing was added"
            )
        if self.rate_hz is None:
            if duration_s is None or not math.isfinite(duration_s) or duration_s < 0:
                raise ValueError("random sampling (rate_hz None) needs the block's duration_s")
            self._duration_s += float(duration_s)
        # one sweep: the blocking kernel also hands the block's central sums to the moments
        self.blocking.update(block, moments=self.moments)
        self.tails.update(block)
        if self.periodic is not None:
            self.periodic.update(block)
        self._cache = None
        self._checkpoint_ev = None
        if self.checkpoints.due(self.n):
            ev = self._evaluate(self._checkpoint_rows)
            self._checkpoint_ev = ev
            results = self._passes(ev)
            trusted = [
                ev.names[i]
                for i in self._plan.targeted
                if trustworthy(
                    int(ev.blocks[i]), ev.se_rel_err[i], ev.half_width[i], ev.long_enough[i]
                )
            ]
            required = [ev.names[i] for i in self._plan.targeted if ev.no_interval[i] is None]
            self.checkpoints.record(self.n, results, self.duration_s, trusted, required)
            self._remember_rise(ev)
        return self

    def _remember_rise(self, ev: _Evaluation) -> None:
        """Keep, per targeted moment row, the highest blocking level a checkpoint's rise test
        asked for: from then on the row's blocks are at least that long (_min_levels), so a
        rise seen once holds the verdict until the record resolves it."""
        if ev.rise_level is None:
            return
        keep = self.checkpoints.slow_level
        for i in self._plan.targeted:
            lvl = ev.rise_level[i]
            if lvl >= 0:
                row = self.names[self._source[i]]
                keep[row] = max(keep.get(row, 0), lvl)

    def merge(self, other: PointStatistics, independent: bool = True) -> PointStatistics:
        """A new object holding both points' samples (inputs untouched).

        Values merge exactly (Pébay); the blocking states are re-centred to ``self``'s
        reference and joined as :meth:`BlockingAccumulator.merge` does: as independent
        records by default (repeats of a point, saved states), or with ``independent=False``
        as ``other`` following ``self`` in time without a break. Settings (targets,
        confidence) are ``self``'s.

        Checkpoint streaks (rule): the merged point takes a checkpoint at its merged sample
        count. Before it, each targeted statistic's streak is the longer of its two streaks,
        since the merged record extends either part; the checkpoint then adds one if the
        statistic passes on the merged state, and restarts the streak at zero if it does not.
        So two converged repeats stay converged only if their union still meets its targets,
        and ``converged_at_s`` is the merged duration when the union is converged. Below the
        first checkpoint's sample count no streak exists and none is carried. Remembered
        slow-content levels (:meth:`_remember_rise`) are carried too, the higher of the two.
        """
        if other.columns != self.columns:
            raise ValueError("cannot merge points with different columns")
        if other.rate_hz != self.rate_hz:
            raise ValueError("cannot merge points sampled at different rates")
        if other.blocking.base != self.blocking.base:
            raise ValueError("cannot merge points with different base blocks")
        new = self._like()
        new.moments = self.moments.merge(other.moments)
        new.blocking = self.blocking.merge(other.blocking, independent=independent)
        new.tails = self.tails.merge(other.tails)
        if self.periodic is not None and other.periodic is not None:
            new.periodic = self.periodic.merge(other.periodic, independent=independent)
        new._duration_s = self._duration_s + other._duration_s
        self._carry_streaks(other, new)
        return new

    def _carry_streaks(self, other: PointStatistics, new: PointStatistics) -> None:
        """The checkpoint rule of :meth:`merge` on the merged point ``new`` (in place)."""
        if new.checkpoints.due(new.n):
            names = self._plan.targeted
            streak = {
                self.names[i]: max(
                    self.checkpoints.streak.get(self.names[i], 0),
                    other.checkpoints.streak.get(self.names[i], 0),
                )
                for i in names
            }
            new.checkpoints.streak.update(streak)
            kept = new.checkpoints.slow_level
            for part in (self, other):
                for row, lvl in part.checkpoints.slow_level.items():
                    kept[row] = max(kept.get(row, 0), lvl)
            ev = new._evaluate(new._checkpoint_rows)
            new._checkpoint_ev = ev
            new.checkpoints.record(new.n, new._passes(ev), new.duration_s)
            new._remember_rise(ev)

    # ------------------------------------------------------------- evaluation
    def _evaluate(self, rows: np.ndarray | None = None) -> _Evaluation:
        """Every statistic, or with ``rows`` (a mask over the moment statistics) only the errors
        of those rows: the others come back NaN and the result is not kept. A checkpoint needs
        the targeted rows alone, and the fourth moments' dense gradients were most of the
        blocking analysis."""
        if self._cache is not None:
            return self._cache
        tab = self.table
        m = len(self.columns)
        names = self.names
        S = len(names)
        nan = np.full(S, np.nan)
        if self.n < 2 or self.blocking.ref is None:
            ev = _Evaluation(
                names,
                nan,
                nan.copy(),
                np.zeros(S, dtype=np.int64),
                nan.copy(),
                nan.copy(),
                {},
                self._plan.resolve(nan.tolist()),
                [False] * S,
                [0.0] * S,
                [None] * S,
                [None] * S,
                np.zeros(S),
            )
            self._cache = ev
            return ev
        ref = self.blocking.ref
        raw = self.moments.raw_about(ref)
        values, grad = tab.values_and_gradient(raw, ref)
        if rows is not None:
            grad = np.where(rows[:, None], grad, 0.0)  # a zero row costs one pass over levels
        curves = self.blocking._autocovariances(grad)  # (c0, gamma, n): one pass, reused
        base = self.blocking.base
        choice = choose_level(*curves, base)
        # append integral time scales, effective sample counts and integral lengths
        values = np.concatenate([values, np.empty(3 * m)])
        se = np.empty(S)
        integral_scales(self.duration_s, choice.variance, choice.relative_error, m, values, se)
        # blocks at least MIN_BLOCK_TINTS integral times long (the lugsail estimate is 6 % low
        # in variance at 4 T_int for an exponential correlation, 23 % low at 2 T_int): raise
        # the level where Jonsson's choice is shorter, and evaluate again (at most twice); the
        # same floor keeps the rise test's reference above the short correlation
        floor = None
        for _ in range(2):
            floors = self._min_levels(values, choice)
            if floors is None or (floor is not None and np.array_equal(floors[0], floor)):
                break
            floor = floors[0]
            choice = choose_level(*curves, base, *floors)
            integral_scales(
                self.duration_s, choice.variance, choice.relative_error, m, values, se
            )
        se_blocking = se[:m].tolist()  # the stationarity guard's scale: the line is in segments
        plain = choice
        choice, methods = self._periodic(values, choice, se, rows)
        blocks = self._by_row(choice, plain, "blocks")
        rel = self._by_row(choice, plain, "relative_error")
        p = 0.5 * (1.0 + self.confidence)
        infl = _inflation(blocks)
        hw = infl * _t_quantiles(p, blocks) * se
        shift = np.zeros(S)
        vr = self._variance_rows
        if vr.size:
            hw[vr], shift[vr] = _variance_intervals(
                p, values[vr], se[vr], blocks[vr], hw[vr], infl[vr]
            )
        low_band = self._low_band_floor(p, se, hw, methods)
        suspect = {}
        verdicts = assess_columns(self.blocking.segment_means(), se_blocking)
        for c, verdict in zip(self.columns, verdicts, strict=True):
            if not verdict.stationary:
                suspect[c] = verdict.reason or "not stationary"
        targets = self._plan.resolve(values.tolist())
        enough, least, held, no_interval, unresolved, rise = self._guards(
            values, se, hw, choice, plain, targets
        )
        for c, part in low_band.items():  # the means' rows come first
            unresolved[c] = max(unresolved[c], part)
        ev = _Evaluation(names, values, se, blocks, rel, hw, suspect, targets, enough, least,
                         held, no_interval, unresolved, rise, error_method=methods,
                         shift=shift, widening=infl)
        if rows is None:
            self._cache = ev
        return ev

    def _periodic(self, values, choice, se, rows=None):
        """The errors of the means and second moments with identified lines taken out
        (stats.periodic), in place of blocking's for the rows with a line: ``(choice, {row:
        method})``; unchanged (the same ``choice``, ``{}``) when no line is found. Tint, N_eff
        and L keep the blocking variance. ``rows``: the moment rows evaluated (None: all)."""
        if self.periodic is None:
            return choice, {}
        m = len(self.columns)
        k_stats = len(self.table.names)
        tint = values[k_stats : k_stats + m].tolist()
        fixes = self.periodic.mean_errors(1.0 / self.rate_hz, tint, MIN_BLOCK_TINTS)
        fixes.update(self._periodic_second(tint, rows))
        if not fixes:
            return choice, {}
        fields = {
            f: np.array(getattr(choice, f), copy=True)
            for f in (
                "variance", "level", "blocks", "block_samples", "relative_error",
                "top_variance", "slow_block_samples",
            )
        }
        methods = {}
        for c, err in fixes.items():
            for f, a in fields.items():
                a[c] = getattr(err, f)
            se[c] = math.sqrt(err.variance)
            methods[c] = method_text(err, self.rate_hz)
        return type(choice)(**fields), methods

    def _low_band_floor(self, p, se, hw, methods) -> dict:
        """Each mean's interval at least the low-band one: Student-t on LOW_BAND_TERMS degrees
        of freedom times the square root of stats.slow_spectrum.low_band_variance of the whole
        record's row means. Where that is wider, ``hw`` takes it (in place) and the row's
        unresolved standard error, the low-band variance's excess over blocking's (``se``,
        the resolved part, unchanged), is returned as ``{row: unresolved}`` where that excess
        is significant (above :func:`_excess_ratio` times blocking's variance). Regular sampling
        with a time axis only; a mean whose line was taken out (``methods``) keeps its
        error; so does one without a blocking interval yet (NaN)."""
        rows = self.periodic
        nu = slow_spectrum.LOW_BAND_TERMS  # read here: 0 turns the floor off (benchmarks)
        if rows is None or not rows.clock or nu < 1:
            return {}
        t = _t_low_band(p, nu)
        out = {}
        for c in range(len(self.columns)):
            if c in methods:
                continue
            var = low_band_variance(rows.rows[: rows.full, c], nu)
            if not var > 0.0 or not t * math.sqrt(var) > hw[c]:
                continue
            if var > _excess_ratio(nu, slow_spectrum.EXCESS_ALPHA) * se[c] ** 2:
                out[c] = math.sqrt(max(var - se[c] ** 2, 0.0))
            hw[c] = t * math.sqrt(var)
        return out

    def _periodic_second(self, tint, rows=None) -> dict:
        """``{row: MeanError}`` for the second-moment rows (gradient on monomials of degree
        <= 2 only, e.g. uu, uv, k) whose components carry a line (RowStore.second_errors);
        ``rows``: the moment rows evaluated (None: all; a checkpoint's, the others skipped)."""
        st = self.periodic
        if st.ref is None or np.isnan(st.lines).all():
            return {}
        m = len(self.columns)
        off = self.moments.layout.mono_offset
        _, grad = self.table.values_and_gradient(self.moments.raw_about(st.ref), st.ref)
        grads, scales = {}, {}
        for r in range(m, grad.shape[0]):
            if rows is not None and not rows[r]:
                continue
            g2 = grad[r, off[1] : off[2]]
            if g2.any() and not grad[r, off[2] :].any() and np.isfinite(grad[r, : off[2]]).all():
                grads[r] = (grad[r, :m], g2)
                scales[r] = self._slowest_scale(tint, self._comp_idx[r])
        return st.second_errors(grads, 1.0 / self.rate_hz, scales, MIN_BLOCK_TINTS)

    def _slowest_scale(self, tint, comps) -> float:
        """The integral time (s) that statistic rows with components ``comps`` must respect:
        the longest of their components', and at least the user's slowest facility period."""
        t = max(tint[c] for c in comps)
        period = self.targets.slowest_period_s
        return t if period is None or not t < period else period

    def _min_levels(self, values, choice) -> tuple[np.ndarray, np.ndarray] | None:
        """Lowest blocking level of each moment row whose blocks are MIN_BLOCK_TINTS integral
        times long, and at least the level a rise test asked for (_remember_rise), and the
        former alone (the rise test's reference floor); None when every floor is level 0."""
        m = len(self.columns)
        k_stats = len(self.table.names)
        if self.n < 2 or self.duration_s <= 0:
            return None
        tint = values[k_stats : k_stats + m].tolist()
        per_sample = self.duration_s / self.n
        base = self.blocking.base
        out = np.zeros(k_stats, dtype=np.int64)
        ref = np.zeros(k_stats, dtype=np.int64)
        raise_any = False
        levels = choice.level.tolist()
        rise = self.checkpoints.slow_level
        for r in range(k_stats):
            if levels[r] < 0:
                continue
            t = self._slowest_scale(tint, self._comp_idx[r])
            lvl = rise.get(self.names[r], 0) if rise else 0
            if math.isfinite(t) and t > 0.0:
                need = MIN_BLOCK_TINTS * t / per_sample / base  # in base blocks
                ref[r] = math.ceil(math.log2(need)) if need > 1.0 else 0
                lvl = max(lvl, ref[r])
            if lvl > 0:
                out[r] = lvl
                raise_any = True
        return (out, ref) if raise_any else None

    def _by_row(self, choice, plain, field: str) -> np.ndarray:
        """``field`` of the level choice for every statistic: the moment rows from ``choice``
        (the means possibly with a line taken out), Tint, N_eff and L from blocking's
        ``plain`` choice of their mean."""
        k = len(self.table.names)
        out = getattr(choice, field)[self._source]
        if choice is not plain:
            out[k:] = getattr(plain, field)[self._source[k:]]
        return out

    def _guards(self, values, se, hw, choice, plain, targets):
        """Minimum record, slow content and tails for every statistic (see _Evaluation).

        Slow content holds a statistic while the rise test fires now, and while its blocks
        are not yet MIN_BLOCKS at the level a past rise asked for (_remember_rise). Sets the
        half-width of rows without an honest interval to NaN (in place).
        """
        m = len(self.columns)
        k_stats = len(self.table.names)
        T = self.duration_s
        n = max(self.n, 1)
        tint = values[k_stats : k_stats + m].tolist()  # Tint of each component, s
        alpha = self.tails.tail_index(values[:m]).tolist()
        need_user = self.targets.required_record_s
        block_samples = self._by_row(choice, plain, "block_samples").tolist()
        slow_samples = self._by_row(choice, plain, "slow_block_samples").tolist()
        top = self._by_row(choice, plain, "top_variance").tolist()
        var = self._by_row(choice, plain, "variance").tolist()
        hw_list = hw.tolist()
        block_counts = self._by_row(choice, plain, "blocks").tolist()
        base = self.blocking.base
        remembered = self.checkpoints.slow_level
        S = len(self.names)
        rows = self.periodic
        maybe, spectral = {}, set()
        if rows is not None and rows.clock and self.blocking.count[1] >= MIN_BLOCKS_PER_LEVEL:
            # the whole record's lowest frequencies (stats.slow_spectrum) for each targeted
            # mean the blocking test did not hold: a rise asks for blocks as a blocking one;
            # a weaker one keeps a mean not yet converged from converging at this look
            # (its flat band ends below the slowest scale: a stated facility period too)
            for c in range(m):
                t_c = self._slowest_scale(tint, (c,))
                if targets[c] is None or slow_samples[c] > 0 or not t_c > 0:
                    continue
                p = low_frequency_rise(rows.rows[: rows.full, c], rows.row_len, t_c * n / T)
                # a rise remembered already is not raised by it (it does not size the scale:
                # a clean record's chance excess would otherwise ask for ever longer blocks)
                if p < SPECTRAL_ALPHA and not remembered.get(self.names[c]):
                    level = int(choice.level[c])
                    slow_samples[c] = int(rise_block_samples(self.blocking.count, base, level))
                    top[c] = var[c]  # the periodogram does not size the unresolved part
                    spectral.add(c)
                elif p < LOOK_ALPHA and not self.checkpoints.is_converged(self.names[c]):
                    maybe[c] = p
        rise_level = [-1] * S
        long_enough, min_total, held, no_interval = [], [], [], []
        unresolved = np.zeros(S)
        for i in range(S):
            comps = self._comp_idx[i]
            t_i = self._slowest_scale(tint, comps)
            ok_t = math.isfinite(t_i) and t_i > 0.0
            block_s = block_samples[i] * T / n
            need = max(need_user, (MIN_RECORD_TINTS * t_i) if ok_t else 0.0)
            need = max(need, (MIN_BLOCKS * MIN_BLOCK_TINTS * t_i) if ok_t else 0.0)
            long_enough.append(ok_t and T >= need and block_s >= MIN_BLOCK_TINTS * t_i)
            min_total.append(need)
            reason = None
            lvl = remembered.get(self.names[self._source[i]], 0) if remembered else 0
            if slow_samples[i] > 0 or (lvl and block_counts[i] < MIN_BLOCKS):
                rise_level[i] = (slow_samples[i] // base).bit_length() - 1
                slow_s = max(slow_samples[i], base << lvl) * T / n
                expect = MIN_BLOCKS * slow_s
                if slow_samples[i] > 0:
                    unresolved[i] = math.sqrt(max(top[i] - var[i], 0.0))
                    target = targets[i]
                    if target is not None and math.isfinite(target) and target > 0 and se[i] > 0:
                        ratio = STOP_MARGIN * hw_list[i] / target
                        expect = max(expect, T * ratio**2 * top[i] / var[i])
                need = f"{MIN_BLOCKS} blocks of {slow_s:.3g} s are needed"
                if i in spectral:
                    said = f"is not yet resolved (the record's lowest frequencies rise; {need})"
                elif unresolved[i] > 0:
                    said = (f"is not yet resolved (the blocking curve rises up to blocks of "
                            f"{slow_s:.3g} s; {need})")
                else:
                    # the chosen level already holds the rise: the error is sized, by too few
                    # blocks to trust (nothing is shown unresolved)
                    said = (f"rests on too few blocks (the blocking curve rises up to blocks "
                            f"of {slow_s:.3g} s; {need})")
                reason = Hold(
                    f"slow content: the error of {self.names[i]} {said}: expect >= "
                    f"{expect:.3g} s",
                    expect,
                )
            if reason is None and i in maybe:
                # a look's wait, not a hold: the row keeps its state (shown converging, not
                # suspect: clean records see it at 5 % of looks) with this reason
                # (below SPECTRAL_ALPHA with a level remembered already it is a hold again)
                reason = Hold(
                    f"slow content? the lowest frequencies of {self.names[i]} stand above its "
                    f"flat spectrum (p = {maybe[i]:.2g}); not converged while they do",
                    T * CHECKPOINT_GROWTH,
                    wait=maybe[i] >= SPECTRAL_ALPHA,
                )
            held.append(reason)
            why = None
            a = min(alpha[c] for c in comps)
            q = self._order[i]
            if a <= TAIL_MARGIN * q:
                worst = self.columns[min(comps, key=lambda c: alpha[c])]
                why = (
                    f"no honest interval: tails too heavy (tail index {a:.1f} for {worst}; "
                    f"the error needs moments of order {q})"
                )
            elif self._modelled_k and self.names[i] == "k":
                why = (
                    f"no honest interval: {self.k_method}; the assumption's error is unknown "
                    "(set accept_modelled_k = true in the targets file to accept it)"
                )
            no_interval.append(why)
            if why is not None:
                hw[i] = math.nan
                se[i] = math.nan
        return long_enough, min_total, held, no_interval, unresolved, rise_level

    def _stationary(self, i: int, suspect: dict) -> bool:
        """True when no component statistic ``i`` depends on is flagged in ``suspect``."""
        return not (suspect and self._components[i] & suspect.keys())

    def _passes(self, ev: _Evaluation) -> dict[str, bool | None]:
        """Pass/fail of each targeted statistic at a checkpoint; None (the streak neither
        grows nor restarts) when the only shortfall is the block count of a level that just
        jumped: a statistic trusted before, with every other condition met and still
        ETA_MIN_BLOCKS blocks (a jump of the chosen level halves the block count or more,
        and with it the SE's own relative error)."""
        hw, blocks, rel = ev.half_width.tolist(), ev.blocks.tolist(), ev.se_rel_err.tolist()
        trusted = self.checkpoints.trusted
        out = {}
        for i in self._plan.targeted:
            name = ev.names[i]
            ok_guards = self._stationary(i, ev.suspect) and ev.held[i] is None
            ok_record = ev.long_enough[i] and ev.no_interval[i] is None
            ok = passes(hw[i], ev.targets[i], blocks[i], rel[i], ok_guards, ok_record)
            if (
                not ok
                and name in trusted
                and blocks[i] >= ETA_MIN_BLOCKS
                and passes(hw[i], ev.targets[i], MIN_BLOCKS, 0.0, ok_guards, ok_record)
            ):
                ok = None
            out[name] = ok
        return out

    def snapshot(self) -> PointSnapshot:
        """An immutable view of every statistic now."""
        return self._snapshot(self._evaluate(), range(len(self.names)))

    def targeted_snapshot(self) -> PointSnapshot:
        """:meth:`snapshot` restricted to the targeted statistics (same digits, same verdict).

        Right after an :meth:`update` that reached a checkpoint it is built from that
        checkpoint's own evaluation, so it costs a few tens of microseconds where a full
        snapshot evaluates and builds every statistic.
        """
        ev = self._cache or self._checkpoint_ev or self._evaluate(self._checkpoint_rows)
        return self._snapshot(ev, self._plan.targeted)

    def _snapshot(self, ev: _Evaluation, indices) -> PointSnapshot:
        T = self.duration_s
        estimates = []
        all_conv = True
        any_target = False
        values, stderr = ev.values.tolist(), ev.stderr.tolist()
        half_width, block_counts = ev.half_width.tolist(), ev.blocks.tolist()
        se_rel_err = ev.se_rel_err.tolist()
        unresolved = ev.unresolved.tolist()
        shifts = [0.0] * len(values) if ev.shift is None else ev.shift.tolist()
        widening = (
            [INTERVAL_INFLATION] * len(values) if ev.widening is None else ev.widening.tolist()
        )
        methods = ev.error_method or {}
        cp = self.checkpoints
        for i in indices:
            name = ev.names[i]
            v, se, hw = values[i], stderr[i], half_width[i]
            blocks = block_counts[i]
            target = ev.targets[i]
            bad = sorted(self._components[i] & ev.suspect.keys()) if ev.suspect else []
            reason = None
            trusted = trustworthy(blocks, se_rel_err[i], hw, ev.long_enough[i])
            if ev.no_interval[i] is not None:
                # no honest interval: never converged, and the point's verdict does not wait
                converged, eta = (None if target is None else False), None
                state, reason = "no-interval", ev.no_interval[i]
            elif target is None:
                converged, eta = None, None
                state = "suspect" if bad else "untargeted"
                if bad:
                    reason = "; ".join(f"{c}: {ev.suspect[c]}" for c in bad)
            else:
                any_target = True
                held = bool(bad) or ev.held[i] is not None
                converged = cp.is_converged(name) and not held
                # the streak is judged at checkpoints; between them (and at the point's end)
                # an interval that has grown far past its target is not shown converged
                lapsed = converged and hw > LAPSE_FACTOR * target
                converged = converged and not lapsed
                streak = cp.streak.get(name, 0)
                eta = (
                    0.0
                    if converged
                    # the widening falls to INTERVAL_INFLATION as blocks come (_inflation)
                    else eta_seconds(
                        hw * INTERVAL_INFLATION / widening[i],
                        target, blocks, T, streak, ev.min_total_s[i],
                    )
                )
                wait = ev.held[i] is not None and ev.held[i].wait
                if bad:
                    state, reason = "suspect", "; ".join(f"{c}: {ev.suspect[c]}" for c in bad)
                elif ev.held[i] is not None and not wait:
                    state, reason, slow_need = "suspect", ev.held[i].reason, ev.held[i].need_s
                    eta = max(slow_need - T, eta or 0.0)
                elif lapsed:
                    state = "suspect"
                    reason = (
                        f"the interval has grown to {hw / target:.1f} times its target since it "
                        f"converged: the signal changed"
                    )
                elif converged:
                    state = "converged"
                elif not trusted:
                    reason = self._untrusted_reason(i, ev, blocks, se_rel_err[i], hw)
                    state = "converging" if name in cp.trusted else "warming-up"
                elif streak > 0:
                    state = "confirming"
                else:
                    state = "converging"
                if wait and reason is None:
                    reason = ev.held[i].reason
                if not converged:
                    all_conv = False
            estimates.append(
                Estimate(
                    name=name,
                    value=v,
                    stderr=se,
                    ci_low=v + shifts[i] - hw,
                    ci_high=v + shifts[i] + hw,
                    half_width=hw,
                    target=None if target is None else float(target),
                    converged=converged,
                    eta_s=eta,
                    state=state,
                    blocks=blocks,
                    reason=reason,
                    unresolved=unresolved[i],
                    error_method=methods.get(i),
                )
            )
        converged = any_target and all_conv
        return PointSnapshot(
            columns=self.columns,
            samples=self.n,
            duration_s=T,
            confidence=self.confidence,
            estimates=tuple(estimates),
            converged=converged,
            converged_at_s=self.checkpoints.converged_at_s if converged else None,
            k_method=self.k_method,
            suspect=ev.suspect,
        )

    def _untrusted_reason(self, i, ev, blocks, se_rel_err, hw) -> str:
        """Why the error bar of statistic ``i`` is not trustworthy yet (one short sentence)."""
        if blocks < MIN_BLOCKS or not math.isfinite(hw):
            return f"{blocks} blocks at the chosen level, {MIN_BLOCKS} needed"
        if se_rel_err > 0.15:
            return "the standard error itself is not yet known well enough"
        return (
            f"record too short: {MIN_RECORD_TINTS} integral times and blocks of "
            f"{MIN_BLOCK_TINTS} needed (about {ev.min_total_s[i]:.3g} s in all)"
        )
