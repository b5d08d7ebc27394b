"""Time left for a whole traverse (the campaign ETA), with a range.

Inputs are numbers only (the monitor extracts them from the finished points' summary lines):
for each finished point its position, its *need* (the record length at which its slowest
targeted statistic meets its target, ``h^2 T / t^2``, :func:`~eddyvigil.stats.planner.
seconds_to_target`), the number of blocks ``B`` that need's variance came from, and its
largest integral time; the move-and-settle gaps measured between points; the positions still
to come (and, optionally, the time limit a publisher gives each point).

The prediction for a point still to come:

* its need and integral time are interpolated linearly in position from the finished points
  (along the coordinate that varies most; the nearest value beyond the ends), as ``eddyvigil
  plan`` does;
* the point stops when the verdict says move on, so its record is
  ``max(ETA_CALIBRATION * need, MIN_RECORD_INTEGRAL_TIMES * T_int, min_record_s)`` (the
  stopping rule's calibration factor, :mod:`eddyvigil.stats.convergence`, and the verdict's
  minimum record, :mod:`eddyvigil.stats.verdict`), cut at the publisher's time limit if it
  announced one;
* plus the median gap measured between finished points (moving the probe and letting the
  flow settle; zero when no gap has been measured).

The point in progress counts its prediction less the record it already has (never below 0).

The range is a Monte Carlo over the finished points' needs: a need estimated from ``B`` blocks
is ``need_true * chi^2_{B-1} / (B-1)`` (Flyvbjerg & Petersen 1989, REFERENCES §2, as
:func:`~eddyvigil.stats.planner.need_range`), so each draw takes ``need_true = need * (B-1) /
chi^2_{B-1}`` independently per finished point (independent records), interpolates and sums
as above; the range is the central ``confidence`` share of ``DRAWS`` draws (seeded, so the
same inputs give the same range, live and in a replay). Points that share neighbours share
their draws, so their errors are correlated as they should be. Not in the range: how the
need varies *between* measured points beyond a straight line, the spread of the moment a
noisy stopping rule fires (its mean is in ``ETA_CALIBRATION``), the error of T_int, and
changes of the gaps; the README says so beside the figure.

>>> f = forecast([Finished(position={"y": 0.0}, need_s=100.0, blocks=None, tint_s=0.01)],
...              [{"y": 0.01}, {"y": 0.02}])
>>> round(f.seconds, 1), f.points_done, f.points_left
(220.0, 1, 2)
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from eddyvigil.stats.convergence import ETA_CALIBRATION
from eddyvigil.stats.verdict import MIN_RECORD_INTEGRAL_TIMES

__all__ = ["DRAWS", "Finished", "Forecast", "forecast", "METHOD"]

#: Monte Carlo draws of the range (a 95 % range from 2000 draws moves by about 1 %)
DRAWS = 2000
#: seed of the draws: the same inputs give the same range (live = replay)
SEED = 15
#: the method in words (the summary's ``campaign.method``)
METHOD = ("per point still to come: max(1.1 x time to target, 200 T_int) interpolated in "
          "position from the finished points, cut at the announced time limit, plus the median "
          "gap between points; range: Monte Carlo over the chi-square spread of each finished "
          "point's time to target")

_AXES = ("x", "y", "z")


@dataclass(frozen=True)
class Finished:
    """One finished point: ``position`` (a mapping with some of x, y, z in m), ``need_s`` (s to
    meet every target; NaN when no targeted statistic had an interval), ``blocks`` (B of that
    need's half-width, or None), ``tint_s`` (largest integral time, NaN if unknown)."""

    position: dict
    need_s: float
    blocks: int | None
    tint_s: float


@dataclass(frozen=True)
class Forecast:
    """The prediction: ``seconds`` (point value) and ``low``/``high`` (the range) of the time
    left, once the point in progress has ``elapsed_s`` of record; ``reason`` (and NaN times)
    when there is nothing honest to say. ``left(elapsed_s)`` recomputes for a later moment of
    the same point in progress without drawing again."""

    points_done: int
    points_left: int  # still to come, the point in progress included
    seconds: float = math.nan
    low: float = math.nan
    high: float = math.nan
    confidence: float = 0.95
    reason: str | None = None
    gap_s: float = 0.0
    _current: tuple = field(default=(), repr=False)  # (value, draws) of the point in progress
    _rest: tuple = field(default=(), repr=False)  # (value, draws) of the points after it

    def left(self, elapsed_s: float) -> Forecast:
        """The same forecast with ``elapsed_s`` of record on the point in progress."""
        if self.reason is not None:
            return self
        value, low, high = _combine(self._current, self._rest, float(elapsed_s), self.confidence)
        return Forecast(self.points_done, self.points_left, value, low, high, self.confidence,
                        None, self.gap_s, self._current, self._rest)

    def to_json(self) -> dict:
        """The summary's ``campaign`` object (times in s; null where not known)."""
        def num(v):
            return round(float(v), 3) if math.isfinite(v) else None

        return {"points_done": self.points_done, "points_left": self.points_left,
                "seconds_left": num(self.seconds), "range_s": [num(self.low), num(self.high)],
                "confidence": self.confidence, "gap_s": num(self.gap_s), "reason": self.reason,
                "method": METHOD}


def _combine(current, rest, elapsed, confidence):
    value = 0.0
    draws = np.zeros(1)
    if current:
        value += max(current[0] - elapsed, 0.0)
        draws = np.maximum(current[1] - elapsed, 0.0)
    if rest:
        value += rest[0]
        draws = draws + rest[1]
    a = (1.0 - confidence) / 2.0
    low, high = np.quantile(draws, [a, 1.0 - a])
    return value, float(min(low, value)), float(max(high, value))


def _axis(positions) -> str | None:
    """The coordinate present in every position that varies most (None: no common one)."""
    best, spread = None, -1.0
    for a in _AXES:
        values = [p.get(a) for p in positions]
        if not values or not all(isinstance(v, int | float) and math.isfinite(v)
                                 for v in values):
            continue
        s = max(values) - min(values)
        if s > spread:
            best, spread = a, s
    return best


def _weights(known_pos, wanted_pos) -> np.ndarray:
    """(Q, J) linear-interpolation weights (nearest value beyond the ends), so that
    ``W @ f`` is ``np.interp(wanted, known, f)`` for any f on the sorted ``known_pos``."""
    xs = np.asarray(known_pos, float)
    w = np.zeros((len(wanted_pos), xs.size))
    for q, x in enumerate(wanted_pos):
        if x <= xs[0]:
            w[q, 0] = 1.0
        elif x >= xs[-1]:
            w[q, -1] = 1.0
        else:
            r = int(np.searchsorted(xs, x, side="right"))
            t = (x - xs[r - 1]) / (xs[r] - xs[r - 1])
            w[q, r - 1], w[q, r] = 1.0 - t, t
    return w


def forecast(finished, to_come, current=None, *, gaps_s=(), limits_s=None,
             current_limit_s=None, min_record_s: float = 0.0, confidence: float = 0.95,
             draws: int = DRAWS, seed: int = SEED) -> Forecast:
    """Predict the time left for a traverse.

    ``finished``: :class:`Finished` points in the order measured. ``to_come``: positions
    (mappings with x/y/z) of the points after the one in progress, in order. ``current``:
    the position of the point in progress, or None. ``gaps_s``: gaps measured between
    finished points (s). ``limits_s``: per point to come, the publisher's time limit (None or
    NaN: none); ``current_limit_s`` the same for the point in progress. Call
    :meth:`Forecast.left` with the point in progress's record so far.
    """
    finished = list(finished)
    to_come = [dict(p) for p in to_come]
    n_left = len(to_come) + (current is not None)
    base = {"points_done": len(finished), "points_left": n_left, "confidence": confidence}
    if n_left == 0:
        return Forecast(seconds=0.0, low=0.0, high=0.0, **base)
    usable = [f for f in finished if math.isfinite(f.need_s) and f.need_s > 0]
    if not usable:
        return Forecast(reason="no finished point has a targeted statistic with an interval "
                        "yet", **base)
    wanted = ([dict(current)] if current is not None else []) + to_come
    axis = _axis([f.position for f in usable] + wanted)
    if axis is None:  # no common coordinate: every point like the finished points on average
        w = np.full((len(wanted), len(usable)), 1.0 / len(usable))
        order = list(range(len(usable)))
    else:
        order = sorted(range(len(usable)), key=lambda j: usable[j].position[axis])
        xs = [float(usable[j].position[axis]) for j in order]
        # repeated positions: their mean (np.interp needs distinct abscissae)
        distinct, groups = [], []
        for j, x in zip(order, xs, strict=True):
            if distinct and x == distinct[-1]:
                groups[-1].append(j)
            else:
                distinct.append(x)
                groups.append([j])
        w_d = _weights(distinct, [float(p[axis]) for p in wanted])
        w = np.zeros((len(wanted), len(usable)))
        for g, members in enumerate(groups):
            for j in members:
                w[:, j] = w_d[:, g] / len(members)
        order = list(range(len(usable)))
    need = np.array([usable[j].need_s for j in order])
    tint = np.array([usable[j].tint_s if math.isfinite(usable[j].tint_s) else 0.0
                     for j in order])
    rng = np.random.default_rng(seed)
    factor = np.ones((len(usable), draws))
    for j, f in enumerate(usable):
        if isinstance(f.blocks, int | float) and f.blocks >= 3:
            dof = float(f.blocks) - 1.0
            factor[j] = dof / rng.chisquare(dof, size=draws)
    floor = np.maximum(MIN_RECORD_INTEGRAL_TIMES * (w @ tint), float(min_record_s or 0.0))
    limits = [current_limit_s] if current is not None else []
    limits += list(limits_s) if limits_s is not None else [None] * len(to_come)
    cap = np.array([float(c) if isinstance(c, int | float) and c > 0 else np.inf
                    for c in limits])

    def records(needs):  # needs: (J,) or (J, D) -> records (Q,) or (Q, D)
        shape = (-1, 1) if needs.ndim == 2 else (-1,)
        r = np.maximum(ETA_CALIBRATION * (w @ needs), floor.reshape(shape))
        return np.minimum(r, cap.reshape(shape))

    gap = float(np.median(gaps_s)) if len(gaps_s) else 0.0
    value, sample = records(need), records(need[:, None] * factor)
    k = 1 if current is not None else 0
    cur = (float(value[0]), sample[0]) if k else ()
    rest = (float(value[k:].sum() + gap * len(to_come)),
            sample[k:].sum(axis=0) + gap * len(to_come)) if to_come else ()
    return Forecast(gap_s=gap, _current=cur, _rest=rest, **base).left(0.0)
