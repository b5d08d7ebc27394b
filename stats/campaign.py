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

The range is a Monte Carlo (``DRAWS`` draws, seeded, so the same inputs give the same range,
live and in a replay; its central ``confidence`` share) of two sources of error:

* the finished points' own noise: a need estimated from ``B`` blocks is ``need_true *
  chi^2_{B-1} / (B-1)`` (Flyvbjerg & Petersen 1989, REFERENCES §2, as
  :func:`~eddyvigil.stats.planner.need_range`), so each draw takes ``need_true = need *
  (B-1) / chi^2_{B-1}`` independently per finished point (independent records); points to
  come that share neighbours share these draws;
* the profile between and beyond the measured positions, which a straight line does not
  know: the logarithm of the need is modelled as a Brownian motion along the traverse
  coordinate, its diffusion ``D`` estimated from the ``n`` steps between consecutive
  finished positions (``D = mean(dlog^2 / dx)``, each draw using ``n D / chi^2_n``, so the
  few steps' own uncertainty widens the range as a t quantile would). A point beyond the
  last measured one drifts from it (variance ``D d`` at distance ``d``, correlated along
  the way); a point between two measured ones follows a Brownian bridge (variance ``D g t
  (1 - t)``). This is a model, not a law: it is honest for profiles that wander as it
  assumes (``tests/test_campaign.py``: coverage on such profiles) and cannot foresee a
  sharp feature that no finished point has seen. With fewer than ``MIN_POSITIONS`` (4)
  measured positions no range is given (``range_reason``): from one or two steps the
  diffusion's own uncertainty makes the range span orders of magnitude.

Not in the range: the spread of the moment a noisy stopping rule fires (its mean is in
``ETA_CALIBRATION``), the error of T_int, and changes of the gaps.

>>> f = forecast([Finished(position={"y": 0.0}, need_s=100.0, blocks=None, tint_s=0.01)],
...              [{"y": 0.01}, {"y": 0.02}])
>>> round(f.seconds, 1), f.points_done, f.points_left
(200.0, 1, 2)
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
#: measured positions (finished points without positions) before a range is given: the
#: profile's diffusion from fewer than 3 steps is too uncertain to bound anything useful
MIN_POSITIONS = 4
#: seed of the draws: the same inputs give the same range (live = replay)
SEED = 15
#: the method in words (the summary's ``campaign.method``)
METHOD = (f"per point still to come: max({ETA_CALIBRATION:g} x time to target, 200 T_int) "
          "interpolated in position from the finished points, cut at the announced time "
          "limit, plus the median gap between points; range: Monte Carlo over the chi-square "
          "spread of each finished point's time to target and a Brownian profile of its "
          "logarithm along the traverse")

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
    range_reason: str | None = None  # why low/high are NaN while seconds is known
    _current: tuple = field(default=(), repr=False)  # (value, draws) of the point in progress
    _rest: tuple = field(default=(), repr=False)  # (value, draws) of the points after it

    def left(self, elapsed_s: float) -> Forecast:
        """The same forecast with ``elapsed_s`` of record on the point in progress."""
        if self.reason is not None:
            return self
        value, low, high = _combine(self._current, self._rest, float(elapsed_s), self.confidence)
        return Forecast(self.points_done, self.points_left, value, low, high, self.confidence,
                        None, self.gap_s, self.range_reason, self._current, self._rest)

    def to_json(self) -> dict:
        """The summary's ``campaign`` object (times in s; null where not known)."""
        def num(v):
            return round(float(v), 3) if math.isfinite(v) else None

        return {"points_done": self.points_done, "points_left": self.points_left,
                "seconds_left": num(self.seconds), "range_s": [num(self.low), num(self.high)],
                "confidence": self.confidence, "gap_s": num(self.gap_s), "reason": self.reason,
                "range_reason": self.range_reason, "method": METHOD}


def _combine(current, rest, elapsed, confidence):
    value = 0.0
    draws = np.zeros(1)
    if current:
        value += max(current[0] - elapsed, 0.0)
        draws = np.maximum(current[1] - elapsed, 0.0)
    if rest:
        value += rest[0]
        draws = draws + rest[1]
    if np.isnan(draws).any():  # no range (see range_reason)
        return value, math.nan, math.nan
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


def _brownian(xs, wanted, diffusion, rng, draws) -> np.ndarray:
    """(Q, D) draws of a Brownian motion (variance ``diffusion`` per unit of x) pinned to 0 at
    every ``xs`` (sorted, distinct), at the ``wanted`` positions: drift beyond the ends,
    bridges between neighbours (module docstring)."""
    out = np.zeros((len(wanted), draws))
    wanted = np.asarray(wanted, float)
    scale = np.sqrt(diffusion)  # (D,)

    def walk(idx, steps, total=None):
        """Cumulative increments over ``steps`` (sorted distances from the pin) for the
        points ``idx``; with ``total``, pinned again there (a bridge)."""
        if not len(idx):
            return
        dx = np.diff(np.concatenate([[0.0], steps]))
        w = np.cumsum(rng.standard_normal((len(idx), draws)) * np.sqrt(dx)[:, None], axis=0)
        if total is not None:
            end = w[-1] + rng.standard_normal(draws) * np.sqrt(total - steps[-1])
            w = w - (steps / total)[:, None] * end
        out[idx] = w * scale

    left = np.flatnonzero(wanted < xs[0])
    left = left[np.argsort(xs[0] - wanted[left])]
    walk(left, xs[0] - wanted[left])
    right = np.flatnonzero(wanted > xs[-1])
    right = right[np.argsort(wanted[right] - xs[-1])]
    walk(right, wanted[right] - xs[-1])
    for i in range(len(xs) - 1):
        inside = np.flatnonzero((wanted > xs[i]) & (wanted < xs[i + 1]))
        inside = inside[np.argsort(wanted[inside])]
        walk(inside, wanted[inside] - xs[i], xs[i + 1] - xs[i])
    return out


def _profile(distinct, log_need, wanted_x, q, rng, draws):
    """((Q, D) multiplicative draws of the profile between and beyond the measured positions,
    None) or (None, reason) with fewer than two of them. ``wanted_x`` None: no positions."""
    if len(log_need) < MIN_POSITIONS:
        n = len(log_need)
        what = "finished point{}" if wanted_x is None else "position{} measured"
        return None, f"{n} {what.format('s' * (n != 1))}, a range needs {MIN_POSITIONS}"
    if wanted_x is None:  # no positions: like the finished points, independently
        n = len(log_need) - 1
        s_draw = float(np.std(log_need, ddof=1)) * np.sqrt(n / rng.chisquare(n, size=draws))
        return np.exp(rng.standard_normal((q, draws)) * s_draw), None
    xs = np.asarray(distinct, float)
    steps = np.diff(log_need) ** 2 / np.diff(xs)
    n = steps.size
    d_draw = n * float(steps.mean()) / rng.chisquare(n, size=draws)
    # clipped where a draw is absurd anyway (exp overflows past ~700)
    return np.exp(np.clip(_brownian(xs, wanted_x, d_draw, rng, draws), -50.0, 50.0)), None


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
    need_all = np.array([f.need_s for f in usable])
    if axis is None:  # no common coordinate: every point like the finished points on average
        w = np.full((len(wanted), len(usable)), 1.0 / len(usable))
        distinct, log_need, wanted_x = None, np.log(need_all), None
    else:
        order = sorted(range(len(usable)), key=lambda j: usable[j].position[axis])
        # repeated positions: their mean (interpolation needs distinct abscissae)
        distinct, groups = [], []
        for j in order:
            x = float(usable[j].position[axis])
            if distinct and x == distinct[-1]:
                groups[-1].append(j)
            else:
                distinct.append(x)
                groups.append([j])
        wanted_x = [float(p[axis]) for p in wanted]
        w_d = _weights(distinct, wanted_x)
        w = np.zeros((len(wanted), len(usable)))
        for g, members in enumerate(groups):
            for j in members:
                w[:, j] = w_d[:, g] / len(members)
        log_need = np.log([need_all[m].mean() for m in groups])
    tint = np.array([f.tint_s if math.isfinite(f.tint_s) else 0.0 for f in usable])
    rng = np.random.default_rng(seed)
    factor = np.ones((len(usable), draws))
    for j, f in enumerate(usable):
        if isinstance(f.blocks, int | float) and f.blocks >= 3:
            dof = float(f.blocks) - 1.0
            factor[j] = dof / rng.chisquare(dof, size=draws)
    profile, range_reason = _profile(distinct, log_need, wanted_x, len(wanted), rng, draws)
    floor = np.maximum(MIN_RECORD_INTEGRAL_TIMES * (w @ tint), float(min_record_s or 0.0))
    limits = [current_limit_s] if current is not None else []
    limits += list(limits_s) if limits_s is not None else [None] * len(to_come)
    cap = np.array([float(c) if isinstance(c, int | float) and c > 0 else np.inf
                    for c in limits])

    def records(needs):  # interpolated needs (Q,) or (Q, D) -> records
        shape = (-1, 1) if needs.ndim == 2 else (-1,)
        r = np.maximum(ETA_CALIBRATION * needs, floor.reshape(shape))
        return np.minimum(r, cap.reshape(shape))

    gap = float(np.median(gaps_s)) if len(gaps_s) else 0.0
    value = records(w @ need_all)
    if profile is None:
        sample = np.full((len(wanted), 1), np.nan)
    else:
        sample = records((w @ (need_all[:, None] * factor)) * profile)
    k = 1 if current is not None else 0
    cur = (float(value[0]), sample[0]) if k else ()
    rest = (float(value[k:].sum() + gap * len(to_come)),
            sample[k:].sum(axis=0) + gap * len(to_come)) if to_come else ()
    return Forecast(gap_s=gap, range_reason=range_reason, _current=cur, _rest=rest,
                    **base).left(0.0)
