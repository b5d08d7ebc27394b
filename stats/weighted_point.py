"""WeightedPointStatistics: a point of randomly sampled (laser-Doppler) data, every statistic
weighted (``stats.weighted``), errors by blocking in time, integral times by slotting.

It is a :class:`PointStatistics` whose evaluation comes from other accumulators: the same
names, targets, stopping rule, checkpoints and snapshot; only ``update`` (rows with their
times and weights) and ``_evaluate`` differ. Values: weighted moments about a reference, fed
to the same delta-method table as uniform data. Errors: the ratio-estimator variance of the
time blocks (``TimeBlocks.analyse``). ``Tint_c``: the slotted, locally normalised
autocorrelation (``stats.slotting``) summed over five pilot integral times, its error by the
jackknife over time groups (the method is in ``stats.slotting``'s docstring);
``Neff_c = sigma^2 / Var(mean)`` and ``L_c = |U| Tint_c``.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from eddyvigil.stats.arrivals import ArrivalCheck
from eddyvigil.stats.convergence import CHECKPOINT_GROWTH, MIN_RECORD_TINTS, STOP_MARGIN, STREAK
from eddyvigil.stats.kernels import integral_scales
from eddyvigil.stats.point import (
    INTERVAL_INFLATION,
    PointStatistics,
    _Evaluation,
    _t_quantiles,
)
from eddyvigil.stats.slotting import SlottedCorrelation
from eddyvigil.stats.stationarity import MIN_SEGMENTS, assess_columns
from eddyvigil.stats.weighted import WEIGHTINGS, TimeBlocks, WeightedMoments, sample_weights

__all__ = ["WeightedPointStatistics", "MIN_SAMPLES_PER_TINT"]

#: below about this many samples per integral time the data rate is called too low
MIN_SAMPLES_PER_TINT = 10.0
#: slots of the autocorrelation, each one mean inter-arrival gap wide
SLOTS = 128
#: The stationarity guard's segments: at most this many (stats.stationarity is tuned on 32-63
#: nearly independent segment means) ...
GUARD_SEGMENTS = 63
#: ... each, where T_int is known, at least this many integral times long while
#: stats.stationarity.MIN_SEGMENTS remain (adjacent means then correlate by about 0.1;
#: stats.verdict's minimum record rests on the same figure)
GUARD_SEGMENT_TINTS = 10.0


class WeightedPointStatistics(PointStatistics):
    """Statistics of one randomly sampled point.

    ``weighting``: ``"transit"`` (residence-time weights must come with every block),
    ``"arrival"`` (inter-arrival times) or ``"none"``. ``update(block, times=..., weights=...)``
    takes rows in time order; ``duration_s`` is accepted for the caller's symmetry with
    :class:`PointStatistics` and must match the times.
    """

    def __init__(self, columns, weighting="transit", targets=None, confidence=None, **kw):
        super().__init__(columns, None, targets, confidence, **kw)
        if weighting not in WEIGHTINGS:
            raise ValueError(f"weighting must be one of {WEIGHTINGS}, not {weighting!r}")
        self.weighting = weighting
        m = len(self.columns)
        self.wmom = WeightedMoments(m)
        self.tblocks = TimeBlocks(m)
        self.slots: SlottedCorrelation | None = None
        self.arrivals = ArrivalCheck()
        self.merged = False  # a union of independent records: takes no more samples
        # the unweighted accumulators of PointStatistics are not kept
        self.moments = self.blocking = None

    def copy(self) -> WeightedPointStatistics:
        new = self._like()
        new.wmom, new.tblocks = self.wmom.copy(), self.tblocks.copy()
        new.slots = None if self.slots is None else self.slots.copy()
        new.arrivals = self.arrivals.copy()
        new.checkpoints = self.checkpoints.copy()
        new._duration_s = self._duration_s
        new.merged = self.merged
        return new

    def _like(self) -> WeightedPointStatistics:
        return WeightedPointStatistics(self.columns, self.weighting, self.targets, self.confidence)

    def merge(self, other, independent=True):
        """A new point holding both records (inputs untouched), as independent records only.

        Exact: weighted moments (weighted Pébay merge), the time blocks (``other``'s moved to
        ``self``'s reference, then appended: ``TimeBlocks.merge``), the slotted pair sums per
        time group (``SlottedCorrelation.merge``; slot widths must agree) and the arrival
        histogram. No pair or gap is formed across the records. Checkpoint streaks follow
        :meth:`PointStatistics.merge`'s rule. A merged point takes no more samples.
        """
        if not isinstance(other, WeightedPointStatistics):
            raise ValueError("cannot merge a randomly sampled point with a uniformly sampled one")
        if not independent:
            raise ValueError("randomly sampled points merge as independent records only")
        if other.columns != self.columns:
            raise ValueError("cannot merge points with different columns")
        if other.weighting != self.weighting:
            raise ValueError(
                f"cannot merge points weighted differently ({self.weighting} vs {other.weighting})"
            )
        new = self._like()
        new.wmom = self.wmom.merge(other.wmom)
        new.tblocks = self.tblocks.merge(other.tblocks)
        if self.slots is None or other.slots is None:  # a point with no sample has no slots
            one = self.slots if other.slots is None else other.slots
            if one is not None:
                new.slots = one.merge(SlottedCorrelation(one.m, one.dtau, one.nslots))
        else:
            new.slots = self.slots.merge(other.slots)
        new.arrivals = self.arrivals.merge(other.arrivals)
        new._duration_s = self._duration_s + other._duration_s
        new.merged = True
        self._carry_streaks(other, new)
        return new

    @property
    def n(self) -> int:
        return self.wmom.n

    def update(self, block, duration_s=None, *, times=None, weights=None):
        """Add rows (n, m) with their ``times`` (s) and, for transit weighting, ``weights``."""
        if self.merged:
            raise ValueError("a merged point of randomly sampled data takes no more samples")
        block = np.asarray(block, dtype=np.float64)
        if block.ndim != 2 or block.shape[1] != len(self.columns):
            raise ValueError(f"expected a block of shape (n, {len(self.columns)})")
        if block.shape[0] == 0:
            return self
        t = np.asarray(times, dtype=np.float64)
        if t.shape != (block.shape[0],):
            raise ValueError("random sampling needs one time per row")
        if self.weighting == "transit" and weights is None:
            raise ValueError("transit weighting needs a weight column")
        w = sample_weights(self.weighting, t, weights, self.arrivals.last_t)
        if duration_s is None:
            last = self.arrivals.last_t
            duration_s = float(t[-1] - (t[0] if last is None else last))
        self._duration_s += float(duration_s)
        if self.slots is None:
            span = float(t[-1] - t[0])
            gap = span / (t.shape[0] - 1) if t.shape[0] > 1 and span > 0 else 1e-3
            # the mean gap to the nearest power of two seconds: repeats of a point at about
            # the same data rate get the same slots, so they merge (SlottedCorrelation.merge)
            dtau = 2.0 ** round(math.log2(gap))
            self.slots = SlottedCorrelation(len(self.columns), dtau=dtau, nslots=SLOTS)
        self.arrivals.update(t)
        self.wmom.update(block, w)
        self.tblocks.update(block, w, t)
        self.slots.update(block, w, t)
        self._cache = None
        self._checkpoint_ev = None
        if self.checkpoints.due(self.n):
            ev = self._evaluate(self._checkpoint_rows)
            self._checkpoint_ev = ev
            self.checkpoints.record(self.n, self._passes(ev), self.duration_s)
        return self

    def _evaluate(self, rows=None) -> _Evaluation:
        if self._cache is not None:
            return self._cache
        m = len(self.columns)
        S = len(self.names)
        if self.n < 2 or self.wmom.weight <= 0 or self.tblocks.ref is None:
            nan = np.full(S, np.nan)
            zero = np.zeros(S, dtype=np.int64)
            targets = self._plan.resolve(nan.tolist())
            ev = _Evaluation(
                self.names, nan, nan.copy(), zero, nan.copy(), nan.copy(), {}, targets,
                [False] * S, [0.0] * S, [None] * S, [None] * S, np.zeros(S),
            )
            self._cache = ev
            return ev
        ref = self.tblocks.ref
        raw = self.wmom.raw_about(ref)
        values, grad = self.table.values_and_gradient(raw, ref)
        if rows is not None:
            grad = np.where(rows[:, None], grad, 0.0)
        choice = self.tblocks.analyse(grad, raw)
        nm = grad.shape[0]
        rel = np.full(nm, choice.relative_error)
        values = np.concatenate([values, np.empty(3 * m)])
        se = np.empty(S)
        integral_scales(self.duration_s, choice.variance, rel, m, values, se)
        # Tint from the slotted autocorrelation with its jackknife error over time groups
        # (stats.slotting), L = |U| Tint with the mean speed's error added in quadrature
        tints, tint_se, groups = self._slotted(values[:m])
        speed = float(np.sqrt(np.sum(values[:m] ** 2)))
        spread = float(np.sqrt(np.sum((values[:m] * se[:m]) ** 2)))
        rel_speed = spread / speed**2 if speed > 0 else math.nan
        blocks = np.full(S, choice.blocks, dtype=np.int64)
        rel_all = np.full(S, choice.relative_error)
        k = nm
        for i in range(m):
            values[k + i] = tints[i]
            se[k + i] = tint_se[i]
            values[k + 2 * m + i] = speed * tints[i]
            length = speed * tints[i]
            if math.isfinite(length) and length != 0.0:
                se[k + 2 * m + i] = math.hypot(tint_se[i] / tints[i], rel_speed) * abs(length)
            else:
                se[k + 2 * m + i] = math.nan
            for row in (k + i, k + 2 * m + i):
                blocks[row] = groups
                rel_all[row] = math.sqrt(0.5 / (groups - 1)) if groups > 1 else math.nan
        hw = INTERVAL_INFLATION * _t_quantiles(0.5 * (1.0 + self.confidence), blocks) * se
        suspect = {}
        verdicts = assess_columns(self._guard_segments(tints), se[:m].tolist())
        for c, verdict in zip(self.columns, verdicts, strict=True):
            if not verdict.stationary:
                suspect[c] = verdict.reason or "not stationary"
        dead = self.arrivals.dead_time()
        if dead["suspected"]:
            for c in self.columns:
                suspect.setdefault(c, "processor dead time: too few short inter-arrival gaps")
        targets = self._plan.resolve(values.tolist())
        guards = self._weighted_guards(tints, se, hw)
        ev = _Evaluation(self.names, values, se, blocks, rel_all, hw, suspect, targets, *guards)
        if rows is None:
            self._cache = ev
        return ev

    def _guard_segments(self, tints) -> np.ndarray:
        """(N, m) weighted means of equal-duration segments for the stationarity guard.

        The time blocks are sized for the error analysis (a few inter-arrival gaps at first,
        128-256 of them), not for the guard: fed to it directly, their means are many (so the
        guard's levels, tuned on 32-63 values, do not hold) and, early in a record, shorter
        than an integral time, so neighbours correlate and a stationary record is called
        drifting (5 % of 1-component velocity-biased records at 200 T_int instead of about
        1 %). So neighbouring blocks are joined in groups of g (a power of two): at most
        GUARD_SEGMENTS segments, and longer while a segment is under GUARD_SEGMENT_TINTS
        integral times of the slowest component and MIN_SEGMENTS would remain. Blocks past
        the last complete group are left out (as the uniform path's segment store does).
        """
        tb = self.tblocks
        used = tb.used
        g = 1
        while used // g > GUARD_SEGMENTS:
            g *= 2
        slowest = float(np.max(tints)) if len(tints) and np.all(np.isfinite(tints)) else 0.0
        while g * tb.tau < GUARD_SEGMENT_TINTS * slowest and used // (2 * g) >= MIN_SEGMENTS:
            g *= 2
        b = (used // g) * g
        W = tb.Wb[:b].reshape(-1, g).sum(axis=1)
        S = tb.Sb[:b, : tb.m].reshape(-1, g, tb.m).sum(axis=1)
        keep = W > 0
        return S[keep] / W[keep, None] + tb.ref

    def _weighted_guards(self, tints, se, hw):
        """The minimum record and the modelled-k rule of PointStatistics._guards, for random
        sampling: the record must span MIN_RECORD_TINTS of the slotted integral time of every
        component a statistic depends on. While the slotted correlation has not yet crossed
        zero (T_int unknown) the time blocks' own count is the only guard. No tail guard here
        (the weighted path keeps no extremes yet); no slow-content test (time blocks have one
        level). Sets the half-width of rows without an honest interval to NaN (in place)."""
        S = len(self.names)
        T = self.duration_s
        long_enough, min_total, no_interval = [], [], []
        for i in range(S):
            t_i = max((tints[c] for c in self._comp_idx[i]), default=math.nan)
            need = MIN_RECORD_TINTS * t_i if math.isfinite(t_i) and t_i > 0 else 0.0
            need = max(need, self.targets.required_record_s)
            long_enough.append(T >= need)
            min_total.append(need)
            why = None
            if self._modelled_k and self.names[i] == "k":
                why = (
                    f"no honest interval: {self.k_method}; the assumption's error is unknown "
                    "(set accept_modelled_k = true in the targets file to accept it)"
                )
                hw[i] = math.nan
                se[i] = math.nan
            no_interval.append(why)
        return long_enough, min_total, [None] * S, no_interval, np.zeros(S)

    def _snapshot(self, ev, indices):
        """The common snapshot, with an early ETA for the means from the slotted T_int.

        While too few time blocks exist for the blocking error to predict anything, the
        error of a mean follows from Var(mean) = (sigma^2 / N)(1 + 2 n' T_int) for Poisson
        arrivals at rate n' (REFERENCES-style elementary result; Adrian & Yao 1987, from
        memory): the record T = N / n' that meets the target with the stopping rule's margin,
        then the rest of the checkpoint streak.
        """
        snap = super()._snapshot(ev, indices)
        rate = self.arrivals.rate_hz()
        if not math.isfinite(rate) or rate <= 0:
            return snap
        m = len(self.columns)
        tints = ev.values[len(self.table.names) : len(self.table.names) + m]
        z = _t_quantiles(0.5 * (1.0 + self.confidence), np.array([10_000]))[0]
        out = []
        for e in snap.estimates:
            i = self.names.index(e.name)
            if i < m and e.eta_s is None and e.target and math.isfinite(tints[i]):
                var = ev.values[self.names.index(self.columns[i] * 2)]
                need = (STOP_MARGIN * z / e.target) ** 2 * var * (1 + 2 * rate * tints[i]) / rate
                eta = max(need * CHECKPOINT_GROWTH ** (STREAK - 1) - self.duration_s, 0.0)
                e = e._replace(eta_s=eta if math.isfinite(eta) else None)
            out.append(e)
        return dataclasses.replace(snap, estimates=tuple(out))

    def _slotted(self, mean) -> tuple[np.ndarray, np.ndarray, int]:
        """``(tint, se, groups)`` from the slotted autocorrelation (NaN before any data)."""
        if self.slots is None:
            nan = np.full(len(self.columns), np.nan)
            return nan, nan.copy(), 0
        return self.slots.integral_times_with_errors(mean)

    def integral_times(self, mean) -> np.ndarray:
        """T_int of each component as the Tint rows report it (stats.slotting)."""
        return self._slotted(mean)[0]

    def random_sampling_fields(self) -> dict:
        """Summary point-line fields (DESIGN §10): ``weighting`` and ``random_sampling``."""
        rate = self.arrivals.rate_hz()
        mean = self.wmom.mean if self.wmom.weight > 0 else np.full(len(self.columns), np.nan)
        tints = self.integral_times(mean)
        per_tint = {}
        notes = []
        for c, ti in zip(self.columns, tints.tolist(), strict=True):
            spt = rate * ti if math.isfinite(ti) and math.isfinite(rate) else None
            per_tint[c] = None if spt is None else round(spt, 2)
            if spt is not None and spt < MIN_SAMPLES_PER_TINT:
                notes.append(
                    f"data rate too low for the integral time scale of {c}: {spt:.1f} samples"
                    f" per T_int (about {MIN_SAMPLES_PER_TINT:g} needed)"
                )
            if spt is None and self.n >= 1000:
                notes.append(f"T_int of {c} not found within the {SLOTS} slots")
        dead = self.arrivals.dead_time()
        if dead["suspected"]:
            notes.append(
                f"dead time suspected: {dead['short_gaps']} gaps below 0.1 x the mean gap,"
                f" {dead['expected_short_gaps']} expected for Poisson arrivals"
            )
        return {
            "weighting": self.weighting,
            "random_sampling": {
                "data_rate_hz": None if not math.isfinite(rate) else rate,
                "slot_s": None if self.slots is None else self.slots.dtau,
                "samples_per_tint": per_tint,
                "dead_time": dead,
                "error_block_s": self.tblocks.tau,
                "notes": notes,
            },
        }
