"""Stationarity guard: is the mean of a velocity component drifting during the point?

A drifting run makes every convergence verdict a lie, so each point keeps 32-63 equal-length
segment means per component (each segment a few blocking block sizes long, so the means are
nearly independent) and the blocking standard error of the whole-record mean. :func:`assess`
combines tests on them:

- reverse arrangements (Bendat & Piersol 2010, *Random Data*, 4th ed., §4.5.2 / Table A.7):
  A = #{i < j : x_i > x_j}, two-sided, exact acceptance region from the Mahonian distribution.
  Distribution-free, and blind to the error-bar estimate, so it is not weakened when a drift
  inflates the blocking standard error.
- half against half: the difference of the first-half and second-half means over its standard
  error sqrt(SE^2 (N/N1 + N/N2)), from the whole-record blocking SE. Sensitive to steps.
- least-squares trend: the slope of the segment means against their index, over the standard
  error the whole-record SE implies for it (segment-mean variance N SE^2).

Tuning (seeded simulation; ``tests/test_stationarity.py`` reproduces it). The point's owner
calls :func:`assess` once per velocity component, so a record of three components is flagged
when any of them is. Model: N = 32, 40, 48, 56, 63 segment means, AR(1) with lag-1 correlation
phi (the residual correlation of segments a few block sizes long), the standard error estimated
by batch means of the same segments (relative error 9-13 %, and inflated by a drift by about
D^2/(12 N), as the blocking SE is); drift: one component's mean moves linearly by D = 15 true
standard errors of the whole-record mean from start to end.

Single tests, per-component levels chosen for ~2-3 % false flags per 3-component record
(4000 records per N): reverse arrangements alone (alpha 0.01): 2.6-3.1 % false, 91-93 % power;
half against half alone (|z| > 2.6): 2.0-2.5 % false, only 73-82 % power; a trend z on the
blocking SE (|z| > 2.8): 0.9-1.4 % false, 85-90 % power (the drift inflates that SE); the
regression t on the residual scatter (alpha 0.008): 2.1-2.4 % false, 93-94 % power. For
comparison, an oracle knowing the true SE reaches about 95.5 % at 2.5 % false, so little is
left to gain from 32-63 segment means.

Chosen: regression t at alpha = 0.007 (two-sided, t with N - 2 degrees of freedom), reverse
arrangements at alpha/4 and half against half at alpha/4 (|z| > 3.13) as backstops for
monotone non-linear drifts and steps. 10 000 records each:

=========  ====================  ==========================
phi        stationary flagged    15-SE drift of one flagged
=========  ====================  ==========================
0          1.95 %                92.4 %
0.05       2.9 %                 94.6 %
0.1        4.3 %                 96.1 %
=========  ====================  ==========================

So the requirement (<= 5 % false, >= 90 % power) holds; the aim of >= 95 % power is reached
only once the segments carry a little correlation (which also makes the SE-true drift larger
against the segment scatter). Segments correlated well beyond phi = 0.1 raise the false-flag
rate of the regression and reverse-arrangement tests: keep segments >= 2 block sizes long.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from fractions import Fraction
from functools import lru_cache
from itertools import accumulate
from types import MappingProxyType

import numpy as np

from eddyvigil.stats.kernels import inversions, trend_and_halves

__all__ = [
    "reverse_arrangements",
    "reverse_arrangement_acceptance",
    "mahonian_counts",
    "half_difference_z",
    "trend_t",
    "StationarityVerdict",
    "assess",
    "assess_columns",
    "MIN_SEGMENTS",
    "EXACT_LIMIT",
    "DEFAULT_ALPHA",
]

#: Default level of the trend test (module docstring: the tuning).
DEFAULT_ALPHA = 0.007

#: Above this many values the acceptance region comes from the normal approximation.
EXACT_LIMIT = 200

#: Fewer segment means than this give no verdict (stationary, reason "not enough segments").
MIN_SEGMENTS = 20


def reverse_arrangements(x: np.ndarray) -> int:
    """Number of reverse arrangements ``A = #{i < j : x_i > x_j}`` (ties do not count).

    Bendat & Piersol (2010), *Random Data*, worked example:

    >>> reverse_arrangements(np.array([5, 3, 8, 1, 9, 2, 7, 4, 6, 0]))
    26
    """
    a = np.asarray(x, dtype=np.float64).ravel()
    if a.size < 2:
        return 0
    out = np.empty(1, dtype=np.int64)
    inversions(np.ascontiguousarray(a.reshape(-1, 1)), out)
    return int(out[0])


@lru_cache(maxsize=256)
def mahonian_counts(n: int) -> tuple[int, ...]:
    """Exact counts of permutations of ``n`` items by number of inversions (A = 0 .. n(n-1)/2).

    Dynamic programme: inserting item i into a permutation of i - 1 items adds 0..i-1
    inversions, so the counts are a running-window sum (integers, no rounding).

    >>> mahonian_counts(4)
    (1, 3, 5, 6, 5, 3, 1)
    """
    if n < 0:
        raise ValueError(f"n must be >= 0, got {n}")
    if n <= 1:
        return (1,)
    # built on the cached row for n - 1, so all rows up to n cost one pass in total
    counts = mahonian_counts(n - 1)
    prefix = list(accumulate(counts, initial=0))
    last = len(counts) - 1
    width = len(counts) + n - 1
    return tuple(prefix[min(k, last) + 1] - prefix[max(0, k - n + 1)] for k in range(width))


@lru_cache(maxsize=1024)
def reverse_arrangement_acceptance(n: int, alpha: float) -> tuple[int, int]:
    """Exact two-sided acceptance region ``lo < A <= hi`` for ``n`` independent values.

    ``lo`` is the largest a with P(A <= a) <= alpha/2 (-1 if none), ``hi`` the smallest a with
    P(A > a) <= alpha/2; the Mahonian distribution is symmetric, so hi = n(n-1)/2 - lo - 1.
    Check values (REFERENCES §6, alpha = 0.05):

    >>> [reverse_arrangement_acceptance(n, 0.05) for n in (10, 20, 30, 100)]
    [(11, 33), (64, 125), (162, 272), (2145, 2804)]
    """
    if not (0.0 < alpha < 1.0):
        raise ValueError(f"alpha must be in (0, 1), got {alpha}")
    n = int(n)
    top = n * (n - 1) // 2
    if n > EXACT_LIMIT:
        # Normal approximation (Kendall): mu = n(n-1)/4, var = n(2n+5)(n-1)/72.
        from scipy.stats import norm

        mu = n * (n - 1) / 4.0
        sd = math.sqrt(n * (2 * n + 5) * (n - 1) / 72.0)
        lo = math.floor(mu - norm.isf(alpha / 2.0) * sd - 0.5)
        return lo, top - lo - 1
    counts = mahonian_counts(n)
    total = math.factorial(int(n))
    # Exact rational comparison: alpha given as 0.05 means 1/20, not the nearest double.
    half = Fraction(repr(float(alpha))) / 2
    lo, cum = -1, 0
    for a, c in enumerate(counts):
        cum += c
        # cum / total <= half, in integers (no Fraction per step: 30x faster at n = 63)
        if cum * half.denominator <= half.numerator * total:
            lo = a
        else:
            break
    return lo, top - lo - 1 if lo >= 0 else top


def _column_tests(x: np.ndarray):
    """(t, slope, first-half mean, second-half mean, reverse arrangements) per column of x."""
    x = np.ascontiguousarray(x, dtype=np.float64)
    k = x.shape[1]
    t, slope, first, second = (np.empty(k) for _ in range(4))
    trend_and_halves(x, t, slope, first, second)
    inv = np.empty(k, dtype=np.int64)
    inversions(x, inv)
    return t, slope, first, second, inv


def _half_z(n: int, first: float, second: float, se: float) -> float:
    """Halves of N1 = N2 = n // 2 values each, their means' difference over its SE."""
    h = n // 2
    sd = se * math.sqrt(n / h + n / h)
    return float((second - first) / sd)


