"""Weighted moments of randomly sampled (laser-Doppler) data and their errors in time.

Laser-Doppler arrivals come more often when the flow is fast, so plain averages lean towards
high speeds (velocity bias; McLaughlin & Tiederman 1973). Weighting each sample by its
residence (transit) time removes the bias (Buchhave, George & Lumley 1979):
``mean = sum w x / sum w`` and every central moment ``sum w (x - mean)^p / sum w``.

* :class:`WeightedMoments`: weighted mean and central co-moments of order 2-4, one block at a
  time by a two-pass kernel, combined with what came before by Pébay's (2008) pairwise merge
  with the counts replaced by weight totals (West 1979 for the mean and variance); so
  ``update`` and ``merge`` are the same exact formula.
* :class:`TimeBlocks`: the weight and weighted monomial sums of every time block of equal
  duration (doubling the duration, pairs joined, when the store is full). A weighted
  statistic is a smooth function of ratios ``sum w x^a / sum w``; its variance follows from
  the block residuals ``S_b - m W_b`` (the ratio estimator; Cochran 1977, Sampling
  Techniques, ch. 6, from memory), which are nearly independent once a block is much longer
  than the integral time scale. That is blocking in time rather than in sample count.
* :func:`sample_weights`: the weights of a block for the run's weighting mode.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eddyvigil.stats.monomials import layout, merge_sums, shift_sums
from eddyvigil.stats.weighted_kernels import (
    time_block_sums,
    weighted_central_sums,
    weighted_mean,
    weighted_monomial_sums,
)

__all__ = ["WEIGHTINGS", "TimeBlocks", "WeightedMoments", "sample_weights"]

#: weighting modes: residence time (needs a weight column), inter-arrival time, none
WEIGHTINGS = ("transit", "arrival", "none")


def sample_weights(mode: str, times: np.ndarray, weights, last_t: float | None) -> np.ndarray:
    """Weights of one block's rows.

    ``transit``: the residence times given (Buchhave, George & Lumley 1979). ``arrival``: the
    time since the previous arrival (Barnett & Bentley 1974's inter-arrival weighting, which
    needs about 10 samples per integral time to be unbiased); the very first sample of a
    point, with no previous arrival, takes the block's mean gap. ``none``: 1 each (the
    arithmetic, velocity-biased statistics).
    """
    t = np.asarray(times, dtype=np.float64)
    if mode == "transit":
        return np.asarray(weights, dtype=np.float64)
    if mode == "none":
        return np.ones(t.shape[0])
    if mode != "arrival":
        raise ValueError(f"weighting must be one of {WEIGHTINGS}, not {mode!r}")
    w = np.empty(t.shape[0])
    if t.shape[0] == 0:
        return w
    w[1:] = np.diff(t)
    if last_t is not None:
        w[0] = t[0] - last_t
    else:
        w[0] = (t[-1] - t[0]) / (t.shape[0] - 1) if t.shape[0] > 1 else 1.0
    return w


def _combo_rows(lay, p: int) -> np.ndarray:
    rows = np.array(lay.combos[p], dtype=np.int64)
    return rows.reshape(len(lay.combos[p]), p)


class WeightedMoments:
    """Weighted mean and central co-moments of order 2-4 (sums ``sum w d^combo``).

    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> x, w = rng.normal(10.0, 2.0, size=(1000, 1)), rng.uniform(0.5, 1.5, 1000)
    >>> acc = WeightedMoments(1)
    >>> for part in np.array_split(np.arange(1000), 6):
    ...     acc = acc.update(x[part], w[part])
    >>> bool(np.isclose(acc.mean[0], np.average(x[:, 0], weights=w)))
    True
    >>> var = np.average((x[:, 0] - np.average(x[:, 0], weights=w)) ** 2, weights=w)
    >>> bool(np.isclose(acc.s2[0] / acc.weight, var))
    True
    """

    def __init__(self, m: int):
        self.layout = layout(m)
        self.n = 0
        self.weight = 0.0
        self.mean = np.zeros(m)
        self.s2 = np.zeros(len(self.layout.combos[2]))
        self.s3 = np.zeros(len(self.layout.combos[3]))
        self.s4 = np.zeros(len(self.layout.combos[4]))
        self._c = tuple(_combo_rows(self.layout, p) for p in (2, 3, 4))
        # third and fourth co-moments as entries of two small matrix products (BLAS): the
        # pair products P (n, q2) against d (n, m) and against P itself
        pair = {c: q for q, c in enumerate(self.layout.combos[2])}
        self._pairs = self._c[0]
        self._t3 = np.array([(pair[c[:2]], c[2]) for c in self.layout.combos[3]]).reshape(-1, 2)
        self._t4 = np.array([(pair[c[:2]], pair[c[2:]]) for c in self.layout.combos[4]])
        self._t4 = self._t4.reshape(-1, 2)

    @property
    def m(self) -> int:
        return self.layout.m

    def copy(self) -> WeightedMoments:
        new = WeightedMoments(self.m)
        new.n, new.weight = self.n, self.weight
        new.mean = self.mean.copy()
        new.s2, new.s3, new.s4 = self.s2.copy(), self.s3.copy(), self.s4.copy()
        return new

    def update(self, x: np.ndarray, w: np.ndarray) -> WeightedMoments:
        """Add rows ``x`` (n, m) with weights ``w`` (n,) >= 0; returns self."""
        x = np.ascontiguousarray(x, dtype=np.float64)
        w = np.ascontiguousarray(w, dtype=np.float64)
        if x.shape[0] == 0:
            return self
        # two passes: the block's weighted mean (about its first row, for digits), then the
        # weighted monomial sums of the deviations from it
        mean = np.empty(self.m)
        W = weighted_mean(x, w, mean)
        if W <= 0.0:
            self.n += x.shape[0]
            return self
        _, sums = weighted_monomial_sums(x, w, mean)
        m, n2, n3 = self.m, self.s2.shape[0], self.s3.shape[0]
        s2 = sums[m : m + n2]
        s3 = sums[m + n2 : m + n2 + n3]
        s4 = sums[m + n2 + n3 :]
        self._combine(x.shape[0], W, mean, s2, s3, s4)
        return self

    def update_loop(self, x: np.ndarray, w: np.ndarray) -> WeightedMoments:
        """:meth:`update` by the plain numba loop (a cross-check of the matrix form)."""
        x = np.ascontiguousarray(x, dtype=np.float64)
        w = np.ascontiguousarray(w, dtype=np.float64)
        if x.shape[0] == 0:
            return self
        mean = np.empty(self.m)
        s2, s3, s4 = np.empty_like(self.s2), np.empty_like(self.s3), np.empty_like(self.s4)
        W = weighted_central_sums(x, w, *self._c, mean, s2, s3, s4)
        self._combine(x.shape[0], W, mean, s2, s3, s4)
        return self

    def merge(self, other: WeightedMoments) -> WeightedMoments:
        """A new accumulator holding both inputs' samples (inputs untouched)."""
        if other.m != self.m:
            raise ValueError("cannot merge accumulators of different component counts")
        new = self.copy()
        new._combine(other.n, other.weight, other.mean, other.s2, other.s3, other.s4)
        return new

    def _combine(self, nb, Wb, mean_b, s2b, s3b, s4b) -> None:
        # Pébay's pairwise merge with the counts replaced by the weight totals: the same
        # binomial expansion of shifted deviations, each sample carrying its weight
        if Wb <= 0.0:
            self.n += nb
            return
        if self.weight <= 0.0:
            self.mean = np.array(mean_b, dtype=np.float64)
            self.s2, self.s3, self.s4 = s2b.copy(), s3b.copy(), s4b.copy()
        else:
            self.mean, self.s2, self.s3, self.s4 = merge_sums(
                self.layout, self.weight, self.mean, self.s2, self.s3, self.s4,
                Wb, np.asarray(mean_b, dtype=np.float64), s2b, s3b, s4b,
            )  # fmt: skip
        self.weight += float(Wb)
        self.n += nb

    def raw_about(self, ref: np.ndarray) -> np.ndarray:
        """Weighted means of every monomial of ``x - ref`` (degree 1-4, monomial layout)."""
        shift = self.mean - ref
        r2, r3, r4 = shift_sums(self.layout, self.weight, self.s2, self.s3, self.s4, shift)
        W = self.weight
        return np.concatenate([shift, r2 / W, r3 / W, r4 / W])


