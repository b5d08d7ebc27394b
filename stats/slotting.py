"""Autocorrelation of randomly sampled data by slotting, and the integral time scale from it
with a standard error.

Slotting (Mayo, Shay & Riter 1974, from memory): every pair of samples whose time difference
falls in slot ``k`` (``(k - 1/2) dtau <= t_j - t_i < (k + 1/2) dtau``) adds its product to that
slot. Lag 0 is excluded (uncorrelated noise collects there). Local normalisation (Tummers &
Passchier 1996, from memory) divides by the root of the two sums of squares over the same
pairs, which bounds |rho| <= 1 and lowers the variance. Pairs are weighted by ``w_i w_j``.

Online: each slot keeps the pair sums of ``a = x - ref`` (``sum ww``, ``sum ww a_i``,
``sum ww a_j``, ``sum ww a_i a_j``, ``sum ww a_i^2``, ``sum ww a_j^2``), so fluctuations about
the final mean come out exactly at evaluation; the tail of the previous block (the samples
within the largest lag of its end) is kept so that pairs across block ends count.

Error of T_int (the method). The integral to the first zero crossing (the *pilot*) has no
usable error: where that crossing falls depends on the same noise as the slots before it, and
neither a jackknife nor a bootstrap over time sees that (measured: 0.90 coverage, estimated
error 0.7 of the true spread). So the T_int reported sums rho over a window of fixed length,
``WINDOW`` = 5 pilot integral times (for an exponential rho the part left out is e^-5 = 0.7 %;
the window's length hardly moves the sum there, so the sum is a smooth function of the slot
sums). The pair sums are kept per *time group* (the group of the later sample of each pair;
groups of equal duration from the first arrival, joined in pairs as the record grows, so
16-32 of them are held), and the variance of the window sum is the delete-a-group jackknife
over consecutive time groups (Quenouille 1956, Tukey 1958; groups of consecutive data for
dependent series: Künsch 1989, Ann. Statist. 17:1217; from memory), in the lugsail form
``max(V, 2 V(pairs of groups) - V(groups))`` that the time blocks use (Vats & Flegal 2022, as
in ``stats.weighted``). Where the window runs past the last slot (data rates of more than
about 25 samples per T_int with 128 slots), the pilot is reported with no error.
"""

from __future__ import annotations

import math

import numpy as np

from eddyvigil.stats.weighted_kernels import slot_pairs

__all__ = ["GROUPS", "SlottedCorrelation", "integral_time"]

#: time groups held (between GROUPS/2 and GROUPS once the record is long)
GROUPS = 32
#: fewest fine groups (non-empty) for a standard error of T_int
MIN_GROUPS = 16
#: the interval's T_int sums rho over WINDOW pilot integral times (pilot: to the first zero)
WINDOW = 5.0


def integral_time(rho: np.ndarray, dtau: float) -> float:
    """Integral of rho over lag: rho(0) = 1, then slot by slot until the first slot at or
    below zero (the ACF's noisy tail beyond it is left out: common practice). NaN when no
    zero crossing lies within the slots (the lag range is too short to say)."""
    k = first_crossing(rho)
    if k < 0:
        return math.nan
    return (0.5 + float(np.sum(rho[1:k]))) * dtau


def first_crossing(rho: np.ndarray) -> int:
    """Index of the first slot (from 1) at or below zero; -1 when none, or a NaN comes first."""
    for k in range(1, rho.shape[0]):
        r = rho[k]
        if not math.isfinite(r):
            return -1
        if r <= 0.0:
            return k
    return -1


def _rho(sums: np.ndarray, mu: np.ndarray) -> np.ndarray:
    """Locally normalised rho of slots 1.. from pair sums (..., m, slots, 6) about ``mu`` (m,)."""
    mc = mu[:, None]
    s0, s1, s2, s3, s4, s5 = (sums[..., 1:, q] for q in range(6))
    cross = s3 - mc * (s1 + s2) + mc * mc * s0
    sq_i = s4 - 2 * mc * s1 + mc * mc * s0
    sq_j = s5 - 2 * mc * s2 + mc * mc * s0
    with np.errstate(invalid="ignore", divide="ignore"):
        r = cross / np.sqrt(sq_i * sq_j)
    return np.where(s0 > 0, r, np.nan)