def half_difference_z(segment_means: np.ndarray, stderr_of_mean: float) -> float:
    """Second-half mean minus first-half mean, in standard errors of that difference.

    With N segments and halves of N1 = N2 = floor(N/2) segments (the middle one dropped when
    N is odd), each half mean has variance SE^2 N/N_h when SE is the standard error of the
    whole-record mean and the segments are independent, so
    Var(m2 - m1) = SE^2 (N/N1 + N/N2). NaN when there are fewer than 2 segments or SE is not
    positive and finite.

    >>> half_difference_z(np.array([0.0, 0.0, 1.0, 1.0]), 0.25)
    2.0
    """
    m = np.asarray(segment_means, dtype=np.float64).ravel()
    se = float(stderr_of_mean)
    if m.size < 2 or not (math.isfinite(se) and se > 0.0):
        return math.nan
    _, _, first, second, _ = _column_tests(m.reshape(-1, 1))
    return _half_z(m.size, first[0], second[0], se)


def trend_t(segment_means: np.ndarray) -> float:
    """Least-squares slope of the segment means against their index, over its standard error.

    The ordinary regression t statistic (N - 2 degrees of freedom): the scatter is taken from
    the residuals about the fitted line, so a drift does not inflate it the way it inflates the
    blocking standard error of the whole-record mean. NaN with fewer than 3 segments or a
    perfect fit.

    >>> round(trend_t(np.array([0.0, 1.0, 1.0, 3.0])), 6)
    3.40168
    """
    m = np.asarray(segment_means, dtype=np.float64).ravel()
    if m.size < 3:
        return math.nan
    t, _, _, _, _ = _column_tests(m.reshape(-1, 1))
    return float(t[0])


@lru_cache(maxsize=256)
def _t_critical(dof: int, alpha: float) -> float:
    from scipy.stats import t as student_t

    return float(student_t.isf(alpha / 2.0, dof))


@lru_cache(maxsize=64)
def _z_critical(alpha: float) -> float:
    from scipy.stats import norm

    return float(norm.isf(alpha / 2.0))


