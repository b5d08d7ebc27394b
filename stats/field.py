"""Statistics of a rake or a PIV field: P probes (vectors) at once, each with its own error bars.

:class:`FieldStatistics` takes snapshots ``(n, P, m)`` (n rows of P probes of m components)
with an optional ``valid`` mask ``(n, P)``. Every probe is a series of its own: a vector marked
invalid is left out of that probe exactly (its count, sums and blocks are those of the valid
samples only, in order), never filled in.

What is computed, per probe (the subset for fields, and why): the means ``U, V, (W)``, the
Reynolds stresses and ``k`` (DESIGN §3 names; ``k`` with the factor of ``names.K_FACTORS``), each
with a blocking standard error, a Student-t interval, a target, a convergence verdict and an
ETA. Third and fourth moments are left out for fields: the blocking state holds the cross
products of every monomial pair per level and probe, so memory and time grow with the square
of the monomial count (5 monomials for two components to order 2, 14 to order 4: about 8x), and
at the 10^3 snapshots of a typical low-rate PIV run their error bars are rarely trustworthy.
A single probe keeps the full set in :class:`~eddyvigil.stats.point.PointStatistics`.

How the errors are made (the same method as the single-probe path, vectorised over probes):
the monomials ``y_a = x_a - r_a`` and ``y_a y_b`` about a per-probe reference ``r`` (the first
valid sample) are averaged over base blocks of ``base`` valid samples; base-block means enter
dyadic blocking levels (Flyvbjerg & Petersen 1989), each level keeping per probe the block
count, the sum of block means, the lag-0 and lag-1 sums of their outer products, and the first
and last block mean. A statistic's lag-0 and lag-1 autocovariances at every level follow from
its gradient (delta method) as quadratic forms of those sums, and
:func:`~eddyvigil.stats.blocking.choose_level` (Jonsson's test with the lugsail correction)
picks the level, as for one probe. Memory: O(P M^2 log2 N) for M monomials, N samples.

Convergence: at geometric checkpoints of the snapshot count (``convergence.CHECKPOINT_GROWTH``)
every targeted statistic of every probe is tested with :func:`~eddyvigil.stats.convergence`'s
rule (blocks, relative error of the error, margin; no stationarity guard for fields yet) and a
probe's statistic is converged after ``STREAK`` passes in a row. The field is converged when
the fraction of probes with valid samples that have every target met reaches ``fraction``
(default 1: all of them).
"""

from __future__ import annotations

import math

import numba
import numpy as np
from scipy import special

from eddyvigil.stats.blocking import choose_level
from eddyvigil.stats.convergence import (
    CHECKPOINT_GROWTH,
    ETA_MIN_BLOCKS,
    MAX_SE_RELATIVE_ERROR,
    MIN_BLOCKS,
    STOP_MARGIN,
    STREAK,
)
from eddyvigil.stats.names import K_FACTORS, mean_names, stress_combinations, stress_names
from eddyvigil.stats.targets import Targets

__all__ = ["FieldStatistics", "FieldSnapshot", "DEFAULT_FIELD_BASE"]

#: Valid samples per base block: small, because a low-rate PIV run has only 10^3 snapshots,
#: and level 1 (blocks of 2 base blocks) must still reach MIN_BLOCKS blocks.
DEFAULT_FIELD_BASE = 4
#: Levels allocated at first; more are added when the counts need them.
_START_LEVELS = 8


@numba.njit(cache=True, nogil=True)
def _field_ingest(x, valid, ref, has_ref, count, tot, bsum, bcnt, base, pa, pb,
                  nb, S1, Q0, Q1, first, last, pend, pflag):
    """Add rows of ``x`` (n, P, m) where ``valid`` (n, P) to every probe's sums and levels.

    Per probe: reference on its first valid sample, monomials about it, totals, the base
    block in progress and, at each full base block, the push of its mean through the levels.
    """
    n, P, m = x.shape
    M = m + pa.shape[0]
    L = nb.shape[0]
    y = np.empty(M)
    b = np.empty(M)
    for i in range(n):
        for p in range(P):
            if not valid[i, p]:
                continue
            if not has_ref[p]:
                for a in range(m):
                    ref[p, a] = x[i, p, a]
                has_ref[p] = True
            for a in range(m):
                y[a] = x[i, p, a] - ref[p, a]
            for j in range(pa.shape[0]):
                y[m + j] = y[pa[j]] * y[pb[j]]
            count[p] += 1
            for a in range(M):
                tot[p, a] += y[a]
                bsum[p, a] += y[a]
            bcnt[p] += 1
            if bcnt[p] < base:
                continue
            for a in range(M):
                b[a] = bsum[p, a] / base
                bsum[p, a] = 0.0
            bcnt[p] = 0
            lev = 0
            while lev < L:
                k = nb[lev, p]
                if k == 0:
                    for a in range(M):
                        first[lev, p, a] = b[a]
                else:
                    for a in range(M):
                        la = last[lev, p, a]
                        for c in range(M):
                            Q1[lev, p, a, c] += la * b[c]
                for a in range(M):
                    S1[lev, p, a] += b[a]
                    last[lev, p, a] = b[a]
                    ba = b[a]
                    for c in range(a, M):  # symmetric: the upper triangle only
                        Q0[lev, p, a, c] += ba * b[c]
                nb[lev, p] = k + 1
                if pflag[lev, p]:
                    for a in range(M):
                        b[a] = 0.5 * (pend[lev, p, a] + b[a])
                    pflag[lev, p] = False
                    lev += 1
                else:
                    for a in range(M):
                        pend[lev, p, a] = b[a]
                    pflag[lev, p] = True
                    break


