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

from eddyvigil.stats.kernels import ReportOrder, central_terms_and_jacobian, chain_rule
from eddyvigil.stats.monomials import Layout
from eddyvigil.stats.names import (
    K_FACTORS,
    K_METHODS,
    k_from_normal_stresses,
    moment_statistic_names,
    stress_combinations,
)

__all__ = ["StatisticTable", "K_METHODS"]

_STEP = 1e-100  # complex step (tests): no subtractive cancellation, so it can be this small


class StatisticTable:
    """Moment-based statistics of ``columns``: names, and evaluation from monomial means."""

    def __init__(self, columns: tuple[str, ...], lay: Layout):
        self.columns = tuple(columns)
        self.layout = lay
        m = lay.m
        self.m = m
        stress = stress_combinations(m)
        self.stress_combos = stress
        # the names and their order come from the one table (names.py); evaluate() stacks the
        # values in that order: means, stresses, k, third, fourth, skewness, flatness
        self.names = moment_statistic_names(self.columns)
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
        self._mono = np.array(monos, dtype=np.int64)
        self._comp = np.array(comps, dtype=np.int64)
        summing = np.zeros((len(monos), len(self.combo_list)))
        summing[np.arange(len(monos)), owner] = 1.0
        self._summing = summing
        self._owner = np.array(owner, dtype=np.int64)
        pos = {c: i for i, c in enumerate(self.combo_list)}
        self._combo_pos = pos
        # positions in combo_list of what values_and_gradient picks, in report order
        # the kernel's bundle: a plain tuple, see kernels.py
        self._report = tuple(
            ReportOrder(
                kfac=K_FACTORS[m],
                stress=np.array([pos[c] for c in stress], dtype=np.int64),
                third=np.array([pos[c] for c in lay.combos[3]], dtype=np.int64),
                fourth=np.array([pos[c] for c in lay.combos[4]], dtype=np.int64),
                c2=np.array([pos[(i, i)] for i in range(m)], dtype=np.int64),
                c3=np.array([pos[(i, i, i)] for i in range(m)], dtype=np.int64),
                c4=np.array([pos[(i, i, i, i)] for i in range(m)], dtype=np.int64),
            )
        )

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
        k = k_from_normal_stresses(normal)
        third = [cen[..., pos[c]] for c in lay.combos[3]]
        fourth = [cen[..., pos[c]] for c in lay.combos[4]]
        skew = [cen[..., pos[(i, i, i)]] / normal[i] ** 1.5 for i in range(m)]
        flat = [cen[..., pos[(i, i, i, i)]] / normal[i] ** 2 for i in range(m)]
        parts = cols + stress + [k] + third + fourth + skew + flat
        return np.stack(parts, axis=-1)

    def values_and_gradient(
        self, raw: np.ndarray, ref: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Values (S,) and gradient (S, D) with respect to the monomial means.

        The central co-moments and their Jacobian come from one pass over the expansion table
        (:func:`central_terms_and_jacobian`), then :func:`chain_rule` gives every statistic.
        """
        raw = np.ascontiguousarray(raw, dtype=np.float64)
        ref = np.ascontiguousarray(ref, dtype=np.float64)
        m, D = self.m, raw.shape[0]
        terms = np.empty(self._mono.shape[0])
        J = np.empty((len(self.combo_list), D))
        central_terms_and_jacobian(raw, m, self._mono, self._comp, self._owner, terms, J)
        cen = terms @ self._summing  # as central_all sums them
        S = len(self.names)
        values = np.empty(S)
        grad = np.empty((S, D))
        chain_rule(raw, ref, cen, J, self._report, values, grad)
        return values, grad

    def values_and_gradient_complex_step(self, raw, ref):
        """Reference gradient by complex-step differentiation of :meth:`evaluate` (for tests)."""
        raw = np.asarray(raw, dtype=np.float64)
        D = raw.shape[0]
        probe = np.tile(raw.astype(np.complex128), (D + 1, 1))
        probe[np.arange(D), np.arange(D)] += 1j * _STEP
        with np.errstate(invalid="ignore", divide="ignore"):
            out = self.evaluate(probe, ref.astype(np.complex128))
        return out[D].real, (out[:D].imag / _STEP).T

