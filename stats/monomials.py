"""Index layout of co-moments and monomials for m velocity components.

A *combo* is a sorted index tuple such as ``(0, 1, 1)`` (the co-moment ``uvv``). Monomials of
degree 1-4 are laid out degree by degree, degree one first so that monomial ``i`` is component
``i`` (the kernels in ``kernels.py`` write their sums in this order). The tables here let
``shift_sums`` and ``block_sums`` move sums from one centre to another (the merge formula of
Pébay 2008, in its multivariate form: expand the product of shifted deviations over subsets).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from itertools import combinations, combinations_with_replacement

import numpy as np

from eddyvigil.stats.kernels import RecentreTable, ShiftTable, merge_comoments, shift_comoments

__all__ = ["Layout", "layout", "merge_sums", "shift_sums"]


@dataclass(frozen=True)
class Layout:
    m: int
    combos: tuple[tuple[tuple[int, ...], ...], ...]  # combos[p] for p = 0..4 (0: (), 1: (i,))
    index: dict  # combo tuple -> index within its order
    mono_offset: tuple[int, ...]  # start of each degree (1..4) in the monomial vector
    #: central sums to another centre: one row per (target combo, subset of its positions
    #: with size != 1); a ShiftTable's fields as a plain tuple (the kernels' bundle form)
    shift: tuple
    #: monomial sums to another centre (first-order sums need not vanish): one row per
    #: (target monomial, subset of its positions); source monomial index or -1 (the count);
    #: a RecentreTable's fields as a plain tuple
    recentre: tuple

    @property
    def n_monomials(self) -> int:
        return sum(len(self.combos[p]) for p in (1, 2, 3, 4))

    def monomial_index(self, combo: tuple[int, ...]) -> int:
        return self.mono_offset[len(combo) - 1] + self.index[combo]


@lru_cache(maxsize=8)
def layout(m: int) -> Layout:
    combos = tuple(tuple(combinations_with_replacement(range(m), p)) for p in range(5))
    index = {}
    for p in range(5):
        for q, c in enumerate(combos[p]):
            index[c] = q
    offs = []
    off = 0
    for p in (1, 2, 3, 4):
        offs.append(off)
        off += len(combos[p])
    rows = []
    for p in (2, 3, 4):
        for q, c in enumerate(combos[p]):
            for s in range(p + 1):
                if s == 1:
                    continue
                for sub in combinations(range(p), s):
                    comp = [c[i] for i in range(p) if i not in sub]
                    src = index[tuple(sorted(c[i] for i in sub))] if s >= 2 else 0
                    rows.append((p, q, s, src, comp + [-1] * (4 - len(comp))))
    r_rows = []
    for p in (1, 2, 3, 4):
        for c in combos[p]:
            target = offs[p - 1] + index[c]
            for s in range(p + 1):
                for sub in combinations(range(p), s):
                    comp = [c[i] for i in range(p) if i not in sub]
                    src = offs[s - 1] + index[tuple(sorted(c[i] for i in sub))] if s else -1
                    r_rows.append((target, src, comp + [-1] * (4 - len(comp))))
    return Layout(
        m=m,
        combos=combos,
        index=index,
        mono_offset=tuple(offs),
        shift=tuple(
            ShiftTable(
                order=np.array([r[0] for r in rows], dtype=np.int64),
                target=np.array([r[1] for r in rows], dtype=np.int64),
                src_order=np.array([r[2] for r in rows], dtype=np.int64),
                src=np.array([r[3] for r in rows], dtype=np.int64),
                comp=np.array([r[4] for r in rows], dtype=np.int64),
            )
        ),
        recentre=tuple(
            RecentreTable(
                target=np.array([r[0] for r in r_rows], dtype=np.int64),
                src=np.array([r[1] for r in r_rows], dtype=np.int64),
                comp=np.array([r[2] for r in r_rows], dtype=np.int64),
            )
        ),
    )


def merge_sums(lay: Layout, na, mean_a, a2, a3, a4, nb, mean_b, b2, b3, b4):
    """Pairwise merge of two sets of central sums (Pébay 2008): both re-centred on the
    combined mean, then added. Returns (mean, s2, s3, s4) as new arrays."""
    mean = np.empty_like(mean_a)
    out = (np.empty_like(a2), np.empty_like(a3), np.empty_like(a4))
    merge_comoments(
        float(na), mean_a, (a2, a3, a4), float(nb), mean_b, (b2, b3, b4), lay.shift, mean, out
    )
    o2, o3, o4 = out
    return mean, o2, o3, o4


def shift_sums(lay: Layout, n: float, s2, s3, s4, shift):
    """Sums of products of ``(x - c) + shift`` from central sums about ``c``.

    Central sums (first-order sums zero) of ``n`` samples about their mean ``c`` become sums
    about ``c - shift``. Returns new arrays (inputs untouched).
    """
    out = (np.empty_like(s2), np.empty_like(s3), np.empty_like(s4))
    shift_comoments(float(n), (s2, s3, s4), np.asarray(shift, dtype=np.float64), lay.shift, out)
    o2, o3, o4 = out
    return o2, o3, o4