@numba.njit(cache=True, nogil=True)
def _field_forms(G, Q0, Q1, S1, first, last, nb, c0, gamma):
    """Lag-0 and lag-1 autocovariances (P, S, L) of every statistic's block means per level.

    For gradient g and the level's block means b_i (i = 1..n) about mu (the base blocks'
    mean): c0 = g' [Q0/n - (S1 mu' + mu S1')/n + mu mu'] g and
    gamma = g' [Q1 - (S1 - last) mu' - mu (S1 - first)' + (n - 1) mu mu'] g / n.
    """
    P, S, M = G.shape
    L = nb.shape[0]
    mu = np.empty(M)
    for p in range(P):
        if nb[0, p] < 1:
            continue
        for a in range(M):
            mu[a] = S1[0, p, a] / nb[0, p]
        for lev in range(L):
            n = nb[lev, p]
            if n < 1:
                break
            for s in range(S):
                gm = 0.0
                gs = 0.0
                gh = 0.0
                gt = 0.0
                for a in range(M):
                    g = G[p, s, a]
                    gm += g * mu[a]
                    gs += g * S1[lev, p, a]
                    gh += g * (S1[lev, p, a] - last[lev, p, a])
                    gt += g * (S1[lev, p, a] - first[lev, p, a])
                q0 = 0.0
                q1 = 0.0
                for a in range(M):
                    ga = G[p, s, a]
                    if ga == 0.0:
                        continue
                    r0 = 0.5 * Q0[lev, p, a, a] * ga  # Q0 holds its upper triangle
                    r1 = 0.0
                    for c in range(M):
                        r1 += Q1[lev, p, a, c] * G[p, s, c]
                    for c in range(a + 1, M):
                        r0 += Q0[lev, p, a, c] * G[p, s, c]
                    q0 += 2.0 * ga * r0
                    q1 += ga * r1
                c0[p, s, lev] = (q0 - 2.0 * gs * gm) / n + gm * gm
                gamma[p, s, lev] = (q1 - gh * gm - gm * gt + (n - 1.0) * gm * gm) / n


class FieldSnapshot:
    """What a field's statistics say now: arrays of length P per statistic (read-only).

    ``values[name]``, ``stderr[name]``, ``ci_low``/``ci_high``, ``target``, ``converged``,
    ``eta_s`` (NaN where it cannot be predicted), ``blocks``; ``counts`` the valid samples per
    probe; ``probe_converged`` every targeted statistic of the probe converged;
    ``converged_fraction``, ``field_converged``, ``converged_at_s`` and
    ``eta_slowest_decile_s`` (the 0.9 quantile of the unconverged probes' ETAs) for the field.
    """

    def __init__(self, **kw):
        self.__dict__.update(kw)

    def arrays(self) -> dict[str, np.ndarray]:
        """The per-vector arrays of the summary's field file (DESIGN §13 names)."""
        out = {"count": self.counts, "converged": self.probe_converged}
        for name in self.names:
            out[name] = self.values[name]
            out[name + "_stderr"] = self.stderr[name]
            out[name + "_ci_low"] = self.ci_low[name]
            out[name + "_ci_high"] = self.ci_high[name]
            out[name + "_target"] = self.target[name]
            out[name + "_converged"] = self.converged[name]
            out[name + "_eta_s"] = self.eta_s[name]
        return out


