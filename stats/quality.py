"""Signal quality of one point's samples: spikes, dropouts, clipping, quantisation.

:class:`SignalQuality` takes the blocks of one measurement point as they arrive and judges
them in fixed windows of :data:`WINDOW` rows counted from the point's first row (so the
verdicts do not depend on how the stream was cut into messages). The per-window work is in
:mod:`eddyvigil.stats.quality_kernels` (what is detected and how is described there):

- **spikes**: Goring & Nikora (2002) phase-space method, median/MAD variant of Wahl (2003),
  λ_U = √(2 ln N) with N the window length (4096 rows: λ_U = 4.0787); scales from strided
  subsamples, averaged over the last 8 estimates (one per window for the first 8 windows,
  then one every 8th window);
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
  at the last good value). Clipped samples are not replaced: interpolating between two rail
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
    """

    def __init__(self, columns, policy: str = "flag", window: int = WINDOW):
        if policy not in POLICIES:
            raise ValueError(f"quality policy must be one of {POLICIES}, not {policy!r}")
        self.columns = tuple(columns)
        self.policy = policy
        self.window = int(window)
        m = len(self.columns)
        self.n = 0  # rows received
        self.n_out = 0  # rows judged and released
        self._buf = np.empty((2 * self.window + 8, m))
        self._fill = 0  # rows held in _buf (from the first unreleased row)
        self._judged = 0  # of those, judged
        self._flags = np.zeros((2 * self.window + 8, m), dtype=np.int8)
        self._ctx: np.ndarray | None = None  # the last two released rows, cleaned
        self.spikes = np.zeros(m, dtype=np.int64)
        self.dropout_samples = np.zeros(m, dtype=np.int64)
        self.replaced = np.zeros(m, dtype=np.int64)
        self._min = np.full(m, np.inf)
        self._max = np.full(m, -np.inf)
        self._at_min = np.zeros(m, dtype=np.int64)
        self._at_max = np.zeros(m, dtype=np.int64)
        self._windows = 0
        self._scales = np.zeros((m, qk.SCALE_WINDOWS, 6))  # scale estimates, a ring
        self._estimates = 0
        self._quantised = np.zeros(m, dtype=np.int64)
        self._steps: list[np.ndarray] = []
        self._var_n = 0
        self._var_mean = np.zeros(m)
        self._var_m2 = np.zeros(m)
        self.marks: list[tuple[int, int, int, float]] = []

    # ------------------------------------------------------------------ streaming

    def update(self, block: np.ndarray) -> np.ndarray:
        """Take the next rows (n, m); return the rows the statistics should see now."""
        given = block  # "flag" hands on exactly what it was given (same dtype, same bits)
        n = block.shape[0]
        if n == 0:
            return given if self.policy == "flag" else np.empty((0, len(self.columns)))
        self._extremes(np.ascontiguousarray(block))
        self.n += n
        self._append(block)
        released = []
        while self._fill - self._judged >= self.window + 2:
            released.append(self._judge(self._judged + self.window, final=False))
        if self.policy == "flag":
            return given
        if not released:
            return block[:0]
        return released[0] if len(released) == 1 else np.concatenate(released)

    def flush(self) -> np.ndarray:
        """Judge and release every row still held (the point is over)."""
        out = self._judge(self._fill, final=True) if self._fill else self._buf[:0].copy()
        return out if self.policy == "exclude" else out[:0]

    def _append(self, block: np.ndarray) -> None:
        need = self._fill + block.shape[0]
        if need > self._buf.shape[0]:
            size = max(need, 2 * self._buf.shape[0])
            buf = np.empty((size, self._buf.shape[1]))
            buf[: self._fill] = self._buf[: self._fill]
            flags = np.zeros((size, self._buf.shape[1]), dtype=np.int8)
            flags[: self._judged] = self._flags[: self._judged]
            self._buf, self._flags = buf, flags
        self._buf[self._fill : need] = block
        self._fill = need

    def _judge(self, stop: int, final: bool) -> np.ndarray:
        """Judge held rows _judged..stop, release what can be released, return it cleaned."""
        m = self._buf.shape[1]
        look = 0 if final else 2
        rows = self._buf[: stop + look]
        ctx = self._ctx if self._ctx is not None else np.repeat(rows[:1], 2, axis=0)
        ext = np.concatenate([ctx, rows, np.repeat(rows[-1:], 2 - look, axis=0)])
        flags = np.zeros(ext.shape, dtype=np.int8)
        flags[2 : 2 + self._judged] = self._flags[: self._judged]
        work = np.empty_like(ext)
        stats = np.empty((m, 7))
        w0, w1 = 2 + self._judged, 2 + stop
        nw = stop - self._judged
        if nw > 0:
            lam = qk.universal_threshold(nw)
            # a fresh estimate for each of the first windows, then every SCALE_WINDOWS-th
            due = self._estimates < qk.SCALE_WINDOWS or self._windows % qk.SCALE_WINDOWS == 0
            qk.judge_window(
                ext, flags, work, w0, w1, lam, stats, self._scales, self._estimates, due
            )
            self._estimates += bool(due)
            self._window_stats(stats, nw)
        else:
            work[:] = ext
            qk_interpolate(work, flags)
        end = stop if final else self._releasable(ext, flags, stop)
        out = work[2 : 2 + end].copy()
        self._count(flags[2 : 2 + end], ext[2 : 2 + end])
        if end > 0:
            self._ctx = work[end : end + 2].copy()
        keep = self._fill - end
        self._buf[:keep] = self._buf[end : self._fill]
        self._flags[: stop - end] = flags[2 + end : 2 + stop]
        self._fill, self._judged = keep, stop - end
        self.n_out += end
        return out

    def _releasable(self, ext: np.ndarray, flags: np.ndarray, stop: int) -> int:
        """Rows 0..end may go: not inside a trailing flagged run or an open run of repeats."""
        end = stop
        limit = max(0, stop - MAX_PENDING_WINDOWS * self.window)
        while end > limit:
            i = 2 + end - 1  # the last candidate row, in ext coordinates
            if flags[i].any() or np.any(ext[i] == ext[i + 1]):
                end -= 1
            else:
                break
        return end if end > limit else stop

    def _count(self, flags: np.ndarray, raw: np.ndarray) -> None:
        spikes, drops, where = qk.count_flags(flags)
        if not where.shape[0]:
            return
        self.spikes += spikes
        self.dropout_samples += drops
        if self.policy == "exclude":
            self.replaced += spikes + drops
        base = self.n_out
        self.marks.extend(
            (int(base + r), int(c), int(flags[r, c]), float(raw[r, c]))
            for r, c in where[-MARKS_KEPT:].tolist()
        )
        del self.marks[:-MARKS_KEPT]

    def _extremes(self, block: np.ndarray) -> None:
        mn, mx, cmin, cmax = qk.extremes(block)
        lower = mn < self._min
        self._at_min = np.where(lower, cmin, self._at_min + np.where(mn == self._min, cmin, 0))
        self._min = np.minimum(self._min, mn)
        higher = mx > self._max
        self._at_max = np.where(higher, cmax, self._at_max + np.where(mx == self._max, cmax, 0))
        self._max = np.maximum(self._max, mx)

    def _window_stats(self, stats: np.ndarray, nw: int) -> None:
        self._windows += 1
        step = stats[:, 2].copy()
        whole = stats[:, 3]
        quantised = np.isfinite(step) & (np.nan_to_num(whole) >= 0.99)
        self._quantised += quantised
        self._steps.append(np.where(quantised, step, np.nan))
        # Chan et al. (1979) pairwise merge of the window's mean and M2 into the point's
        mean_w = stats[:, 6] + stats[:, 4] / nw
        m2_w = np.maximum(stats[:, 5] - stats[:, 4] ** 2 / nw, 0.0)
        n_a, n = self._var_n, self._var_n + nw
        delta = mean_w - self._var_mean
        self._var_mean = self._var_mean + delta * nw / n
        self._var_m2 = self._var_m2 + m2_w + delta**2 * n_a * nw / n
        self._var_n = n

    def merge(self, other: SignalQuality) -> SignalQuality:
        """A new object holding the counts of both (``other`` follows in time); inputs untouched.

        Both must be flushed (no rows held). Counts, extremes and the per-window quantisation
        and r.m.s. records combine exactly; spikes and dropouts are those each part found (a
        window is not re-judged across the seam).
        """
        if self.columns != other.columns:
            raise ValueError("cannot merge the quality of different components")
        if self._fill or other._fill:
            raise ValueError("flush() both before merging")
        out = SignalQuality(self.columns, self.policy, self.window)
        out.n, out.n_out = self.n + other.n, self.n_out + other.n_out
        for name in ("spikes", "dropout_samples", "replaced"):
            setattr(out, name, getattr(self, name) + getattr(other, name))
        out._min = np.minimum(self._min, other._min)
        out._max = np.maximum(self._max, other._max)
        out._at_min = np.where(self._min == out._min, self._at_min, 0) + np.where(
            other._min == out._min, other._at_min, 0
        )
        out._at_max = np.where(self._max == out._max, self._at_max, 0) + np.where(
            other._max == out._max, other._at_max, 0
        )
        out._windows = self._windows + other._windows
        out._quantised = self._quantised + other._quantised
        out._steps = self._steps + other._steps
        # Chan et al. (1979) pairwise merge of the r.m.s. records
        n_a, n_b = self._var_n, other._var_n
        out._var_n = n_a + n_b
        if out._var_n:
            delta = other._var_mean - self._var_mean
            out._var_mean = self._var_mean + delta * n_b / out._var_n
            out._var_m2 = self._var_m2 + other._var_m2 + delta**2 * n_a * n_b / out._var_n
        out.marks = list(self.marks) + [(r + self.n_out, c, k, v) for r, c, k, v in other.marks]
        del out.marks[:-MARKS_KEPT]
        return out

    # ------------------------------------------------------------------ results

    def clipped_samples(self) -> np.ndarray:
        """Samples sharing the point's minimum or maximum, where that is a pile-up."""
        need = max(PILE_UP_MIN, math.ceil(PILE_UP_FRACTION * self.n))
        low = np.where(self._at_min >= need, self._at_min, 0)
        high = np.where(self._at_max >= need, self._at_max, 0)
        return low + high

    def quantisation_step(self) -> np.ndarray:
        """q̂ per component (NaN where the data do not look quantised)."""
        if not self._steps or self._windows == 0:
            return np.full(len(self.columns), np.nan)
        steps = np.array(self._steps)
        ok = self._quantised >= QUANTISED_WINDOWS * self._windows
        with np.errstate(all="ignore"):
            q = np.nanmin(np.where(np.isfinite(steps), steps, np.inf), axis=0)
        return np.where(ok & np.isfinite(q), q, np.nan)

    def sigma(self) -> np.ndarray:
        """r.m.s. of each component over the judged windows (NaN before the first)."""
        if self._var_n < 2:
            return np.full(len(self.columns), np.nan)
        return np.sqrt(self._var_m2 / self._var_n)

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
        for j, c in enumerate(self.columns):
            qj = float(q[j]) if math.isfinite(q[j]) else None
            ratio = float(sig[j] / q[j]) if qj is not None and math.isfinite(sig[j]) else None
            out[c] = {
                "spikes": int(self.spikes[j]),
                "dropout_samples": int(self.dropout_samples[j]),
                "clipped_samples": int(clipped[j]),
                "quantisation_step": qj,
                "sigma_over_step": ratio,
                "replaced": int(self.replaced[j]),
            }
        return out


def qk_interpolate(work: np.ndarray, flags: np.ndarray) -> None:
    """Interpolate every flagged run of ``work`` in place (rows 0-1 are anchors)."""
    for c in range(work.shape[1]):
        col = np.ascontiguousarray(work[:, c])
        qk._interpolate(col, np.ascontiguousarray(flags[:, c]), 2, col.shape[0])
        work[:, c] = col


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