@dataclass(frozen=True)
class BlockChoice:
    """Errors from the time blocks: variance of each statistic, the block count used, the
    relative error of the standard error (about 1/sqrt(2(b-1)))."""

    variance: np.ndarray
    blocks: int
    relative_error: float
    block_s: float


class TimeBlocks:
    """Weight and weighted monomial sums (about ``ref``) of consecutive time blocks.

    Blocks have equal duration ``tau`` from the first arrival; when a new arrival falls past
    the last of ``capacity`` blocks, neighbours are joined in pairs and ``tau`` doubles, so
    the store stays between ``capacity/2`` and ``capacity`` blocks: O(1) memory per point.
    """

    def __init__(self, m: int, capacity: int = 256, samples_per_block: int = 8):
        lay = layout(m)
        self.m = m
        self.D = lay.n_monomials
        mono = np.full((self.D, 4), -1, dtype=np.int64)
        for p in (1, 2, 3, 4):
            for combo in lay.combos[p]:
                mono[lay.monomial_index(combo), :p] = combo
        self.mono = mono
        self.capacity = int(capacity)
        self.samples_per_block = samples_per_block
        self.ref: np.ndarray | None = None
        self.t_start = 0.0
        self.tau = 0.0
        self.Wb = np.zeros(self.capacity)
        self.Sb = np.zeros((self.capacity, self.D))
        self.used = 0  # blocks up to and including the latest one touched
        self.merged = False  # a union of independent records: takes no more samples

    def copy(self) -> TimeBlocks:
        new = TimeBlocks(self.m, self.capacity, self.samples_per_block)
        new.ref = None if self.ref is None else self.ref.copy()
        new.t_start, new.tau, new.used = self.t_start, self.tau, self.used
        new.Wb, new.Sb = self.Wb.copy(), self.Sb.copy()
        new.merged = self.merged
        return new

    def merge(self, other: TimeBlocks) -> TimeBlocks:
        """Both records' blocks as independent records: a new object holding ``self``'s blocks
        then ``other``'s (its sums moved exactly to ``self``'s reference, the binomial map of
        ``stats.blocking``). The record with the shorter blocks is first coarsened while that
        brings the two durations closer; neighbours are then joined while more than
        ``capacity`` blocks remain. Blocks of unequal weight are what the ratio estimator of
        :meth:`analyse` is for."""
        from eddyvigil.stats.blocking import _recentring_map

        if other.m != self.m or other.capacity != self.capacity:
            raise ValueError("cannot merge time blocks of different shapes")
        if other.ref is None or self.ref is None:
            new = (self if other.ref is None else other).copy()
            new.merged = True
            return new
        a, b = self.copy(), other.copy()
        short, long_ = (a, b) if a.tau < b.tau else (b, a)
        while abs(np.log(2.0 * short.tau / long_.tau)) < abs(np.log(short.tau / long_.tau)):
            short._coarsen()
        T, c = _recentring_map(layout(self.m), b.ref - a.ref)
        Sb = np.concatenate([a.Sb[: a.used], b.Sb[: b.used] @ T.T + b.Wb[: b.used, None] * c])
        Wb = np.concatenate([a.Wb[: a.used], b.Wb[: b.used]])
        tau = max(a.tau, b.tau)
        while Wb.shape[0] > self.capacity:
            k = Wb.shape[0]
            Sb = np.concatenate([Sb[0 : k - 1 : 2] + Sb[1:k:2], Sb[k - 1 :] if k % 2 else Sb[:0]])
            Wb = np.concatenate([Wb[0 : k - 1 : 2] + Wb[1:k:2], Wb[k - 1 :] if k % 2 else Wb[:0]])
            tau *= 2.0
        new = a
        new.Sb, new.Wb = np.zeros_like(self.Sb), np.zeros_like(self.Wb)
        new.Sb[: Wb.shape[0]], new.Wb[: Wb.shape[0]] = Sb, Wb
        new.used, new.tau, new.merged = Wb.shape[0], tau, True
        return new

    def update(self, x: np.ndarray, w: np.ndarray, t: np.ndarray) -> None:
        if x.shape[0] == 0:
            return
        if self.merged:
            raise ValueError("merged time blocks take no more samples")
        if self.ref is None:
            self.ref = np.array(x[0], dtype=np.float64)
            self.t_start = float(t[0])
            span = float(t[-1] - t[0])
            gap = span / (x.shape[0] - 1) if x.shape[0] > 1 and span > 0 else 1e-3
            self.tau = self.samples_per_block * gap
        last = int((float(t[-1]) - self.t_start) / self.tau)
        while last >= self.capacity:
            self._coarsen()
            last = int((float(t[-1]) - self.t_start) / self.tau)
        time_block_sums(
            np.ascontiguousarray(x, dtype=np.float64),
            np.ascontiguousarray(w, dtype=np.float64),
            np.ascontiguousarray(t, dtype=np.float64),
            self.t_start,
            self.tau,
            self.ref,
            self.mono,
            self.Wb,
            self.Sb,
        )
        self.used = max(self.used, last + 1)

    def _coarsen(self) -> None:
        half = self.capacity // 2
        self.Wb[:half] = self.Wb[0::2] + self.Wb[1::2]
        self.Sb[:half] = self.Sb[0::2] + self.Sb[1::2]
        self.Wb[half:] = 0.0
        self.Sb[half:] = 0.0
        self.used = (self.used + 1) // 2
        self.tau *= 2.0

    def block_means(self) -> np.ndarray:
        """(b, m) weighted means of the velocity in the non-empty blocks (stationarity)."""
        W = self.Wb[: self.used]
        keep = W > 0
        return self.Sb[: self.used, : self.m][keep] / W[keep, None] + self.ref

    def analyse(self, grad: np.ndarray, raw: np.ndarray, min_blocks: int = 64) -> BlockChoice:
        """Variance of each statistic with gradient ``grad`` (S, D) at the monomial means
        ``raw`` (D,) about ``ref``: the ratio-estimator variance of the block residuals.

        Levels: the stored blocks, then pairs of them, and so on. The level used is the
        coarsest with at least ``min_blocks`` blocks (the finest when none has); its value is
        the lugsail (Vats & Flegal) 2 V_j - V_(j-1) against the next finer level, which
        cancels the 1/(block length) bias of blocks a few integral times long, never below
        V_j.
        """
        b = self.used
        R = self.Sb[:b] - raw[None, :] * self.Wb[:b, None]  # residual of each block
        Z = R @ grad.T  # (b, S): each block's linearised contribution
        W = float(self.Wb[:b].sum())
        levels = []
        tau = self.tau
        while Z.shape[0] >= 2:
            nb = Z.shape[0]
            levels.append((nb, nb / (nb - 1.0) * np.sum(Z * Z, axis=0) / W**2, tau))
            if nb // 2 < 2:
                break
            Z = Z[: 2 * (nb // 2) : 2] + Z[1 : 2 * (nb // 2) : 2]
            tau *= 2.0
        if not levels:
            S = grad.shape[0]
            return BlockChoice(np.full(S, np.nan), b, np.nan, tau)
        j = 0
        for i, (nb, _, _) in enumerate(levels):
            if nb >= min_blocks:
                j = i
        nb, v, tj = levels[j]
        if j > 0:
            v = np.maximum(v, 2.0 * v - levels[j - 1][1])
        return BlockChoice(v, nb, float(np.sqrt(1.0 / (2.0 * (nb - 1)))), tj)
