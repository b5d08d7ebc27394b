"""Statistics as functions of monomial means, and their gradients (the delta method).

Every statistic eddyvigil reports for its error bars (means, Reynolds stresses, k, third and
fourth moments, skewness, flatness) is a smooth function of the means of the monomials of
``x - ref`` up to degree four. Its standard error for correlated data follows from blocking the
per-block monomial means and projecting on the gradient (REFERENCES: the "influence series" of
a statistic is the gradient-weighted monomial series). The gradient is taken by complex-step
differentiation (Squire & Trapp 1998, SIAM Review 40:110), exact to rounding for these
polynomial and power functions, so one function serves values and gradients.
"""

from __future__ import annotations

from itertools import combinations

import numpy as np

from stats.monomials import Layout
from stats.names import moment_name

__all__ = ["StatisticTable", "K_METHODS"]

#: How k is formed from the components present (DESIGN §3; README states the 2-component one).
K_METHODS = {
    3: "k = (uu + vv + ww)/2",
    2: "k = 3/4 (uu + vv): two components, assuming ww = (uu + vv)/2 (common practice)",
    1: "k = 3/2 uu: one component, assuming isotropy (common practice)",
}

_STEP = 1e-100  # complex step; no subtractive cancellation, so it can be this small


class StatisticTable:
    """Names of the moment-based statistics of ``columns`` and their evaluation from monomial means."""

    def __init__(self, columns: tuple[str, ...], lay: Layout):
        self.columns = tuple(columns)
        self.layout = lay
        m = lay.m
        self.m = m
        stress = [(i, i) for i in range(m)] + [(i, j) for i in range(m) for j in range(i + 1, m)]
        self.stress_combos = stress
        names = [c.upper() for c in self.columns]
        names += [moment_name(self.columns, c) for c in stress]
        names.append("k")
        names += [moment_name(self.columns, c) for c in lay.combos[3]]
        names += [moment_name(self.columns, c) for c in lay.combos[4]]
        names += [f"skew_{c}" for c in self.columns]
        names += [f"flat_{c}" for c in self.columns]
        self.names = tuple(names)
        # expansion of every central co-moment into monomial means about ref
        self._terms = {}
        for p in (2, 3, 4):
            for c in lay.combos[p]:
                terms = []
                for s in range(p + 1):  # raw moments: first-order terms do not vanish
                    for sub in combinations(range(p), s):
                        comp = tuple(c[i] for i in range(p) if i not in sub)
                        mono = lay.monomial_index(tuple(sorted(c[i] for i in sub))) if s else -1
                        terms.append((mono, comp))
                self._terms[c] = terms

    def central(self, raw: np.ndarray, combo: tuple[int, ...]) -> np.ndarray:
        """Central co-moment from monomial means ``raw`` (..., D) about ref."""
        delta = raw[..., : self.m]
        out = 0.0
        for mono, comp in self._terms[combo]:
            v = raw[..., mono] if mono >= 0 else 1.0
            for c in comp:
                v = v * (-delta[..., c])
            out = out + v
        return out

    def evaluate(self, raw: np.ndarray, ref: np.ndarray) -> np.ndarray:
        """All statistics (..., S) from monomial means (..., D) about ``ref``."""
        m = self.m
        lay = self.layout
        cols = [ref[i] + raw[..., i] for i in range(m)]
        stress = [self.central(raw, c) for c in self.stress_combos]
        normal = stress[:m]
        if m == 3:
            k = 0.5 * (normal[0] + normal[1] + normal[2])
        elif m == 2:
            k = 0.75 * (normal[0] + normal[1])
        else:
            k = 1.5 * normal[0]
        third = [self.central(raw, c) for c in lay.combos[3]]
        fourth = [self.central(raw, c) for c in lay.combos[4]]
        skew = [self.central(raw, (i, i, i)) / normal[i] ** 1.5 for i in range(m)]
        flat = [self.central(raw, (i, i, i, i)) / normal[i] ** 2 for i in range(m)]
        parts = cols + stress + [k] + third + fourth + skew + flat
        return np.stack([np.broadcast_to(p, raw.shape[:-1]) for p in parts], axis=-1)

    def values_and_gradient(self, raw: np.ndarray, ref: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Values (S,) and gradient (S, D) with respect to the monomial means."""
        raw = np.asarray(raw, dtype=np.float64)
        D = raw.shape[0]
        probe = np.tile(raw.astype(np.complex128), (D + 1, 1))
        probe[np.arange(D), np.arange(D)] += 1j * _STEP
        with np.errstate(invalid="ignore", divide="ignore"):
            out = self.evaluate(probe, ref.astype(np.complex128))
        values = out[D].real
        grad = (out[:D].imag / _STEP).T
        return values, grad
