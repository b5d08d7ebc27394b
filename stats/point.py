"""PointStatistics: everything eddyvigil knows about one measurement point.

Composes the moment accumulator (values), the blocking accumulator (errors for correlated
data), the delta-method table (which series to block for each statistic), the stationarity
guard and the stopping rule, and turns them into an immutable :class:`PointSnapshot`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numba
import numpy as np
from scipy import special

from eddyvigil.stats.blocking import BlockingAccumulator
from eddyvigil.stats.convergence import (
    MAX_SE_RELATIVE_ERROR,
    MIN_BLOCKS,
    Checkpoints,
    eta_seconds,
    passes,
)
from eddyvigil.stats.delta import K_METHODS, StatisticTable
from eddyvigil.stats.moments import MomentAccumulator
from eddyvigil.stats.names import components_of, statistic_names
from eddyvigil.stats.snapshot import Estimate, PointSnapshot
from eddyvigil.stats.stationarity import assess_columns
from eddyvigil.stats.targets import Targets

__all__ = ["PointStatistics", "DEFAULT_BASE_BLOCK"]

#: samples per base block of the blocking hierarchy (its level 0); see blocking.py
DEFAULT_BASE_BLOCK = 64


@lru_cache(maxsize=4096)
def _t_quantile(p: float, blocks: int) -> float:
    return float(special.stdtrit(blocks - 1, p)) if blocks >= 2 else math.nan


def _t_quantiles(p: float, blocks: np.ndarray) -> np.ndarray:
    """Student t quantile ``p`` on ``blocks - 1`` degrees of freedom, NaN below 2 blocks.

    ``scipy.special.stdtrit`` is the function under ``scipy.stats.t.ppf`` (same values). The
    statistics of a point share a handful of block counts and a count recurs at the next
    checkpoints, so each (p, count) is computed once: an inversion costs about 0.7 us, and
    the whole array of them was a fifth of a checkpoint evaluation.
    """
    return np.array([_t_quantile(p, b) for b in blocks.tolist()], dtype=np.float64)


@numba.njit(cache=True, error_model="numpy")
def _integral_scales(duration_s, var, rel, m, values, se):
    """Append Tint, Neff and L of each component to ``values`` and fill ``se`` (S,).

    ``values`` holds the moment statistics followed by 3 m free places; ``var`` and ``rel``
    are the variances and relative standard errors of the moment statistics. From the error
    of the mean: Var(mean) = 2 sigma^2 Tint / T, N_eff = sigma^2 / Var(mean) (REFERENCES §1);
    the integral length by Taylor's hypothesis, convected at the local mean speed |U|. The
    relative error of a variance estimate is twice that of its square root; the mean speed's
    own relative error adds in quadrature for the length.
    """
    k = var.shape[0]
    for i in range(k):
        se[i] = np.sqrt(var[i])
    speed2 = 0.0
    spread2 = 0.0
    for i in range(m):
        speed2 += values[i] ** 2
        spread2 += (values[i] * se[i]) ** 2
    speed = np.sqrt(speed2)
    rel_speed = np.sqrt(spread2) / speed**2
    for i in range(m):
        sig2 = values[m + i]
        tint = duration_s * var[i] / (2.0 * sig2)
        neff = sig2 / var[i]
        length = speed * tint
        rel_t = 2 * rel[i]
        values[k + i] = tint
        values[k + m + i] = neff
        values[k + 2 * m + i] = length
        se[k + i] = rel_t * tint
        se[k + m + i] = rel_t * neff
        se[k + 2 * m + i] = np.sqrt(rel_t**2 + rel_speed**2) * length


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
        self.table = StatisticTable(self.columns, self.moments.layout)
        # the moment statistics (table.names), then Tint_c, Neff_c, L_c: the one name table's order
        self.names = tuple(statistic_names(self.columns))
        # per-name lookups done once: target resolution, components a name depends on
        self._plan = self.targets.plan(self.names)
        self._components = tuple(frozenset(components_of(name)) for name in self.names)
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
        if self.rate_hz is None:
            if duration_s is None or not math.isfinite(duration_s) or duration_s < 0:
                raise ValueError("random sampling (rate_hz None) needs the block's duration_s")
            self._duration_s += float(duration_s)
        # one sweep: the blocking kernel also hands the block's central sums to the moments
        self.blocking.update(block, moments=self.moments)
        self._cache = None
        self._checkpoint_ev = None
        if self.checkpoints.due(self.n):
            ev = self._evaluate(self._checkpoint_rows)
            self._checkpoint_ev = ev
            self.checkpoints.record(self.n, self._passes(ev), self.duration_s)
        return self

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
        first checkpoint's sample count no streak exists and none is carried.
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
        new._duration_s = self._duration_s + other._duration_s
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
            ev = new._evaluate(new._checkpoint_rows)
            new._checkpoint_ev = ev
            new.checkpoints.record(new.n, new._passes(ev), new.duration_s)
        return new

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
            )
            self._cache = ev
            return ev
        ref = self.blocking.ref
        raw = self.moments.raw_about(ref)
        values, grad = tab.values_and_gradient(raw, ref)
        if rows is not None:
            grad = np.where(rows[:, None], grad, 0.0)  # a zero row costs one pass over levels
        choice = self.blocking.analyse(grad)
        # append integral time scales, effective sample counts and integral lengths
        values = np.concatenate([values, np.empty(3 * m)])
        se = np.empty(S)
        _integral_scales(self.duration_s, choice.variance, choice.relative_error, m, values, se)
        blocks = choice.blocks[self._source]
        rel = choice.relative_error[self._source]
        hw = _t_quantiles(0.5 * (1.0 + self.confidence), blocks) * se
        suspect = {}
        verdicts = assess_columns(self.blocking.segment_means(), se[:m].tolist())
        for c, verdict in zip(self.columns, verdicts, strict=True):
            if not verdict.stationary:
                suspect[c] = verdict.reason or "not stationary"
        targets = self._plan.resolve(values.tolist())
        ev = _Evaluation(names, values, se, blocks, rel, hw, suspect, targets)
        if rows is None:
            self._cache = ev
        return ev

    def _stationary(self, i: int, suspect: dict) -> bool:
        """True when no component statistic ``i`` depends on is flagged in ``suspect``."""
        return not (suspect and self._components[i] & suspect.keys())

    def _passes(self, ev: _Evaluation) -> dict[str, bool]:
        hw, blocks, rel = ev.half_width.tolist(), ev.blocks.tolist(), ev.se_rel_err.tolist()
        return {
            ev.names[i]: passes(
                hw[i], ev.targets[i], blocks[i], rel[i], self._stationary(i, ev.suspect)
            )
            for i in self._plan.targeted
        }

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
        for i in indices:
            name = ev.names[i]
            v, se, hw = values[i], stderr[i], half_width[i]
            blocks = block_counts[i]
            target = ev.targets[i]
            bad = sorted(self._components[i] & ev.suspect.keys()) if ev.suspect else []
            reason = None
            if target is None:
                converged, eta = None, None
                state = "suspect" if bad else "untargeted"
            else:
                any_target = True
                converged = self.checkpoints.is_converged(name) and not bad
                streak = self.checkpoints.streak.get(name, 0)
                eta = 0.0 if converged else eta_seconds(hw, target, blocks, T, streak)
                if bad:
                    state, reason = "suspect", "; ".join(f"{c}: {ev.suspect[c]}" for c in bad)
                elif converged:
                    state = "converged"
                elif (
                    blocks < MIN_BLOCKS
                    or not math.isfinite(hw)
                    or se_rel_err[i] > MAX_SE_RELATIVE_ERROR
                ):
                    state = "warming-up"
                    reason = f"{blocks} blocks at the chosen level, {MIN_BLOCKS} needed"
                else:
                    state = "converging"
                if not converged:
                    all_conv = False
            estimates.append(
                Estimate(
                    name=name,
                    value=v,
                    stderr=se,
                    ci_low=v - hw,
                    ci_high=v + hw,
                    half_width=hw,
                    target=None if target is None else float(target),
                    converged=converged,
                    eta_s=eta,
                    state=state,
                    blocks=blocks,
                    reason=reason,
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
            k_method=K_METHODS[len(self.columns)],
            suspect=ev.suspect,
        )