class FieldStatistics:
    """Means, Reynolds stresses and k of P probes, with blocking errors and verdicts per probe.

    Parameters
    ----------
    columns : sequence of str
        Velocity components (1 to 3), e.g. ``("u", "v")`` for planar PIV.
    probes : int
        P, the probes (vectors) per snapshot.
    rate_hz : float
        Snapshot rate (uniform sampling).
    targets : Targets, optional
        Tolerances (the statistics named here that the field computes are targeted).
    fraction : float
        Fraction of probes (with valid samples) that must meet every target for the field to
        be converged (default 1.0).
    base : int
        Valid samples per base block.
    """

    def __init__(self, columns, probes: int, rate_hz: float, targets: Targets | None = None,
                 fraction: float = 1.0, base: int = DEFAULT_FIELD_BASE):
        self.columns = tuple(columns)
        m = len(self.columns)
        if not 1 <= m <= 3:
            raise ValueError("a field has 1 to 3 velocity components")
        if not 0.0 < fraction <= 1.0:
            raise ValueError("fraction must be in (0, 1]")
        self.P = int(probes)
        self.rate_hz = float(rate_hz)
        self.targets = targets if targets is not None else Targets.defaults()
        self.confidence = float(self.targets.confidence)
        self.fraction = float(fraction)
        self.base = int(base)
        pairs = [tuple(c) for c in stress_combinations(m)]  # the stresses' order (names.py)
        self._pa = np.array([a for a, _ in pairs], dtype=np.int64)
        self._pb = np.array([b for _, b in pairs], dtype=np.int64)
        self.M = M = m + len(pairs)
        self.names = (*mean_names(self.columns), *stress_names(self.columns), "k")
        P = self.P
        self.ref = np.zeros((P, m))
        self.has_ref = np.zeros(P, dtype=np.bool_)
        self.count = np.zeros(P, dtype=np.int64)
        self.tot = np.zeros((P, M))
        self.bsum = np.zeros((P, M))
        self.bcnt = np.zeros(P, dtype=np.int64)
        self.snapshots = 0  # rows received (valid or not): the field's time base
        self._alloc(_START_LEVELS)
        self.streak = {name: np.zeros(P, dtype=np.int64) for name in self._targeted()}
        self.next_check = MIN_BLOCKS * 2 * self.base
        self.converged_at_s: float | None = None

    # ------------------------------------------------------------------ state

    def _alloc(self, L: int) -> None:
        P, M = self.P, self.M
        old = getattr(self, "nb", None)
        # level-major: a level's state of neighbouring probes is contiguous, so a sweep over
        # the probes streams through memory
        new = {
            "nb": np.zeros((L, P), dtype=np.int64),
            "S1": np.zeros((L, P, M)),
            "Q0": np.zeros((L, P, M, M)),
            "Q1": np.zeros((L, P, M, M)),
            "first": np.zeros((L, P, M)),
            "last": np.zeros((L, P, M)),
            "pend": np.zeros((L, P, M)),
            "pflag": np.zeros((L, P), dtype=np.bool_),
        }
        if old is not None:
            L0 = old.shape[0]
            for k, arr in new.items():
                arr[:L0] = getattr(self, k)
        for k, arr in new.items():
            setattr(self, k, arr)

    @property
    def levels(self) -> int:
        return int(self.nb.shape[0])

    def _targeted(self) -> tuple[str, ...]:
        return tuple(n for n in self.names if n in self.targets.targets)

    @property
    def duration_s(self) -> float:
        return self.snapshots / self.rate_hz

    def update(self, x, valid=None) -> FieldStatistics:
        """Add snapshots ``x`` (n, P, m); ``valid`` (n, P) booleans (None: all valid)."""
        x = np.asarray(x)
        if x.dtype not in (np.float32, np.float64):
            x = x.astype(np.float64)
        x = np.ascontiguousarray(x)
        if x.ndim != 3 or x.shape[1:] != (self.P, len(self.columns)):
            raise ValueError(f"expected (n, {self.P}, {len(self.columns)}) snapshots")
        n = x.shape[0]
        if valid is None:
            valid = np.ones((n, self.P), dtype=np.bool_)
        else:
            valid = np.ascontiguousarray(valid, dtype=np.bool_)
            if valid.shape != (n, self.P):
                raise ValueError("valid must be (n, P)")
        need = max(1, int(math.ceil(math.log2(max(self.count.max() + n, 1) / self.base + 1))) + 1)
        if need > self.levels:
            self._alloc(max(need, 2 * self.levels))
        # checkpoints fall at their own snapshot counts, however the rows are split into blocks
        start = 0
        while start < n:
            stop = min(n, start + max(self.next_check - self.snapshots, 1))
            _field_ingest(x[start:stop], valid[start:stop], self.ref, self.has_ref, self.count,
                          self.tot, self.bsum, self.bcnt, self.base, self._pa, self._pb, self.nb,
                          self.S1, self.Q0, self.Q1, self.first, self.last, self.pend, self.pflag)
            self.snapshots += stop - start
            start = stop
            if self.snapshots >= self.next_check:
                self._checkpoint()
        return self

    # ------------------------------------------------------------------ analysis

    def _gradients(self, mono: np.ndarray) -> np.ndarray:
        """(P, S, M): gradient of every statistic w.r.t. the monomial means about ref."""
        P, M, m = self.P, self.M, len(self.columns)
        G = np.zeros((P, len(self.names), M))
        for a in range(m):
            G[:, a, a] = 1.0
        kf = K_FACTORS[m]
        for j, (a, b) in enumerate(zip(self._pa, self._pb, strict=True)):
            s = m + j
            G[:, s, m + j] = 1.0
            G[:, s, a] -= mono[:, b]
            G[:, s, b] -= mono[:, a]
            if a == b:
                G[:, -1, :] += kf * G[:, s, :]
        return G

    def _values(self, mono: np.ndarray) -> np.ndarray:
        m = len(self.columns)
        vals = np.empty((self.P, len(self.names)))
        vals[:, :m] = self.ref + mono[:, :m]
        for j, (a, b) in enumerate(zip(self._pa, self._pb, strict=True)):
            vals[:, m + j] = mono[:, m + j] - mono[:, a] * mono[:, b]
        normal = [m + j for j, (a, b) in enumerate(zip(self._pa, self._pb, strict=True))
                  if a == b]
        vals[:, -1] = K_FACTORS[m] * vals[:, normal].sum(axis=1)
        return vals

    def _analyse(self):
        """Values, standard errors, block counts, relative errors: arrays (P, S)."""
        P, S = self.P, len(self.names)
        with np.errstate(invalid="ignore", divide="ignore"):
            mono = self.tot / self.count[:, None]
            vals = self._values(mono)
            G = self._gradients(mono)
        c0 = np.full((P, S, self.levels), np.nan)
        gamma = np.full((P, S, self.levels), np.nan)
        _field_forms(G, self.Q0, self.Q1, self.S1, self.first, self.last, self.nb, c0, gamma)
        var = np.full((P, S), np.nan)
        blocks = np.zeros((P, S), dtype=np.int64)
        rel = np.full((P, S), np.nan)
        # choose_level shares one block-count profile per call: probes with the same number of
        # valid samples have the same one (all of them, when nothing is masked)
        # (the block counts of a probe follow from its number of valid samples alone)
        counts, first_of, inverse = np.unique(self.count, return_index=True, return_inverse=True)
        for g in range(counts.size):
            rows = np.flatnonzero(inverse.ravel() == g) if counts.size > 1 else np.arange(P)
            prof = self.nb[:, first_of[g]]
            if prof[0] < 2:
                continue
            ch = choose_level(c0[rows].reshape(-1, self.levels),
                              gamma[rows].reshape(-1, self.levels), prof, self.base)
            var[rows] = ch.variance.reshape(len(rows), S)
            blocks[rows] = ch.blocks.reshape(len(rows), S)
            rel[rows] = ch.relative_error.reshape(len(rows), S)
        return vals, np.sqrt(var), blocks, rel

    def _resolve_targets(self, vals: np.ndarray) -> dict[str, np.ndarray]:
        """Absolute half-width allowed per probe for each targeted statistic (NaN: unknown)."""
        m = len(self.columns)
        speed = np.sqrt((vals[:, :m] ** 2).sum(axis=1))
        k = vals[:, -1]
        out = {}
        for name in self._targeted():
            t = self.targets.targets[name]
            if t.absolute is not None:
                out[name] = np.full(self.P, float(t.absolute))
                continue
            scale = speed if self.names.index(name) < m else k
            with np.errstate(invalid="ignore"):
                ok = np.isfinite(scale) & (scale > 0)
            out[name] = np.where(ok, t.relative * np.where(ok, scale, 1.0), np.nan)
        return out

    def _half_widths(self, se: np.ndarray, blocks: np.ndarray) -> np.ndarray:
        p = 0.5 * (1.0 + self.confidence)
        with np.errstate(invalid="ignore"):
            q = np.where(blocks >= 2, special.stdtrit(np.maximum(blocks - 1, 1), p), np.nan)
        return q * se

    def _checkpoint(self) -> None:
        vals, se, blocks, rel = self._analyse()
        hw = self._half_widths(se, blocks)
        targets = self._resolve_targets(vals)
        for name, target in targets.items():
            s = self.names.index(name)
            with np.errstate(invalid="ignore"):
                ok = ((blocks[:, s] >= MIN_BLOCKS) & (rel[:, s] <= MAX_SE_RELATIVE_ERROR)
                      & (STOP_MARGIN * hw[:, s] <= target))
            self.streak[name] = np.where(ok, self.streak[name] + 1, 0)
        n = self.snapshots
        self.next_check = max(int(math.ceil(n * CHECKPOINT_GROWTH)), n + 1)
        if self.converged_at_s is None and self._field_converged():
            self.converged_at_s = self.duration_s

    def _probe_converged(self) -> np.ndarray:
        conv = np.ones(self.P, dtype=bool)
        for name in self._targeted():
            conv &= self.streak[name] >= STREAK
        return conv & (self.count > 0) if self._targeted() else np.zeros(self.P, dtype=bool)

    def converged_fraction(self) -> float:
        """Fraction of the probes with valid samples that meet every target."""
        seen = self.count > 0
        if not seen.any():
            return 0.0
        return float(self._probe_converged()[seen].mean())

    def _field_converged(self) -> bool:
        return bool(self._targeted()) and self.converged_fraction() >= self.fraction

    def _eta(self, hw, target, blocks, streak) -> np.ndarray:
        """convergence.eta_seconds, over probes (NaN where it cannot be predicted)."""
        T = self.duration_s
        with np.errstate(invalid="ignore", divide="ignore"):
            need = T * (STOP_MARGIN * hw / target) ** 2
            need = np.maximum(need, T * MIN_BLOCKS / np.maximum(blocks, 1))
            met = T * (CHECKPOINT_GROWTH ** np.maximum(STREAK - streak, 1) - 1.0)
            later = need * CHECKPOINT_GROWTH ** (STREAK - 1) - T
            eta = np.where(need <= T, met, later)
            ok = np.isfinite(target) & (target > 0) & np.isfinite(hw) & (blocks >= ETA_MIN_BLOCKS)
        return np.where(ok & (T > 0), eta, np.nan)

    def snapshot(self) -> FieldSnapshot:
        """Every statistic of every probe now, with intervals, verdicts and ETAs."""
        vals, se, blocks, rel = self._analyse()
        hw = self._half_widths(se, blocks)
        targets = self._resolve_targets(vals)
        values, stderr, lo, hi, tgt, conv, eta, nblk = {}, {}, {}, {}, {}, {}, {}, {}
        for s, name in enumerate(self.names):
            values[name], stderr[name] = vals[:, s], se[:, s]
            lo[name], hi[name] = vals[:, s] - hw[:, s], vals[:, s] + hw[:, s]
            nblk[name] = blocks[:, s]
            if name in targets:
                tgt[name] = targets[name]
                conv[name] = (self.streak[name] >= STREAK) & (self.count > 0)
                e = self._eta(hw[:, s], targets[name], blocks[:, s], self.streak[name])
                eta[name] = np.where(conv[name], 0.0, e)
            else:
                tgt[name] = np.full(self.P, np.nan)
                conv[name] = np.zeros(self.P, dtype=bool)
                eta[name] = np.full(self.P, np.nan)
        probe_conv = self._probe_converged()
        seen = self.count > 0
        eta_probe = np.full(self.P, np.nan)
        if self._targeted():
            eta_probe = np.max(np.stack([eta[n] for n in self._targeted()]), axis=0)
        pending = seen & ~probe_conv
        if not pending.any():
            slow = 0.0 if seen.any() and self._targeted() else math.nan
        else:
            e = eta_probe[pending]
            # the slowest decile: the ETA that 90 % of the unconverged probes are within
            slow = float(np.quantile(e, 0.9)) if np.isfinite(e).all() else math.nan
        return FieldSnapshot(
            names=self.names, columns=self.columns, probes=self.P, snapshots=self.snapshots,
            duration_s=self.duration_s, counts=self.count.copy(), values=values, stderr=stderr,
            ci_low=lo, ci_high=hi, target=tgt, converged=conv, eta_s=eta, blocks=nblk,
            probe_converged=probe_conv, converged_fraction=self.converged_fraction(),
            fraction=self.fraction, field_converged=self._field_converged(),
            converged_at_s=self.converged_at_s, eta_slowest_decile_s=slow,
            confidence=self.confidence,
        )
