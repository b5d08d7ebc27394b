"""MomentAccumulator: count, means and central co-moments of order 2-4 of m components.

One-pass over the stream, mergeable: ``update`` computes the moments of a block with a two-pass
kernel and combines them with what came before by the same pairwise formula that ``merge``
uses (Chan, Golub & LeVeque 1979; Pébay 2008, multivariate form). Moments are population
moments (divide by N), as <u'v'> is defined.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eddyvigil.stats.kernels import central_sums, kernel_view
from eddyvigil.stats.monomials import Layout, layout, merge_sums, shift_sums

__all__ = ["MomentAccumulator", "Moments"]


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=np.float64, copy=True)
    a.setflags(write=False)
    return a


@dataclass(frozen=True)
class Moments:
    """Population moments: ``mean`` (m,), ``m2``/``m3``/``m4`` per combo (NaN if n == 0)."""

    n: int
    mean: np.ndarray
    m2: np.ndarray
    m3: np.ndarray
    m4: np.ndarray
    layout: Layout

    def co_moment(self, combo: tuple[int, ...]) -> float:
        arr = {2: self.m2, 3: self.m3, 4: self.m4}[len(combo)]
        return float(arr[self.layout.index[tuple(sorted(combo))]])

    def covariance(self) -> np.ndarray:
        """The Reynolds-stress tensor <u_i' u_j'> (m, m)."""
        m = self.layout.m
        out = np.empty((m, m))
        for (i, j), q in ((c, self.layout.index[c]) for c in self.layout.combos[2]):
            out[i, j] = out[j, i] = self.m2[q]
        return out


class MomentAccumulator:
    """Streaming co-moments of order 2-4 (sums of central products, Pébay's M_p).

    >>> import numpy as np
    >>> x = np.random.default_rng(0).normal(size=(1000, 2)) + [10.0, 0.0]
    >>> acc = MomentAccumulator(2)
    >>> for part in np.array_split(x, 7):
    ...     acc = acc.update(part)
    >>> mo = acc.snapshot()
    >>> acc.n, bool(np.allclose(mo.mean, x.mean(axis=0)))
    (1000, True)
    >>> bool(np.allclose(mo.covariance(), np.cov(x.T, bias=True)))
    True
    >>> from scipy import stats
    >>> bool(np.isclose(mo.co_moment((0, 0, 0)), stats.moment(x[:, 0], 3)))
    True
    """

    def __init__(self, m: int):
        if not 1 <= m <= 3:
            raise ValueError(f"1 to 3 velocity components are supported, got {m}")
        self.layout = layout(m)
        self.n = 0
        self.mean = np.zeros(m)
        self.s2 = np.zeros(len(self.layout.combos[2]))
        self.s3 = np.zeros(len(self.layout.combos[3]))
        self.s4 = np.zeros(len(self.layout.combos[4]))

    @classmethod
    def empty(cls, m: int) -> MomentAccumulator:
        return cls(m)

    @property
    def m(self) -> int:
        return self.layout.m

    def copy(self) -> MomentAccumulator:
        new = MomentAccumulator(self.m)
        new.n = self.n
        new.mean = self.mean.copy()
        new.s2, new.s3, new.s4 = self.s2.copy(), self.s3.copy(), self.s4.copy()
        return new

    def __getstate__(self):
        return {k: v for k, v in self.__dict__.items() if k != "layout"} | {"m": self.m}

    def __setstate__(self, state):
        state = dict(state)
        self.layout = layout(state.pop("m"))
        self.__dict__.update(state)

    def __eq__(self, other) -> bool:
        """Same state, bit for bit."""
        if not isinstance(other, MomentAccumulator):
            return NotImplemented
        return (
            self.m == other.m
            and self.n == other.n
            and all(
                np.array_equal(getattr(self, k), getattr(other, k), equal_nan=True)
                for k in ("mean", "s2", "s3", "s4")
            )
        )

    __hash__ = None  # mutable

    def update(self, block: np.ndarray) -> MomentAccumulator:
        """Add a block (n, m) of samples; returns self."""
        block = np.asarray(block)
        if block.ndim != 2 or block.shape[1] != self.m:
            raise ValueError(f"expected a block of shape (n, {self.m}), got {block.shape}")
        if block.shape[0] == 0:
            return self
        mean = np.empty(self.m)
        s2 = np.empty_like(self.s2)
        s3 = np.empty_like(self.s3)
        s4 = np.empty_like(self.s4)
        central_sums(kernel_view(block), mean, s2, s3, s4)
        self._combine(block.shape[0], mean, s2, s3, s4)
        return self

    def merge(self, other: MomentAccumulator) -> MomentAccumulator:
        """A new accumulator holding both inputs' samples (inputs untouched)."""
        if other.m != self.m:
            raise ValueError("cannot merge accumulators of different component counts")
        new = self.copy()
        if other.n:
            new._combine(other.n, other.mean, other.s2, other.s3, other.s4)
        return new

    def _combine(self, nb: int, mean_b, s2b, s3b, s4b) -> None:
        """Combine a block already reduced to its mean and central sums (pairwise formula);
        :meth:`BlockingAccumulator.update` hands its sweep's sums in here."""
        na = self.n
        if nb == 0:
            return
        if na == 0:
            self.n, self.mean = nb, np.array(mean_b, dtype=np.float64)
            self.s2, self.s3, self.s4 = s2b.copy(), s3b.copy(), s4b.copy()
            return
        mean, s2, s3, s4 = merge_sums(
            self.layout,
            na,
            self.mean,
            self.s2,
            self.s3,
            self.s4,
            nb,
            np.asarray(mean_b, dtype=np.float64),
            s2b,
            s3b,
            s4b,
        )
        self.mean, self.s2, self.s3, self.s4 = mean, s2, s3, s4
        self.n = na + nb

    def raw_about(self, ref: np.ndarray) -> np.ndarray:
        """Means of every monomial of ``x - ref`` (degree 1-4, monomial layout)."""
        lay = self.layout
        shift = self.mean - ref
        r2, r3, r4 = shift_sums(lay, self.n, self.s2, self.s3, self.s4, shift)
        return np.concatenate([shift, r2 / self.n, r3 / self.n, r4 / self.n])

    def snapshot(self) -> Moments:
        """The population moments now (read-only arrays, NaN when empty)."""
        return self.moments()

    def moments(self) -> Moments:
        n = self.n
        div = n if n > 0 else np.nan
        mean = self.mean if n > 0 else np.full(self.m, np.nan)
        return Moments(
            n,
            _frozen(mean),
            _frozen(self.s2 / div),
            _frozen(self.s3 / div),
            _frozen(self.s4 / div),
            self.layout,
        )
