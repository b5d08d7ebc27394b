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
probe's statistic is converged after ``STREAK`` passes in a row; it stays converged while its
interval is within the target at later checkpoints (the trust tests are not repeated, as for
one probe), and falls back when the interval grows past it. The field is converged when
the fraction of probes with valid samples that have every target met reaches ``fraction``
(default 1: all of them; ``field_fraction`` in the targets file). Each change of that verdict
at a checkpoint is logged in ``transitions`` (snapshot count, acquisition time, converged):
the control signals (monitor/fields.py) are decided there, from the data alone, so a replay
signals at the same snapshots as the live run.
"""

from __future__ import annotations

import math

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
from eddyvigil.stats.field_kernels import field_forms, field_ingest
from eddyvigil.stats.kernels import kernel_view
from eddyvigil.stats.names import K_FACTORS, mean_names, stress_combinations, stress_names
from eddyvigil.stats.targets import Targets
from eddyvigil.stats.verdict import Verdict

__all__ = ["FieldStatistics", "FieldSnapshot", "DEFAULT_FIELD_BASE"]

#: Valid samples per base block: small, because a low-rate PIV run has only 10^3 snapshots,
#: and level 1 (blocks of 2 base blocks) must still reach MIN_BLOCKS blocks.
DEFAULT_FIELD_BASE = 4
#: Levels allocated at first; more are added when the counts need them.
_START_LEVELS = 8
#: What field_ingest gets for ``valid`` when every row is valid (it is not read then).
_NO_MASK = np.ones((1, 1), dtype=np.bool_)
_NO_MASK.flags.writeable = False


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

    def verdict(self) -> Verdict:
        """The field's verdict in the words of stats/verdict.py: ``met``/``targeted`` count
        vectors (those with valid samples), ``eta_s`` is the slowest decile's."""
        seen = int((self.counts > 0).sum())
        met = int(self.probe_converged.sum())
        eta = self.eta_slowest_decile_s
        base = dict(met=met, targeted=seen, eta_s=eta if math.isfinite(eta) else None)
        if seen == 0:
            return Verdict("waiting", "no valid vectors yet")
        if not self.targeted:
            return Verdict("no-targets", "nothing to converge", **base)
        words = (f"{100 * self.converged_fraction:.1f} % of {seen} vectors meet every target"
                 f" ({100 * self.fraction:g} % required)")
        if self.field_converged:
            return Verdict("move-on", words, **base)
        return Verdict("keep-acquiring", words, **base)

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
        # where each statistic's gradient can be nonzero (field_forms sums over these only)
        pattern = self._gradients(np.ones((1, M)))[0] != 0.0
        self._nnz = pattern.sum(axis=1).astype(np.int64)
        self._nz = np.zeros((len(self.names), M), dtype=np.int64)
        for s, row in enumerate(pattern):
            self._nz[s, : row.sum()] = np.flatnonzero(row)
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
        #: (snapshots, at_s, converged) at each checkpoint where the field verdict changed
        self.transitions: list[tuple[int, float, bool]] = []

    # ------------------------------------------------------------------ state

    def _alloc(self, L: int) -> None:
        P, M = self.P, self.M
        old = getattr(self, "nb", None)
        # level-major (field_kernels): a level's state of neighbouring probes is contiguous,
        # so a sweep over the probes streams through memory
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

    def _running(self) -> tuple:
        """The FieldRunning bundle (field_kernels), as a plain tuple."""
        return (self.ref, self.has_ref, self.count, self.tot, self.bsum, self.bcnt)

    def _levels(self) -> tuple:
        """The FieldLevels bundle (field_kernels), as a plain tuple."""
        return (self.nb, self.S1, self.Q0, self.Q1, self.first, self.last, self.pend,
                self.pflag)

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
        x = kernel_view(x)  # one array type per dtype, whatever the source (kernels.py)
        if x.ndim != 3 or x.shape[1:] != (self.P, len(self.columns)):
            raise ValueError(f"expected (n, {self.P}, {len(self.columns)}) snapshots")
        n = x.shape[0]
        if valid is not None:
            valid = kernel_view(np.asarray(valid, dtype=np.bool_))
            if valid.shape != (n, self.P):
                raise ValueError("valid must be (n, P)")
        masked = valid is not None and not valid.all()
        if not masked:
            valid = _NO_MASK
        need = max(1, int(math.ceil(math.log2(max(self.count.max() + n, 1) / self.base + 1))) + 1)
        if need > self.levels:
            self._alloc(max(need, self.levels + 4))
        running, levels = self._running(), self._levels()
        # checkpoints fall at their own snapshot counts, however the rows are split into blocks
        start = 0
        while start < n:
            stop = min(n, start + max(self.next_check - self.snapshots, 1))
            field_ingest(x[start:stop], valid[start:stop] if masked else valid, masked, running,
                         levels, self.base, self._pa, self._pb)
            self.snapshots += stop - start
            start = stop
            if self.snapshots >= self.next_check:
                self._checkpoint()
        return self

    # ------------------------------------------------------------------ analysis

    def _gradients(self, mono: np.ndarray) -> np.ndarray:
        """(P, S, M): gradient of every statistic w.r.t. the monomial means about ref."""
        P, M, m = mono.shape[0], self.M, len(self.columns)
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

    def _analyse(self, sel: np.ndarray | None = None):
        """Values (P, S) of every statistic; standard errors, block counts and relative errors
        (P, len(sel)) of the statistics ``sel`` (indices into ``names``; None: all)."""
        P = self.P
        sel = np.arange(len(self.names)) if sel is None else np.asarray(sel, dtype=np.int64)
        S, L = sel.size, self.levels
        with np.errstate(invalid="ignore", divide="ignore"):
            mono = self.tot / self.count[:, None]
            vals = self._values(mono)
            G = np.ascontiguousarray(self._gradients(mono)[:, sel])
        c0 = np.empty((P, S, L))
        gamma = np.empty((P, S, L))
        field_forms(G, self._nz[sel], self._nnz[sel], self._levels(), c0, gamma)
        var = np.full((P, S), np.nan)
        blocks = np.zeros((P, S), dtype=np.int64)
        rel = np.full((P, S), np.nan)
        # choose_level shares one block-count profile per call: group the probes by theirs
        # (one group when nothing is masked; the profile follows from the valid count alone)
        if P and (self.nb == self.nb[:, :1]).all():
            groups = [(self.nb[:, 0], slice(None))]  # no copies of c0, gamma
        else:
            profiles, inverse = np.unique(self.nb.T, axis=0, return_inverse=True)
            order = np.argsort(inverse.ravel(), kind="stable")
            cuts = np.cumsum(np.bincount(inverse.ravel(), minlength=len(profiles)))[:-1]
            groups = list(zip(profiles, np.split(order, cuts), strict=True))
        for prof, rows in groups:
            if prof[0] < 2:
                continue
            ch = choose_level(c0[rows].reshape(-1, L), gamma[rows].reshape(-1, L), prof,
                              self.base)
            var[rows] = ch.variance.reshape(-1, S)
            blocks[rows] = ch.blocks.reshape(-1, S)
            rel[rows] = ch.relative_error.reshape(-1, S)
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
        # the Student quantile per distinct block count (few: probes share their profiles)
        kinds, inverse = np.unique(blocks, return_inverse=True)
        with np.errstate(invalid="ignore"):
            q = np.where(kinds >= 2, special.stdtrit(np.maximum(kinds - 1, 1), p), np.nan)
        return q[inverse.reshape(blocks.shape)] * se

    def _checkpoint(self) -> None:
        # only the targeted statistics' errors are needed here
        sel = [self.names.index(name) for name in self._targeted()]
        vals, se, blocks, rel = self._analyse(sel)
        hw = self._half_widths(se, blocks)
        targets = self._resolve_targets(vals)
        for s, (name, target) in enumerate(targets.items()):
            with np.errstate(invalid="ignore"):
                met = STOP_MARGIN * hw[:, s] <= target
                ok = (blocks[:, s] >= MIN_BLOCKS) & (rel[:, s] <= MAX_SE_RELATIVE_ERROR) & met
            # a converged vector keeps its verdict while its interval stays within the target:
            # its error bar, once trusted, does not fall back because a jump of the blocking
            # level halved its block count for a while (as convergence.Checkpoints.trusted)
            kept = (self.streak[name] >= STREAK) & met
            self.streak[name] = np.where(ok | kept, self.streak[name] + 1, 0)
        n = self.snapshots
        self.next_check = max(int(math.ceil(n * CHECKPOINT_GROWTH)), n + 1)
        now = self._field_converged()
        if self.converged_at_s is None and now:
            self.converged_at_s = self.duration_s
        if now != (bool(self.transitions) and self.transitions[-1][2]):
            self.transitions.append((n, self.duration_s, now))

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
            confidence=self.confidence, targeted=self._targeted(),
        )
