"""Autocorrelation of randomly sampled data by slotting, and the integral time scale from it.

Slotting (Mayo, Shay & Riter 1974, from memory): every pair of samples whose time difference
falls in slot ``k`` (``(k - 1/2) dtau <= t_j - t_i < (k + 1/2) dtau``) adds its product to that
slot. Lag 0 is excluded (uncorrelated noise collects there). Local normalisation (Tummers &
Passchier 1996, from memory) divides by the root of the two sums of squares over the same
pairs, which bounds |rho| <= 1 and lowers the variance. Pairs are weighted by ``w_i w_j``.

Online: each slot keeps the pair sums of ``a = x - ref`` (``sum ww``, ``sum ww a_i``,
``sum ww a_j``, ``sum ww a_i a_j``, ``sum ww a_i^2``, ``sum ww a_j^2``), so fluctuations about
the final mean come out exactly at evaluation; the tail of the previous block (the samples
within the largest lag of its end) is kept so that pairs across block ends count.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["SlottedCorrelation", "integral_time"]


@numba.njit(cache=True, nogil=True)
def _slot_pairs(t, a, w, first_new, dtau, nslots, sums):
    """Pairs (i < j, j >= first_new) with lag in slots 1..nslots-1: sums (m, nslots, 6)."""
    n, m = a.shape
    max_lag = (nslots - 0.5) * dtau
    for j in range(first_new, n):
        i = j - 1
        while i >= 0:
            lag = t[j] - t[i]
            if lag >= max_lag:
                break
            k = int(lag / dtau + 0.5)
            if k >= 1:
                ww = w[i] * w[j]
                for c in range(m):
                    ai = a[i, c]
                    aj = a[j, c]
                    s = sums[c, k]
                    s[0] += ww
                    s[1] += ww * ai
                    s[2] += ww * aj
                    s[3] += ww * ai * aj
                    s[4] += ww * ai * ai
                    s[5] += ww * aj * aj
            i -= 1


def integral_time(rho: np.ndarray, dtau: float) -> float:
    """Integral of rho over lag: rho(0) = 1, then slot by slot until the first slot at or
    below zero (the ACF's noisy tail beyond it is left out: common practice). NaN when no
    zero crossing lies within the slots (the lag range is too short to say)."""
    total = 0.5
    for r in rho[1:]:
        if not math.isfinite(r):
            return math.nan
        if r <= 0.0:
            return total * dtau
        total += r
    return math.nan


class SlottedCorrelation:
    """Slotted, locally normalised autocorrelation of each component.

    >>> import numpy as np
    >>> rng = np.random.default_rng(2)
    >>> t = np.cumsum(rng.exponential(1e-3, 20_000))
    >>> x = rng.normal(size=(20_000, 1))            # white noise: rho = 0 at every lag
    >>> sc = SlottedCorrelation(1, dtau=1e-3, nslots=8).update(x, np.ones(20_000), t)
    >>> bool(np.all(np.abs(sc.rho(x.mean(axis=0))[0, 1:]) < 0.05))
    True
    """

    def __init__(self, m: int, dtau: float, nslots: int = 128):
        if not (dtau > 0 and nslots >= 2):
            raise ValueError("slotting needs dtau > 0 and at least 2 slots")
        self.m, self.dtau, self.nslots = m, float(dtau), int(nslots)
        self.sums = np.zeros((m, self.nslots, 6))
        self.ref: np.ndarray | None = None
        self._tail_t = np.empty(0)
        self._tail_a = np.empty((0, m))
        self._tail_w = np.empty(0)

    def update(self, x: np.ndarray, w: np.ndarray, t: np.ndarray) -> SlottedCorrelation:
        if x.shape[0] == 0:
            return self
        if self.ref is None:
            self.ref = np.array(x[0], dtype=np.float64)
        a = np.concatenate([self._tail_a, np.asarray(x, dtype=np.float64) - self.ref])
        tt = np.concatenate([self._tail_t, np.asarray(t, dtype=np.float64)])
        ww = np.concatenate([self._tail_w, np.asarray(w, dtype=np.float64)])
        first_new = self._tail_t.shape[0]
        _slot_pairs(tt, a, ww, first_new, self.dtau, self.nslots, self.sums)
        keep = tt > tt[-1] - self.nslots * self.dtau
        self._tail_t, self._tail_a, self._tail_w = tt[keep], a[keep], ww[keep]
        return self

    def rho(self, mean: np.ndarray) -> np.ndarray:
        """(m, nslots) locally normalised rho of the fluctuations about ``mean``; slot 0 is
        1 by definition; NaN where a slot has no pair."""
        out = np.full((self.m, self.nslots), np.nan)
        out[:, 0] = 1.0
        if self.ref is None:
            return out
        mu = np.asarray(mean, dtype=np.float64) - self.ref
        for c in range(self.m):
            s0, s1, s2, s3, s4, s5 = (self.sums[c, 1:, q] for q in range(6))
            mc = mu[c]
            cross = s3 - mc * (s1 + s2) + mc * mc * s0
            sq_i = s4 - 2 * mc * s1 + mc * mc * s0
            sq_j = s5 - 2 * mc * s2 + mc * mc * s0
            with np.errstate(invalid="ignore", divide="ignore"):
                r = cross / np.sqrt(sq_i * sq_j)
            out[c, 1:] = np.where(s0 > 0, r, np.nan)
        return out

    def pairs(self) -> np.ndarray:
        """(nslots,) weight of pairs per slot, first component (all share the pairs)."""
        return self.sums[0, :, 0].copy()

    def integral_times(self, mean: np.ndarray) -> np.ndarray:
        return np.array([integral_time(r, self.dtau) for r in self.rho(mean)])
