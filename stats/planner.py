"""Sharing the facility time left among the points still to measure.

For a stationary record much longer than its integral time, the variance of a statistic falls
as ``1/T`` (REFERENCES §1: ``Var(mean) = 2 sigma^2 T_int / T``; the same holds for higher
moments with their own constants), so a half-width ``h`` measured after ``T`` seconds becomes
``h sqrt(T / T')`` after ``T'``. Point ``j`` with target half-width ``t`` therefore reaches the
ratio ``r = h/t`` after ``a_j / r^2`` seconds, where ``a_j = max over its statistics of
h^2 T / t^2`` is the time it needs to meet every target (``r = 1``).

The plan makes the worst ratio as small as possible within ``total_s`` seconds: every point is
given the same ratio ``r``, ``T_j = max(a_j / r^2, floor_j)``, and ``r`` is found so the times
add up to ``total_s`` (the time per point is decreasing in ``r``, so bisection finds it).
Without floors this is ``r = sqrt(sum a_j / total_s)``; any other split leaves some point
with a larger ratio (lowering one ``T_j`` raises that point's ratio above ``r``).

>>> times, r = share_time([100.0, 300.0], total_s=100.0)
>>> [round(float(t), 6) for t in times], round(r, 6)
([25.0, 75.0], 2.0)
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["need_range", "seconds_to_target", "share_time", "predicted_ratio"]


def seconds_to_target(half_width, duration_s, target) -> float:
    """``h^2 T / t^2``: the record length at which half-width ``h`` (after ``duration_s``)
    shrinks to ``target``; NaN when any input is missing or not positive.

    >>> seconds_to_target(0.2, 10.0, 0.1)
    40.0
    """
    h, d, t = float(half_width), float(duration_s), float(target)
    if not (h > 0 and d > 0 and t > 0) or not all(map(math.isfinite, (h, d, t))):
        return math.nan
    return h * h * d / (t * t)


def need_range(need_s, blocks, confidence: float = 0.95) -> tuple[float, float]:
    """Range of a time-to-target ``need_s`` whose half-width came from ``blocks`` blocks.

    The blocking variance estimate from ``B`` blocks is ``sigma^2 chi^2_{B-1} / (B - 1)``
    (Flyvbjerg & Petersen 1989; REFERENCES §2), and ``need_s`` is proportional to it, so
    ``need_s (B-1) / chi^2_{B-1}(1 -+ alpha/2)`` bounds the true need. Without ``blocks``
    the range is the value itself (unknown spread, not invented).

    >>> low, high = need_range(100.0, 101)
    >>> round(low, 1), round(high, 1)
    (77.2, 134.7)
    """
    need = float(need_s)
    if not isinstance(blocks, int | float) or blocks < 3 or not math.isfinite(need):
        return need, need
    from scipy.stats import chi2

    dof = float(blocks) - 1.0
    a = 1.0 - confidence
    return float(need * dof / chi2.ppf(1 - a / 2, dof)), float(need * dof / chi2.ppf(a / 2, dof))


def predicted_ratio(need_s, seconds) -> np.ndarray:
    """Half-width over target after ``seconds``: ``sqrt(need_s / seconds)``."""
    return np.sqrt(np.asarray(need_s, float) / np.asarray(seconds, float))


def share_time(need_s, total_s: float, floor_s=None) -> tuple[np.ndarray, float]:
    """Times ``T_j`` (s) adding up to ``total_s`` with the smallest worst ratio, and that ratio.

    ``need_s``: each point's time to meet its targets (``a_j``, > 0). ``floor_s``: the least
    time a point is given (e.g. enough integral times for an honest error bar). Raises
    ``ValueError`` when the floors alone exceed ``total_s``.
    """
    a = np.asarray(need_s, dtype=np.float64)
    floor = np.zeros_like(a) if floor_s is None else np.asarray(floor_s, dtype=np.float64)
    if a.size == 0:
        return a.copy(), 0.0
    if not np.all(np.isfinite(a) & (a > 0)):
        raise ValueError("every point needs a positive, finite time to target")
    if floor.sum() > total_s:
        raise ValueError(f"the least times alone take {floor.sum():.0f} s, more than "
                         f"{total_s:.0f} s")

    def used(r):
        return np.maximum(a / (r * r), floor).sum()

    hi = 1.0
    for _ in range(200):  # bounded: beyond 2^200 the floors alone fill the time
        if used(hi) <= total_s:
            break
        hi *= 2.0
    else:
        raise ValueError("the least times alone fill the time available")
    lo = hi / 2.0 if used(hi / 2.0) > total_s else 1e-9
    for _ in range(200):  # bisection on the common ratio (used() is decreasing in r)
        mid = 0.5 * (lo + hi)
        if used(mid) > total_s:
            lo = mid
        else:
            hi = mid
    times = np.maximum(a / (hi * hi), floor)
    times *= total_s / times.sum()  # the last bisection step's rounding, spread evenly
    return times, float(np.max(predicted_ratio(a, times)))
