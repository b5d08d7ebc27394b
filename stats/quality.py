"""Signal quality of one point's samples: spikes, dropouts, clipping, quantisation.

:class:`SignalQuality` takes the blocks of one measurement point as they arrive and judges
them in fixed windows of :data:`WINDOW` rows counted from the point's first row (so the
verdicts do not depend on how the stream was cut into messages). The per-window work is in
:mod:`eddyvigil.stats.quality_kernels` (what is detected and how is described there):

- **spikes** (uniform sampling only; ``spikes=False`` for a ``t`` column, whose arrival
  order is not a time series): isolated excursions after Goring & Nikora (2002) with the
  median/MAD scales of Wahl (2003): a jump from the neighbours' mean beyond λ_U σ_u and
  (Δu, Δ²u) outside their ellipse, λ_U = √(2 ln N) with N the window length (4096 rows:
  λ_U = 4.0787); scales from strided subsamples, averaged over the last 8 estimates (one
  per window for the first 8 windows, then one every 8th window);
- **dropouts**: runs of identical values longer than the window's own repeat rate allows;
- **clipping**: pile-up at the point's extreme values (at least :data:`PILE_UP_MIN` samples
  and 1e-4 of them sharing the minimum or the maximum exactly);
- **quantisation**: the step q̂ (smallest non-zero |Δu|, reported when at least 90 % of the
  windows have their non-zero differences on whole multiples of it) and σ/q̂.

Policies (``policy``):

- ``"flag"``: :meth:`update` returns the block unchanged; statistics use every sample and the
  counts only warn.
- ``"exclude"``: spikes and dropout samples are replaced by linear interpolation between the
  nearest good samples of the same component (as Goring & Nikora replace theirs). A row is
  returned only once it is judged and every flagged run before it has a good sample after
  it, so the statistics lag the stream by up to one window (plus any open flagged run);
  :meth:`flush` returns the rest at the point's end (a flagged run still open there is held
  at the last good value). Released rows keep the input's floating-point dtype. Clipped samples are not replaced: interpolating between two rail
  values cannot restore what the rail cut off; they count towards the suspect threshold.

A point is *suspect* (:meth:`suspect_reasons`) when, in any component, spikes and dropout
samples together exceed :data:`FLAGGED_FRACTION_SUSPECT` of the samples (the 1 % hard flag
of Vickers & Mahrt 1997, JAOT 14:512, from memory) or clipped samples exceed
:data:`CLIPPED_FRACTION_SUSPECT` (pile-up above ~0.1 % at a rail, same source).
"""

from __future__ import annotations

import math

import numpy as np

from eddyvigil.stats import quality_kernels as qk

__all__ = [
    "POLICIES",
    "SignalQuality",
    "WINDOW",
    "universal_threshold",
]

POLICIES = ("flag", "exclude")
#: Rows per judged window (λ_U = √(2 ln 4096) = 4.0787).
WINDOW = 4096
#: Fewest samples sharing an extreme value exactly that count as pile-up at a rail.
PILE_UP_MIN = 5
PILE_UP_FRACTION = 1e-4
#: Spikes + dropout samples, as a fraction of a component's samples, above which a point is suspect.
FLAGGED_FRACTION_SUSPECT = 0.01
#: Clipped samples, as a fraction of a component's samples, above which a point is suspect.
CLIPPED_FRACTION_SUSPECT = 0.001
#: A flagged (or held) run pending longer than this many windows is let through as it is.
MAX_PENDING_WINDOWS = 4
#: Flagged samples remembered for display (row, component index, kind, raw value).
MARKS_KEPT = 2000
#: Share of windows whose differences must sit on whole steps for q̂ to be reported.
QUANTISED_WINDOWS = 0.9

#: Why random sampling has no spike count (the summary's ``spikes_note``).
NO_SPIKE_CHECK = (
    "not checked: randomly sampled (t column); differences in arrival order are not time "
    "derivatives, so the phase-space method does not apply"
)

universal_threshold = qk.universal_threshold


