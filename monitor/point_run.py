"""One measurement point of one stream, from its first message to its summary line.

:class:`PointRun` owns the point's accumulators, created at its first accepted samples:
``stats.PointStatistics`` (moments, blocking errors, convergence checkpoints),
``stats.quality.SignalQuality`` (spikes, dropouts, clipping; it sees every block first) and,
for uniform sampling, ``stats.point_spectra.PointSpectra`` (beside the statistics, fed the
rows the statistics see). It keeps the point's own counts (messages, gaps, lost messages,
rejections), its latest statistics snapshot, its display history and the state of its
control signals (converged / withdrawn).

:meth:`PointRun.feed` is the one place a block enters the point's accumulators.
The sample-count checkpoints of the statistics decide everything that must replay bit for bit
(:meth:`PointRun.checkpoint_signal`); the clock only decides when a full snapshot is taken for
readers. Sequence accounting, the stream, the lines and their writing belong to others
(:mod:`~eddyvigil.monitor.sequence`, :mod:`~eddyvigil.monitor.stream`,
:mod:`~eddyvigil.monitor.lines`, :mod:`~eddyvigil.monitor.pipeline`).
"""

from __future__ import annotations

import math
from collections import Counter

import numpy as np

from eddyvigil.monitor.display import History

__all__ = ["PointRun"]