def _shifted(sums: np.ndarray, d: np.ndarray) -> np.ndarray:
    """Pair sums (..., m, slots, 6) of ``a + d`` from those of ``a`` (exact binomial move)."""
    out = sums.copy()
    d = d[:, None]
    s0, s1, s2 = sums[..., 0], sums[..., 1], sums[..., 2]
    out[..., 1] = s1 + d * s0
    out[..., 2] = s2 + d * s0
    out[..., 3] = sums[..., 3] + d * (s1 + s2) + d * d * s0
    out[..., 4] = sums[..., 4] + 2 * d * s1 + d * d * s0
    out[..., 5] = sums[..., 5] + 2 * d * s2 + d * d * s0
    return out


def _paired(groups: np.ndarray) -> np.ndarray:
    """Neighbouring groups joined in pairs (an odd last one stays alone)."""
    b = groups.shape[0]
    out = groups[0 : b - 1 : 2] + groups[1:b:2]
    if b % 2:
        out = np.concatenate([out, groups[-1:]])
    return out


class SlottedCorrelation:
    """Slotted, locally normalised autocorrelation of each component, per time group.

    >>> import numpy as np
    >>> rng = np.random.default_rng(2)
    >>> t = np.cumsum(rng.exponential(1e-3, 20_000))
    >>> x = rng.normal(size=(20_000, 1))            # white noise: rho = 0 at every lag
    >>> sc = SlottedCorrelation(1, dtau=1e-3, nslots=8).update(x, np.ones(20_000), t)
    >>> bool(np.all(np.abs(sc.rho(x.mean(axis=0))[0, 1:]) < 0.05))
    True
    """

    def __init__(self, m: int, dtau: float, nslots: int = 128, capacity: int = GROUPS):
        if not (dtau > 0 and nslots >= 2 and capacity >= 2 and capacity % 2 == 0):
            raise ValueError("slotting needs dtau > 0, at least 2 slots and an even capacity")
        self.m, self.dtau, self.nslots = m, float(dtau), int(nslots)
        self.capacity = int(capacity)
        self.groups = np.zeros((self.capacity, m, self.nslots, 6))
        self.used = 0
        self.t0 = 0.0
        self.group_s = self.nslots * self.dtau
        self.ref: np.ndarray | None = None
        self.merged = False  # a union of independent records: takes no more samples
        self._tail_t = np.empty(0)
        self._tail_a = np.empty((0, m))
        self._tail_w = np.empty(0)

    def copy(self) -> SlottedCorrelation:
        new = SlottedCorrelation(self.m, self.dtau, self.nslots, self.capacity)
        new.groups = self.groups.copy()
        new.used, new.t0, new.group_s, new.merged = self.used, self.t0, self.group_s, self.merged
        new.ref = None if self.ref is None else self.ref.copy()
        new._tail_t, new._tail_a = self._tail_t.copy(), self._tail_a.copy()
        new._tail_w = self._tail_w.copy()
        return new

    @property
    def sums(self) -> np.ndarray:
        """(m, nslots, 6) pair sums over every group."""
        return self.groups[: self.used].sum(axis=0)

    def update(self, x: np.ndarray, w: np.ndarray, t: np.ndarray) -> SlottedCorrelation:
        if x.shape[0] == 0:
            return self
        if self.merged:
            raise ValueError("a merged slotted correlation takes no more samples")
        t = np.asarray(t, dtype=np.float64)
        if self.ref is None:
            self.ref = np.array(x[0], dtype=np.float64)
            self.t0 = float(t[0])
        last = int((float(t[-1]) - self.t0) / self.group_s)
        while last >= self.capacity:
            self._coarsen()
            last = int((float(t[-1]) - self.t0) / self.group_s)
        a = np.concatenate([self._tail_a, np.asarray(x, dtype=np.float64) - self.ref])
        tt = np.concatenate([self._tail_t, t])
        ww = np.concatenate([self._tail_w, np.asarray(w, dtype=np.float64)])
        group = np.clip(((tt - self.t0) / self.group_s).astype(np.int64), 0, self.capacity - 1)
        first_new = self._tail_t.shape[0]
        slot_pairs(tt, a, ww, group, first_new, self.dtau, self.nslots, self.groups)
        self.used = max(self.used, last + 1)
        keep = tt > tt[-1] - self.nslots * self.dtau
        self._tail_t, self._tail_a, self._tail_w = tt[keep], a[keep], ww[keep]
        return self

    def _coarsen(self) -> None:
        half = self.capacity // 2
        self.groups[:half] = self.groups[0::2] + self.groups[1::2]
        self.groups[half:] = 0.0
        self.used = (self.used + 1) // 2
        self.group_s *= 2.0

    def merge(self, other: SlottedCorrelation) -> SlottedCorrelation:
        """Both records' pairs, as independent records (no pair across them): a new object
        whose groups are ``self``'s then ``other``'s (moved to ``self``'s reference), joined
        in neighbouring pairs while more than ``capacity``. Slot widths must agree."""
        if (other.m, other.nslots) != (self.m, self.nslots) or other.dtau != self.dtau:
            raise ValueError(
                f"slotted correlations differ (slot {self.dtau:.6g} s x {self.nslots} vs "
                f"{other.dtau:.6g} s x {other.nslots}): records at different data rates"
            )
        if other.ref is None:
            new = self.copy()
        elif self.ref is None:
            new = other.copy()
        else:
            new = self.copy()
            theirs = _shifted(other.groups[: other.used], other.ref - self.ref)
            stacked = np.concatenate([self.groups[: self.used], theirs])
            while stacked.shape[0] > self.capacity:
                stacked = _paired(stacked)
            new.groups = np.zeros_like(self.groups)
            new.groups[: stacked.shape[0]] = stacked
            new.used = stacked.shape[0]
        new.merged = True
        new._tail_t = np.empty(0)
        new._tail_a = np.empty((0, self.m))
        new._tail_w = np.empty(0)
        return new

    def rho(self, mean: np.ndarray) -> np.ndarray:
        """(m, nslots) locally normalised rho of the fluctuations about ``mean``; slot 0 is
        1 by definition; NaN where a slot has no pair."""
        out = np.full((self.m, self.nslots), np.nan)
        out[:, 0] = 1.0
        if self.ref is None:
            return out
        out[:, 1:] = _rho(self.sums, np.asarray(mean, dtype=np.float64) - self.ref)
        return out

    def pairs(self) -> np.ndarray:
        """(nslots,) weight of pairs per slot, first component (all share the pairs)."""
        return self.sums[0, :, 0].copy()

    def integral_times(self, mean: np.ndarray) -> np.ndarray:
        return np.array([integral_time(r, self.dtau) for r in self.rho(mean)])

    def integral_times_with_errors(self, mean) -> tuple[np.ndarray, np.ndarray, int]:
        """``(tint, se, groups)`` per component (module docstring): T_int summed over the
        window of WINDOW pilot integral times, its jackknife standard error over the time
        groups, and the count of paired groups the error rests on (degrees of freedom: one
        fewer). Where the window passes the last slot: the pilot value (first zero crossing)
        with no error; NaN error also with fewer than MIN_GROUPS non-empty groups."""
        m = self.m
        tint = np.full(m, np.nan)
        se = np.full(m, np.nan)
        if self.ref is None:
            return tint, se, 0
        mu = np.asarray(mean, dtype=np.float64) - self.ref
        G = self.groups[: self.used]
        G = G[G[:, 0, :, 0].sum(axis=1) > 0]
        S = G.sum(axis=0)
        rho = _rho(S, mu)  # (m, nslots - 1): slot k at index k - 1
        window = np.zeros((m, self.nslots - 1), dtype=bool)
        for c in range(m):
            k = first_crossing(np.r_[1.0, rho[c]])
            if k < 0:
                continue
            pilot = 0.5 + float(np.sum(rho[c, : k - 1]))
            last = int(math.ceil(WINDOW * pilot))  # slots 1..last
            if last >= self.nslots or not np.all(np.isfinite(rho[c, :last])):
                tint[c] = pilot * self.dtau
                continue
            window[c, :last] = True
            tint[c] = (0.5 + float(np.sum(rho[c, :last]))) * self.dtau
        if G.shape[0] < MIN_GROUPS or not window.any():
            return tint, se, 0

        def jackknife(groups):
            b = groups.shape[0]
            reps = np.where(window, _rho(S[None] - groups, mu), 0.0).sum(axis=-1)  # (b, m)
            return (b - 1) / b * np.sum((reps - reps.mean(axis=0)) ** 2, axis=0)

        pairs = _paired(G)
        v1 = jackknife(G)
        v = np.maximum(v1, 2.0 * jackknife(pairs) - v1)
        se = np.where(window.any(axis=1), np.sqrt(v) * self.dtau, np.nan)
        return tint, se, int(pairs.shape[0])
