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

import numba
import numpy as np

from eddyvigil.stats.monomials import Layout
from eddyvigil.stats.names import (
    K_FACTORS,
    K_METHODS,
    k_from_normal_stresses,
    moment_statistic_names,
    stress_combinations,
)

__all__ = [
    "StatisticTable",
    "K_METHODS",
    "central_terms_and_jacobian",
    "chain_rule",
    "influence_autocovariances",
]

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
        self._stress_pos = np.array([pos[c] for c in stress], dtype=np.int64)
        self._normal_pos = np.array([pos[(i, i)] for i in range(m)], dtype=np.int64)
        self._cube_pos = np.array([pos[(i, i, i)] for i in range(m)], dtype=np.int64)
        self._quart_pos = np.array([pos[(i, i, i, i)] for i in range(m)], dtype=np.int64)
        self._third_pos = np.array([pos[c] for c in lay.combos[3]], dtype=np.int64)
        self._fourth_pos = np.array([pos[c] for c in lay.combos[4]], dtype=np.int64)
        self._kfac = K_FACTORS[m]

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
        chain_rule(
            raw,
            ref,
            cen,
            J,
            self._kfac,
            self._stress_pos,
            self._third_pos,
            self._fourth_pos,
            self._normal_pos,
            self._cube_pos,
            self._quart_pos,
            values,
            grad,
        )
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


@numba.njit(cache=True)
def central_terms_and_jacobian(raw, m, mono, comp, owner, terms, J):
    """Terms of the central co-moments (T,) and their Jacobian ``J`` (C, D) from monomial means.

    ``raw`` (D,) are the monomial means of ``x - ref``; ``delta = raw[:m]``. Term ``t`` of the
    expansion table (see :class:`StatisticTable`) is ``raw[mono[t]] * prod(-delta[comp[t]])``
    and belongs to co-moment ``owner[t]``; index D of ``raw`` and index m of ``-delta`` stand
    for 1. The Jacobian collects d/d raw[mono] (the product) and d/d delta_i (-1 times the
    product of the other factors), in that order.
    """
    D = raw.shape[0]
    T = mono.shape[0]
    J[:, :] = 0.0
    f = np.empty(4)
    for t in range(T):
        for p in range(4):
            c = comp[t, p]
            f[p] = -raw[c] if c < m else 1.0
        coef = f[0] * f[1] * f[2] * f[3]
        mo = mono[t]
        if mo < D:
            terms[t] = raw[mo] * coef
            J[owner[t], mo] += coef
        else:
            terms[t] = coef
    for p in range(4):
        for t in range(T):
            c = comp[t, p]
            if c >= m:
                continue
            others = 1.0
            first = True
            for q in range(4):
                if q == p:
                    continue
                cq = comp[t, q]
                fq = -raw[cq] if cq < m else 1.0
                if first:
                    others = fq
                    first = False
                else:
                    others = others * fq
            mo = mono[t]
            r = raw[mo] if mo < D else 1.0
            J[owner[t], c] += -r * others


@numba.njit(cache=True, error_model="numpy")
def chain_rule(raw, ref, cen, J, kfac, stress, third, fourth, c2, c3, c4, values, grad):
    """Every statistic (values (S,), gradient (S, D)) from the central co-moments ``cen`` and
    their Jacobian ``J``, in report order: means, stresses, k, third and fourth moments,
    skewness, flatness. ``stress``, ``third``, ``fourth`` are positions in ``cen`` in report
    order, ``c2``/``c3``/``c4`` those of uu, uuu, uuuu of each component; ``kfac`` is k's
    factor for the number of components. Same expressions as :meth:`StatisticTable.evaluate`.
    """
    m = c2.shape[0]
    D = J.shape[1]
    grad[:, :] = 0.0
    r = 0
    for i in range(m):  # means: ref + first-order monomial mean
        values[r] = ref[i] + raw[i]
        grad[r, i] = 1.0
        r += 1
    for q in stress:
        values[r] = cen[q]
        grad[r, :] = J[q, :]
        r += 1
    k = 0.0
    for i in range(m):
        k += cen[c2[i]]
    values[r] = kfac * k
    for d in range(D):
        acc = J[c2[0], d]
        for i in range(1, m):
            acc += J[c2[i], d]
        grad[r, d] = kfac * acc
    r += 1
    for pos in (third, fourth):
        for q in pos:
            values[r] = cen[q]
            grad[r, :] = J[q, :]
            r += 1
    # skewness uuu / uu^1.5, then flatness uuuu / uu^2: s_k / s2^p and its gradient
    for ck, p in ((c3, 1.5), (c4, 2.0)):
        for i in range(m):
            s2, sk = cen[c2[i]], cen[ck[i]]
            a, b = s2**p, p * sk / s2 ** (p + 1.0)
            values[r] = sk / a
            for d in range(D):
                grad[r, d] = J[ck[i], d] / a - b * J[c2[i], d]
            r += 1


@numba.njit(cache=True, error_model="numpy")
def influence_autocovariances(grad, n, S, Q, P, first, last, mu, c0, gamma):
    """Lag-0 and lag-1 autocovariances of every statistic's influence series, per level.

    The influence series of statistic ``s`` is ``grad[s] @ y`` over the monomial block means
    ``y``; a blocking level ``k`` keeps ``n[k]`` of them as sums: ``S`` (L, D), outer-product
    sums ``Q`` and symmetrised lag-one sums ``P`` (L, D, D), ``first``/``last`` (L, D). With
    ``g = grad[s]``, ``zq = g Q_k g``, ``zp = g P_k g``, ``zs``, ``zf``, ``zl`` the projections
    of ``S``, ``first``, ``last``, and ``zmu = g @ mu`` the global mean (all base blocks):

        c0[s, k]    = (zq - 2 zmu zs + n zmu^2) / n
        gamma[s, k] = (zp - zmu (2 zs - zf - zl) + (n - 1) zmu^2) / n

    i.e. about the *global* mean, not each level's own (REFERENCES §2 pitfall). A gradient
    touches only the monomials of its statistic's components and order, so only its nonzero
    entries enter the products (exact zeros add nothing; a NaN entry is kept).
    """
    n_stat, D = grad.shape
    L = Q.shape[0]
    idx = np.empty(D, dtype=np.int64)
    g = np.empty(D)
    for s in range(n_stat):
        nz = 0
        for a in range(D):
            if grad[s, a] != 0.0:
                idx[nz] = a
                g[nz] = grad[s, a]
                nz += 1
        zmu = 0.0
        for i in range(nz):
            zmu += g[i] * mu[idx[i]]
        for k in range(L):
            zq = 0.0
            zp = 0.0
            zs = 0.0
            zf = 0.0
            zl = 0.0
            for i in range(nz):
                a = idx[i]
                ga = g[i]
                rq = 0.0
                rp = 0.0
                for j in range(nz):
                    b = idx[j]
                    rq += Q[k, a, b] * g[j]
                    rp += P[k, a, b] * g[j]
                zq += ga * rq
                zp += ga * rp
                zs += ga * S[k, a]
                zf += ga * first[k, a]
                zl += ga * last[k, a]
            nk = n[k]
            c0[s, k] = (zq - 2.0 * zmu * zs + nk * zmu**2) / nk
            gamma[s, k] = (zp - zmu * (2.0 * zs - zf - zl) + (nk - 1.0) * zmu**2) / nk
