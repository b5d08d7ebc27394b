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

_STEP = 1e-100  # complex step (tests): no subtractive cancellation, so it can be this small


class StatisticTable:
    """Moment-based statistics of ``columns``: names, and evaluation from monomial means."""

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
        self._owner = np.array(owner)
        self._combo_pos = {c: i for i, c in enumerate(self.combo_list)}

    def central_all(self, raw: np.ndarray) -> np.ndarray:
        """All central co-moments (..., n2 + n3 + n4) from monomial means ``raw`` (..., D)."""
        m = self.m
        one = np.ones(raw.shape[:-1] + (1,), dtype=raw.dtype)
        negd_ext = np.concatenate([-raw[..., :m], one], axis=-1)
        raw_ext = np.concatenate([raw, one], axis=-1)
        terms = raw_ext[..., self._mono] * np.prod(negd_ext[..., self._comp], axis=-1)
        return terms @ self._summing

    def evaluate(self, raw: np.ndarray, ref: np.ndarray) -> np.ndarray:
        """All statistics (..., S) from monomial means (..., D) about ``ref``."""
        m = self.m
        lay = self.layout
        cen = self.central_all(raw)
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

    def central_jacobian(self, raw: np.ndarray) -> np.ndarray:
        """d(central co-moments)/d(monomial means), (n2 + n3 + n4, D), real arithmetic."""
        m = self.m
        D = raw.shape[0]
        negd_ext = np.append(-raw[:m], 1.0)
        raw_ext = np.append(raw, 1.0)
        factors = negd_ext[self._comp]  # (T, 4)
        coef = np.prod(factors, axis=1)
        owner = self._owner
        J = np.zeros((len(self.combo_list), D + 1))
        np.add.at(J, (owner, self._mono), coef)
        # each -delta_i factor: d/d raw_i of (-delta_i) is -1; product of the other factors
        for p in range(4):
            others = np.prod(np.delete(factors, p, axis=1), axis=1)
            comp = self._comp[:, p]
            real = comp < m
            np.add.at(J, (owner[real], comp[real]), -raw_ext[self._mono[real]] * others[real])
        return J[:, :D]

    def values_and_gradient(
        self, raw: np.ndarray, ref: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Values (S,) and gradient (S, D) with respect to the monomial means."""
        raw = np.asarray(raw, dtype=np.float64)
        m, lay, pos = self.m, self.layout, self._combo_pos
        D = raw.shape[0]
        with np.errstate(invalid="ignore", divide="ignore"):
            values = self.evaluate(raw, ref)
            cen = self.central_all(raw)
            J = self.central_jacobian(raw)
            rows = [np.eye(D)[i] for i in range(m)]
            rows += [J[pos[c]] for c in self.stress_combos]
            normal = [J[pos[(i, i)]] for i in range(m)]
            kfac = {3: 0.5, 2: 0.75, 1: 1.5}[m]
            rows.append(kfac * np.sum(normal, axis=0))
            rows += [J[pos[c]] for c in lay.combos[3]]
            rows += [J[pos[c]] for c in lay.combos[4]]
            for i in range(m):
                c2, c3 = cen[pos[(i, i)]], cen[pos[(i, i, i)]]
                rows.append(J[pos[(i, i, i)]] / c2**1.5 - 1.5 * c3 / c2**2.5 * normal[i])
            for i in range(m):
                c2, c4 = cen[pos[(i, i)]], cen[pos[(i, i, i, i)]]
                rows.append(J[pos[(i, i, i, i)]] / c2**2 - 2.0 * c4 / c2**3 * normal[i])
        return values, np.array(rows)

    def values_and_gradient_complex_step(self, raw, ref):
        """Reference gradient by complex-step differentiation of :meth:`evaluate` (for tests)."""
        raw = np.asarray(raw, dtype=np.float64)
        D = raw.shape[0]
        probe = np.tile(raw.astype(np.complex128), (D + 1, 1))
        probe[np.arange(D), np.arange(D)] += 1j * _STEP
        with np.errstate(invalid="ignore", divide="ignore"):
            out = self.evaluate(probe, ref.astype(np.complex128))
        return out[D].real, (out[:D].imag / _STEP).T