class SignalQuality:
    """Streaming quality checks of one point (all components), with the replacement policy.

    Parameters
    ----------
    columns : sequence of str
        Component names, in the blocks' column order.
    policy : {"flag", "exclude"}
    window : int
        Rows per judged window (default :data:`WINDOW`).
    spikes : bool
        Look for spikes (uniform sampling); False for random sampling: the summary's
        spike counts are null with :data:`NO_SPIKE_CHECK` as ``spikes_note``.
    """

    def __init__(self, columns, policy: str = "flag", window: int = WINDOW, spikes: bool = True):
        if policy not in POLICIES:
            raise ValueError(f"quality policy must be one of {POLICIES}, not {policy!r}")
        self.columns = tuple(columns)
        self.policy = policy
        self.window = int(window)
        self.spike_check = bool(spikes)  # False: random sampling, no spikes in arrival order
        m = len(self.columns)
        self.n = 0  # rows received
        self._dtype = np.dtype(np.float64)  # of the rows handed on under "exclude"
        # column-major: columns base, base+1 the context (the last two released rows,
        # cleaned), then the held rows (st[1] of them, st[2] judged); base is 0 between calls
        self._buf = np.empty((m, 2 * self.window + 8))
        self._flags = np.zeros((m, 2 * self.window + 8), dtype=np.int8)
        self._work = np.empty((m, 2 * self.window + 8))
        self._st = np.zeros(qk.STATE_SLOTS, dtype=np.int64)
        self._counts = np.zeros((m, 3), dtype=np.int64)  # spikes, dropout samples, replaced
        self._rails = np.array([[np.inf, -np.inf]] * m)  # min and max of the judged rows
        self._at_rails = np.zeros((m, 2), dtype=np.int64)  # samples equal to each
        self._scales = np.zeros((m, qk.SCALE_WINDOWS, 6))  # scale estimates, a ring
        self._acc = np.zeros((m, 4))  # quantised windows, their least step, r.m.s. mean, M2
        self._acc[:, 1] = np.inf
        self._marks = np.zeros((MARKS_KEPT, 3), dtype=np.int64)  # ring: row, component, kind
        self._mark_values = np.zeros(MARKS_KEPT)
        self.marks: list[tuple[int, int, int, float]] = []

    # counts and records, as views of the kernels' state
    spikes = property(lambda self: self._counts[:, 0])
    dropout_samples = property(lambda self: self._counts[:, 1])
    replaced = property(lambda self: self._counts[:, 2])
    n_out = property(lambda self: int(self._st[qk._N_OUT]))  # rows judged and released
    _windows = property(lambda self: int(self._st[qk._WINDOWS]))

    # ------------------------------------------------------------------ streaming

    def update(self, block: np.ndarray) -> np.ndarray:
        """Take the next rows (n, m); return the rows the statistics should see now."""
        n = block.shape[0]
        if n == 0:
            return block if self.policy == "flag" else np.empty((0, len(self.columns)))
        rows = np.ascontiguousarray(block)
        if self.n == 0:  # no context yet: the first row, twice
            if rows.dtype.kind == "f":  # replaced rows go on in the input's precision
                self._dtype = rows.dtype
            self._buf[:, :2] = rows[0][:, None]
        self.n += n
        out = self._new_out(int(self._st[qk._FILL]) + n)
        marks_before = int(self._st[qk._MARKS])
        got = taken = 0
        while taken < n:
            wrote, took = qk.feed_block(
                rows[taken:], self._buf, self._flags, self._work, self._st, self._scales,
                self._acc, self._counts, self._rails, self._at_rails, self._marks,
                self._mark_values, out[got:], self.window, MAX_PENDING_WINDOWS,
                self.policy == "exclude", self.spike_check,
            )
            got, taken = got + wrote, taken + took
            if taken < n:
                self._grow()
        self._record_marks(marks_before)
        return block if self.policy == "flag" else out[:got]

    def flush(self) -> np.ndarray:
        """Judge and release every row still held (the point is over)."""
        out = self._new_out(int(self._st[qk._FILL]))
        marks_before = int(self._st[qk._MARKS])
        got = qk.judge_held(
            self._buf, self._flags, self._work, self._st, self._scales, self._acc,
            self._counts, self._rails, self._at_rails, self._marks, self._mark_values, out,
            self.window, MAX_PENDING_WINDOWS, True, self.policy == "exclude", self.spike_check,
        )
        self._st[qk._BASE] = 0  # nothing is held any more
        self._record_marks(marks_before)
        return out[:got] if self.policy == "exclude" else out[:0]

    def _new_out(self, rows: int) -> np.ndarray:
        """Room for the rows "exclude" may release (none under "flag")."""
        return np.empty((rows if self.policy == "exclude" else 0, len(self.columns)), self._dtype)

    def _grow(self) -> None:
        """Twice the buffer (rows held back behind a flagged run filled it)."""
        m, old = self._buf.shape
        for name in ("_buf", "_flags", "_work"):
            held = getattr(self, name)
            grown = np.zeros((m, 2 * old), dtype=held.dtype)
            grown[:, :old] = held
            setattr(self, name, grown)

    def _record_marks(self, first: int) -> None:
        """Copy the marks made since ``first`` from the kernels' ring to :attr:`marks`."""
        new = int(self._st[qk._MARKS]) - first
        if not new:
            return
        kept = MARKS_KEPT
        order = [(first + k) % kept for k in range(max(0, new - kept), new)]
        rows = self._marks[order].tolist()
        values = self._mark_values[order].tolist()
        self.marks.extend((r, c, k, v) for (r, c, k), v in zip(rows, values, strict=True))
        del self.marks[:-MARKS_KEPT]

    def merge(self, other: SignalQuality) -> SignalQuality:
        """A new object holding the counts of both (``other`` follows in time); inputs untouched.

        Both must be flushed (no rows held). Counts, extremes and the per-window quantisation
        and r.m.s. records combine exactly; spikes and dropouts are those each part found (a
        window is not re-judged across the seam).
        """
        if self.columns != other.columns:
            raise ValueError("cannot merge the quality of different components")
        if self._st[qk._FILL] or other._st[qk._FILL]:
            raise ValueError("flush() both before merging")
        out = SignalQuality(self.columns, self.policy, self.window, self.spike_check)
        out.n = self.n + other.n
        for slot in (qk._N_OUT, qk._WINDOWS, qk._MARKS):
            out._st[slot] = self._st[slot] + other._st[slot]
        out._counts[:] = self._counts + other._counts
        lo = np.minimum(self._rails[:, 0], other._rails[:, 0])
        hi = np.maximum(self._rails[:, 1], other._rails[:, 1])
        out._rails[:, 0], out._rails[:, 1] = lo, hi
        out._at_rails[:, 0] = np.where(self._rails[:, 0] == lo, self._at_rails[:, 0], 0) + (
            np.where(other._rails[:, 0] == lo, other._at_rails[:, 0], 0)
        )
        out._at_rails[:, 1] = np.where(self._rails[:, 1] == hi, self._at_rails[:, 1], 0) + (
            np.where(other._rails[:, 1] == hi, other._at_rails[:, 1], 0)
        )
        out._acc[:, 0] = self._acc[:, 0] + other._acc[:, 0]
        out._acc[:, 1] = np.minimum(self._acc[:, 1], other._acc[:, 1])
        # Chan et al. (1979) pairwise merge of the r.m.s. records
        n_a, n_b = int(self._st[qk._VAR_N]), int(other._st[qk._VAR_N])
        out._st[qk._VAR_N] = n_a + n_b
        if n_a + n_b:
            delta = other._acc[:, 2] - self._acc[:, 2]
            out._acc[:, 2] = self._acc[:, 2] + delta * n_b / (n_a + n_b)
            out._acc[:, 3] = self._acc[:, 3] + other._acc[:, 3] + delta**2 * n_a * n_b / (n_a + n_b)
        base = self.n_out
        out.marks = list(self.marks) + [(r + base, c, k, v) for r, c, k, v in other.marks]
        del out.marks[:-MARKS_KEPT]
        return out

    # ------------------------------------------------------------------ results

    def clipped_samples(self) -> np.ndarray:
        """Samples sharing the point's minimum or maximum, where that is a pile-up."""
        need = max(PILE_UP_MIN, math.ceil(PILE_UP_FRACTION * self.n))
        at = self._at_rails
        return np.where(at[:, 0] >= need, at[:, 0], 0) + np.where(at[:, 1] >= need, at[:, 1], 0)

    def quantisation_step(self) -> np.ndarray:
        """q̂ per component (NaN where the data do not look quantised)."""
        if self._windows == 0:
            return np.full(len(self.columns), np.nan)
        ok = self._acc[:, 0] >= QUANTISED_WINDOWS * self._windows
        q = self._acc[:, 1]
        return np.where(ok & np.isfinite(q), q, np.nan)

    def sigma(self) -> np.ndarray:
        """r.m.s. of each component over the judged windows (NaN before the first)."""
        var_n = int(self._st[qk._VAR_N])
        if var_n < 2:
            return np.full(len(self.columns), np.nan)
        return np.sqrt(self._acc[:, 3] / var_n)

    def flagged_fraction(self) -> np.ndarray:
        """(spikes + dropout samples) / samples judged, per component."""
        return (self.spikes + self.dropout_samples) / max(self.n_out, 1)

    def suspect_reasons(self) -> dict[str, str]:
        """``{component: reason}`` for the components past a documented threshold."""
        out = {}
        flagged = self.flagged_fraction()
        clipped = self.clipped_samples() / max(self.n, 1)
        for j, c in enumerate(self.columns):
            why = []
            if flagged[j] > FLAGGED_FRACTION_SUSPECT:
                why.append(
                    f"{100 * flagged[j]:.2g} % of samples spikes or dropouts "
                    f"(> {100 * FLAGGED_FRACTION_SUSPECT:g} %)"
                )
            if clipped[j] > CLIPPED_FRACTION_SUSPECT:
                why.append(
                    f"{100 * clipped[j]:.2g} % of samples clipped "
                    f"(> {100 * CLIPPED_FRACTION_SUSPECT:g} %)"
                )
            if why:
                out[c] = "signal quality: " + "; ".join(why)
        return out

    def summary(self) -> dict:
        """The ``"quality"`` object of a point line (DESIGN §9), plus ``replaced`` counts."""
        q = self.quantisation_step()
        sig = self.sigma()
        clipped = self.clipped_samples()
        out: dict = {"policy": self.policy}
        if not self.spike_check:
            out["spikes_note"] = NO_SPIKE_CHECK
        for j, c in enumerate(self.columns):
            qj = float(q[j]) if math.isfinite(q[j]) else None
            ratio = float(sig[j] / q[j]) if qj is not None and math.isfinite(sig[j]) else None
            out[c] = {
                "spikes": int(self.spikes[j]) if self.spike_check else None,
                "dropout_samples": int(self.dropout_samples[j]),
                "clipped_samples": int(clipped[j]),
                "quantisation_step": qj,
                "sigma_over_step": ratio,
                "replaced": int(self.replaced[j]),
            }
        return out


def hold_suspect(snapshot, reasons: dict[str, str]):
    """``snapshot`` (a PointSnapshot) with the quality guard applied: a new, frozen snapshot.

    Every statistic that depends on a component named in ``reasons`` becomes ``suspect`` (never
    converged) and so does the point; the reasons join the snapshot's ``suspect`` mapping.
    Returns ``snapshot`` itself when ``reasons`` is empty.
    """
    if not reasons or snapshot is None:
        return snapshot
    from dataclasses import replace

    from eddyvigil.stats.names import components_of

    estimates = []
    for e in snapshot.estimates:
        bad = sorted(components_of(e.name) & reasons.keys())
        if bad and e.target is not None:
            why = "; ".join(f"{c}: {reasons[c]}" for c in bad)
            e = e._replace(converged=False, state="suspect", reason=why, eta_s=None)
        estimates.append(e)
    suspect = dict(snapshot.suspect)
    for c, why in reasons.items():
        suspect[c] = f"{suspect[c]}; {why}" if c in suspect else why
    return replace(
        snapshot, estimates=tuple(estimates), converged=False, converged_at_s=None, suspect=suspect
    )