@dataclass(frozen=True, slots=True)
class StationarityVerdict:
    """Outcome of :func:`assess` for one component of one point.

    ``reason`` is a sentence for the user when ``stationary`` is False, else None;
    ``details`` holds the test statistics (read-only), or ``{"reason": "not enough segments"}``
    when no verdict could be reached.
    """

    stationary: bool
    reason: str | None = None
    details: Mapping = field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "details", MappingProxyType(dict(self.details)))


def _no_verdict(n: int, why: str) -> StationarityVerdict:
    return StationarityVerdict(
        True, None, {"reason": "not enough segments", "why": why, "segments": n}
    )


def assess(
    segment_means: np.ndarray, stderr_of_mean: float, *, alpha: float = DEFAULT_ALPHA
) -> StationarityVerdict:
    """Is this component's mean stationary over the point? Never raises on bad input.

    Parameters
    ----------
    segment_means
        Means of N equal-length consecutive segments, in time order (N >= 20 for a verdict).
    stderr_of_mean
        Blocking standard error of the whole-record mean. Only the half-against-half test uses
        it; when it is not positive and finite that test is left out.
    alpha
        Level of the trend test; the reverse-arrangement and half-against-half tests run at
        alpha/4 each (module docstring: the tuning).

    Returns
    -------
    StationarityVerdict
        ``stationary=False`` when any test rejects, with a ``reason`` naming every failed test.
    """
    try:
        m = np.asarray(segment_means, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        return _no_verdict(0, "segment means are not numbers")
    return assess_columns(m.reshape(-1, 1), (stderr_of_mean,), alpha=alpha)[0]


def assess_columns(
    segment_means: np.ndarray, stderrs_of_mean, *, alpha: float = DEFAULT_ALPHA
) -> tuple[StationarityVerdict, ...]:
    """:func:`assess` of every column of ``segment_means`` (N, k), column ``c`` with the
    standard error ``stderrs_of_mean[c]``; the test statistics of all columns in one pass."""
    x = np.asarray(segment_means, dtype=np.float64)
    n, k = x.shape
    if n < MIN_SEGMENTS:
        return (_no_verdict(n, f"{n} segments, {MIN_SEGMENTS} needed"),) * k
    finite = np.isfinite(x).all(axis=0).tolist()
    if not (isinstance(alpha, (int, float)) and 0.0 < alpha < 1.0):
        why = f"alpha must be in (0, 1), got {alpha!r}"
        return tuple(_no_verdict(n, why if ok else "non-finite segment means") for ok in finite)
    alpha = float(alpha)
    ts, slopes, firsts, seconds, invs = _column_tests(x)
    t_crit = _t_critical(n - 2, alpha)
    lo, hi = reverse_arrangement_acceptance(n, alpha / 4.0)
    z_crit = _z_critical(alpha / 4.0)
    out = []
    for c in range(k):
        if not finite[c]:
            out.append(_no_verdict(n, "non-finite segment means"))
            continue
        try:
            se = float(stderrs_of_mean[c])
        except (TypeError, ValueError):
            se = math.nan
        se_ok = math.isfinite(se) and se > 0.0
        if float(np.ptp(x[:, c])) == 0.0:
            # every segment mean equal (a constant signal): nothing drifts, and the rank tests
            # would count 0 reverse arrangements and call it a trend
            out.append(StationarityVerdict(True, None, {"segments": n, "constant": True}))
            continue
        failed = []
        reasons = []
        # Least-squares trend, the main test (highest power against a linear drift).
        t = float(ts[c])
        drift_se = math.nan
        if math.isfinite(t):
            if se_ok:
                drift_se = float(slopes[c]) * n / se
            if abs(t) > t_crit:
                failed.append("trend")
                if se_ok:
                    reasons.append(
                        f"trend: mean drifts by {drift_se:+.1f} standard errors over the record "
                        f"(slope t = {t:.1f}, limit {t_crit:.1f})"
                    )
                else:
                    reasons.append(
                        f"trend: slope t = {t:.1f} over {n} segments (limit {t_crit:.1f})"
                    )
        # Reverse arrangements: distribution-free, catches monotone drifts of any shape.
        a = int(invs[c])
        if not lo < a <= hi:
            failed.append("reverse_arrangements")
            reasons.append(f"trend: {a} reverse arrangements outside ({lo}, {hi}]")
        # First half against second half with the blocking SE: catches steps.
        z = _half_z(n, firsts[c], seconds[c], se) if se_ok else math.nan
        if math.isfinite(z) and abs(z) > z_crit:
            failed.append("halves")
            reasons.append(f"halves differ by {abs(z):.1f} standard errors (limit {z_crit:.1f})")

        details = {
            "segments": n,
            "alpha": alpha,
            "trend_t": t,
            "trend_t_limit": t_crit,
            "drift_se": drift_se,
            "reverse_arrangements": a,
            "acceptance": (lo, hi),
            "half_z": z,
            "half_z_limit": z_crit,
            "failed": tuple(failed),
        }
        if failed:
            out.append(StationarityVerdict(False, "; ".join(reasons), details))
        else:
            out.append(StationarityVerdict(True, None, details))
    return tuple(out)