class PointRun:
    """Book-keeping and accumulators of the current point of one stream.

    Parameters
    ----------
    index : int
        The point's index in its stream (0, 1, ...; summary ``point_index``).
    meta : dict or None
        The point's description as received (``id`` and coordinates); None: an implicit point,
        ``{"id": None}``.
    history_rows : int, optional
        Rows kept in the display history (:class:`~eddyvigil.monitor.display.History`).
    """

    def __init__(self, index: int, meta: dict | None, history_rows: int | None = None):
        self.index = index
        self.meta = dict(meta) if meta is not None else {"id": None}
        # the point's own counts (summary point line)
        self.messages = 0
        self.gaps = 0
        self.lost = 0
        self.rejected: Counter = Counter()
        # layout, fixed by the first accepted samples
        self.columns: tuple[str, ...] | None = None
        self.rate_hz: float | None = None
        self.units: str | None = None
        self.t0: float | None = None  # t of the point's first row (uniform sampling)
        self.last_t: float | None = None  # t of the latest row (random sampling)
        self.held_s = 0.0  # duration of rows the quality checks hold back (random sampling)
        # accumulators, created at the first accepted samples
        self.statistics = None  # stats.PointStatistics
        self.spectra = None  # stats.point_spectra.PointSpectra (uniform sampling only)
        self.quality = None  # stats.quality.SignalQuality
        self.random = None  # monitor.random_sampling.RandomFeed (random sampling only)
        #: the pipeline's one-worker executor for the spectra's transforms (None: inline)
        self.spectra_executor = None
        # blocks waiting to go to the accumulators together (monitor.coalesce; set by the
        # pipeline for uniform sampling, None: every block goes on alone)
        self.pending = None
        # what readers see
        self.point_snapshot = None  # latest stats.snapshot.PointSnapshot (quality guard applied)
        self.snapshot_stale = False  # data arrived since point_snapshot was taken
        self.history = History(history_rows)
        # the control signals: "converged" when the verdict says move on, "withdrawn" when a
        # signalled point turns suspect while data keep coming (at most one of each pending)
        self.signalled = False
        self.signalled_at_s: float | None = None
        self.withdrawn_at_s: float | None = None
        self.converged_clock: float | None = None
        # rakes and fields (monitor.fields): the layout announced, the field statistics
        self.layout_rake, self.layout_grid, self.layout_probes = None, None, None
        self.field = None  # stats.field.FieldStatistics
        self.field_signals = 0  # its verdict changes already signalled (monitor.fields)
        self.field_view = None  # what readers see of it, and when it may be redone
        self.field_view_due = -math.inf
        self.targets = None  # stats.Targets, fixed with the layout
        #: stats.budget_targets.DerivedTargets: this point's targets from a [budget] table
        self.derived = None

    @property
    def point_id(self):
        return self.meta.get("id")

    @property
    def rows_received(self) -> int:
        """Rows received so far (the statistics may lag: "exclude" holds rows back, and
        :attr:`pending` rows wait to be joined)."""
        return self.quality.n + (self.pending.rows if self.pending is not None else 0)

    # ------------------------------------------------------------------ input

    def derive_targets(self, targets, finished_lines, stream: str) -> None:
        """The target hook of a ``[budget]`` table: this point's targets from the stream's
        finished points (stats/budget_targets.py), before its first samples. A failure leaves
        the plain targets and says why (bad input never crashes the monitor)."""
        if targets.budget is None or self.statistics is not None:
            return
        from eddyvigil.monitor.budget_cmd import derive_point_targets
        from eddyvigil.stats.budget_targets import DerivedTargets

        try:
            self.derived = derive_point_targets(targets, finished_lines, stream, self.meta)
        except (ValueError, ArithmeticError, TypeError, KeyError) as e:
            self.derived = DerivedTargets(targets, None, {}, (),
                                          (f"budget targets not derived ({e}): plain targets",))

    def accept_layout(
        self, columns, rate_hz, units, t0, targets, quality_policy, weighting="arrival",
        weights=None,
    ) -> str | None:
        """Check a block's layout against the point's (fixing it, and creating the accumulators,
        at the first block); returns a rejection reason or None."""
        if self.units is not None and units != self.units:
            return "units_changed"  # never converted, never mixed in
        if self.statistics is None:
            from eddyvigil import stats  # the numba-compiled core loads with the first point

            if self.derived is not None:  # a [budget] table: derive_targets()
                targets = self.derived.targets
            from eddyvigil.stats import point_spectra, quality

            self.units = units
            self.columns, self.rate_hz = columns, rate_hz
            self.statistics = stats.PointStatistics(columns, rate_hz, targets=targets)
            if rate_hz is None:  # random sampling: weighted statistics (monitor.random_sampling)
                from eddyvigil.monitor.random_sampling import RandomFeed

                self.random = RandomFeed(columns, weights is not None, weighting, targets)
                self.statistics = self.random.stats
            self.targets = targets
            self.spectra = (
                None
                if rate_hz is None
                else point_spectra.PointSpectra(
                    columns, rate_hz, targets=targets, executor=self.spectra_executor
                )
            )
            # spikes only for uniform sampling: arrival order is not a time series
            self.quality = quality.SignalQuality(
                columns, quality_policy, spikes=rate_hz is not None
            )
            self.t0 = float(t0) if rate_hz is not None and t0 is not None else None
        elif columns != self.columns or rate_hz != self.rate_hz:
            return "layout_changed"
        if self.random is not None:
            return self.random.check(weights)  # a weight column that comes and goes, or bad weights
        return None

    def accept_times(self, times) -> tuple[str | None, float | None]:
        """Random sampling: the block's duration (rejected, ``time_backwards``, if its first
        time precedes the point's latest); uniform sampling: ``(None, None)``."""
        if self.rate_hz is not None:
            return None, None
        t_first, t_last = float(times[0]), float(times[-1])
        if self.last_t is not None and t_first < self.last_t:
            return "time_backwards", None
        duration_s = t_last - (t_first if self.last_t is None else self.last_t)
        self.last_t = t_last
        return None, duration_s

    def feed(self, velocity, duration_s: float | None, times=None, weights=None) -> None:
        """The one place a block enters the point's accumulators.

        Quality first (one call per block; "exclude" hands on replaced rows, later), then the
        statistics and the spectra get the same rows, a continuous series. The spectra go first:
        with the pipeline's executor their transforms run while the statistics update.
        """
        cleaned = self.quality.update(velocity)  # the same block, or replaced rows ("exclude")
        if self.spectra is not None and cleaned.shape[0]:
            self.spectra.update(cleaned)  # the rows the statistics see: a continuous series
        if self.rate_hz is None:  # a duration waits for rows when "exclude" holds them back
            self.held_s += duration_s
            self.random.feed(cleaned, times, weights, self.held_s)
            if cleaned.shape[0]:
                self.held_s = 0.0
        else:
            self.statistics.update(cleaned)

    def flush(self) -> None:
        """At the point's end: the pending rows, then the rows the quality checks still hold,
        go to the statistics."""
        if self.statistics is None:
            return
        if self.pending is not None:
            for group in self.pending.flush():
                self.feed(group, None)
        tail = self.quality.flush()
        if self.random is not None:
            self.random.feed(tail, np.empty(0), self.random.no_weights(), self.held_s)
        else:
            self.statistics.update(tail)
        self.snapshot_stale = True

    def checkpoint_mark(self):
        """The sample count of the statistics' next convergence checkpoint (None if unknown)."""
        checkpoints = getattr(self.statistics, "checkpoints", None)
        return getattr(checkpoints, "next_n", None)

    # ------------------------------------------------------------------ snapshots and signals

    def take_snapshot(self, history: bool = True):
        """A full statistics snapshot (quality guard applied) becomes :attr:`point_snapshot`;
        with ``history``, also a history row."""
        from eddyvigil.stats import quality

        self.snapshot_stale = False
        snap = quality.hold_suspect(self.statistics.snapshot(), self.quality.suspect_reasons())
        self.point_snapshot = snap
        if history:
            self.history.add(snap)
        return snap

    def checkpoint_signal(self) -> str | None:
        """At a checkpoint of the statistics: a history row, and which control signal is due.

        ``"converged"`` once the full snapshot's verdict says move on (the record-length rule
        needs the integral times, which only the full snapshot has); ``"withdrawn"`` when a
        signalled point has a suspect targeted statistic. Decided here only (sample-count
        checkpoints), so replay = live.
        """
        from eddyvigil.stats import quality

        snap = self.statistics.targeted_snapshot()
        snap = quality.hold_suspect(snap, self.quality.suspect_reasons())
        self.history.add(snap)
        if not self.signalled and snap.converged:
            self.take_snapshot(history=False)  # the summary line needs all
            return "converged" if self.final_move_on() else None
        if self.signalled and any(e.state == "suspect" for e in snap.targeted()):
            self.take_snapshot(history=False)
            return "withdrawn"
        self.snapshot_stale = True
        if self.point_snapshot is None:
            self.take_snapshot(history=False)
        return None

    def final_move_on(self) -> bool:
        """The verdict of the point's current full snapshot says move on (targets met, record
        long enough, nothing suspect) and a target on eps is met: what ``converged`` promised."""
        from eddyvigil.stats.verdict import point_verdict

        if self.point_snapshot is None:
            return False
        return point_verdict(self.point_snapshot).move_on and self.eps_met()

    def eps_met(self) -> bool:
        """A target on eps (judged beside the moments, stats/eps_target.py) is met too."""
        if self.spectra is None:  # no spectrum: an eps target cannot be met
            return self.targets is None or "eps" not in self.targets.targets
        return self.spectra.eps_met(self.point_snapshot, self.meta.get("nu"))

    def record_signal(self, converged: bool, clock: float | None, at_s=None) -> float:
        """Note a converged (``clock`` = wall time) or withdrawn signal; returns its ``at_s``
        (the snapshot's duration unless given: a field's checkpoint time)."""
        at_s = float(self.point_snapshot.duration_s if at_s is None else at_s)
        self.signalled = converged
        if converged:
            self.signalled_at_s, self.converged_clock = at_s, clock
        else:
            self.withdrawn_at_s, self.converged_clock = at_s, None
        return at_s
