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
        # Expansion of every central co-moment into monomial means about ref, as one table of
        # terms: raw[mono] * prod(-delta[comp]), summed per combo. Index D (past the end) of
        # the extended raw vector is 1 and index m of the extended -delta vector is 1, so
        # padding needs no special case and everything is vectorised.
        D = lay.n_monomials
        self.combo_list = [c for p in (2, 3, 4) for c in lay.combos[p]]
        monos, comps, owner = [], [], []
        for ci, c in enumerate(self.combo_list):
            p = len(c)
            for s in range(p + 1):  # raw moments: first-order terms do not vanish
                for sub in combinations(range(p), s):
                    comp = [c[i] for i in range(p) if i not in sub]
                    monos.append(lay.monomial_index(tuple(sorted(c[i] for i in sub))) if s else D)
                    comps.append(comp + [m] * (4 - len(comp)))
                    owner.append(ci)
        self._mono = np.array(monos)
        self._comp = np.array(comps)
        summing = np.zeros((len(monos), len(self.combo_list)))
        summing[np.arange(len(monos)), owner] = 1.0
        self._summing = summing
        self._combo_pos = {c: i for i, c in enumerate(self.combo_list)}

    def central_all(self, raw: np.ndarray, delta_rows: np.ndarray | None = None) -> np.ndarray:
        """All central co-moments (..., n2 + n3 + n4) from monomial means ``raw`` (..., D).

        ``delta_rows``: optional index per row of ``raw`` into a smaller set of rows that hold
        every distinct first-degree part (the complex-step probes share most of them).
        """
        m = self.m
        lead = raw[..., :m] if delta_rows is None else raw[delta_rows, :m]
        one = np.ones(lead.shape[:-1] + (1,), dtype=raw.dtype)
        negd_ext = np.concatenate([-lead, one], axis=-1)
        coef = np.prod(negd_ext[..., self._comp], axis=-1)
        if delta_rows is not None:
            coef = coef[np.searchsorted(delta_rows, np.minimum(np.arange(raw.shape[0]), delta_rows[-1]))]
        one = np.ones(raw.shape[:-1] + (1,), dtype=raw.dtype)
        raw_ext = np.concatenate([raw, one], axis=-1)
        return (raw_ext[..., self._mono] * coef) @ self._summing

    def evaluate(self, raw: np.ndarray, ref: np.ndarray, delta_rows=None) -> np.ndarray:
        """All statistics (..., S) from monomial means (..., D) about ``ref``."""
        m = self.m
        lay = self.layout
        cen = self.central_all(raw, delta_rows)
        pos = self._combo_pos
        cols = [ref[i] + raw[..., i] for i in range(m)]
        stress = [cen[..., pos[c]] for c in self.stress_combos]
        normal = stress[:m]
        if m == 3:
            k = 0.5 * (normal[0] + normal[1] + normal[2])
        elif m == 2:
            k = 0.75 * (normal[0] + normal[1])
        else:
            k = 1.5 * normal[0]
        third = [cen[..., pos[c]] for c in lay.combos[3]]
        fourth = [cen[..., pos[c]] for c in lay.combos[4]]
        skew = [cen[..., pos[(i, i, i)]] / normal[i] ** 1.5 for i in range(m)]
        flat = [cen[..., pos[(i, i, i, i)]] / normal[i] ** 2 for i in range(m)]
        parts = cols + stress + [k] + third + fourth + skew + flat
        return np.stack(parts, axis=-1)

    def values_and_gradient(self, raw: np.ndarray, ref: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Values (S,) and gradient (S, D) with respect to the monomial means."""
        raw = np.asarray(raw, dtype=np.float64)
        D = raw.shape[0]
        probe = np.tile(raw.astype(np.complex128), (D + 1, 1))
        probe[np.arange(D), np.arange(D)] += 1j * _STEP
        with np.errstate(invalid="ignore", divide="ignore"):
            # probes m..D-1 perturb only higher monomials: they share the base row's first-degree part
            rows = np.arange(self.m + 1)
            rows[-1] = D
            out = self.evaluate(probe, ref.astype(np.complex128), delta_rows=rows)
        values = out[D].real
        grad = (out[:D].imag / _STEP).T
        return values, grad
