"""The monitor's core loop: decoded messages -> per-stream, per-point statistics -> snapshots.

:class:`Pipeline` takes raw frames (from a socket or a recording, through the one
:meth:`Pipeline.handle_frames` path) or numpy blocks (the in-process API of an acquisition
script: :meth:`~Pipeline.begin_point`, :meth:`~Pipeline.feed`, :meth:`~Pipeline.end`) and
keeps, for every stream, its session, the sequence numbers it expects and one
``stats.PointStatistics`` for the current measurement point. It never raises on bad input:
every rejected message is counted under a reason, per stream (current point) and per run.

Choices made where DESIGN leaves room (also stated in README's summary section):

- Samples that arrive before any ``point`` message of their stream go to an *implicit point*
  whose summary says ``"point": {"id": null}``, unless the samples header carries a ``point``.
  A samples header whose ``point.id`` differs from the current point's starts a new point (the
  previous one is finished complete, as at a ``point`` message).
- The first message seen of a session sets the sequence baseline: messages a publisher sent
  before the monitor listened are not losses. A later jump forward is a gap; the missing
  count is ``lost_messages``, less any messages of that stream that arrived in the meantime
  but were too broken to read a ``seq`` from (they consumed a ``seq`` yet cannot be placed).
  A loss found when no point is current is charged to the next point of the stream.
- A ``seq`` at or below the last one seen in the same session is rejected as
  ``duplicate_seq``; samples whose velocity columns or sampling rate differ from the current
  point's are rejected as ``layout_changed``; samples whose ``units`` differ from those of the
  point's first accepted samples are rejected as ``units_changed`` (never converted, never
  mixed in; the point line records its ``units``); a ``t`` column that steps back across
  messages is rejected as ``time_backwards``. These reasons come from the pipeline, not the
  wire.
- A new session (publisher restart) finishes the current point ``complete: false``, counts a
  restart and starts fresh sequence expectations.
- Point ``messages`` counts accepted messages while the point was current (its ``point``
  message, samples, ``end``); the run line's ``messages`` counts every message received.
- Convergence and ``converged_at_s`` are decided by the statistics at their own checkpoints
  of the sample count, from the data alone, so a replay reproduces a live run's summaries bit
  for bit whatever its pace. The pipeline takes a statistics snapshot right after each
  checkpoint (when the control signal may fire), when it publishes a
  :class:`~monitor.state.RunSnapshot` (paced by the clock) and when a point ends.
"""

from __future__ import annotations

import math
import sys
import time
import traceback
from collections import Counter
from collections.abc import Callable, Mapping, Sequence

import numpy as np

from eddyvigil.monitor import wire
from eddyvigil.monitor.rate import ReceiveRate
from eddyvigil.monitor.state import RunSnapshot, StreamView
from eddyvigil.monitor.summary import SummaryWriter

__all__ = ["Pipeline", "PIPELINE_REJECTION_REASONS", "TRACE_ROWS", "HISTORY_ROWS"]

#: Reasons the pipeline itself rejects a well-formed message for (in addition to the wire's).
PIPELINE_REJECTION_REASONS = (
    "duplicate_seq",
    "layout_changed",
    "units_changed",
    "time_backwards",
    "too_many_streams",
    "internal_error",
)
#: Rows kept in a stream's decimated trace.
TRACE_ROWS = 2000
#: Rows taken at most from one samples message into the trace.
TRACE_ROWS_PER_MESSAGE = 256
#: Entries kept in a point's history; when full, every other entry is dropped.
HISTORY_ROWS = 2000
#: Streams tracked at most (protects memory against a flood of invented stream names).
MAX_STREAMS = 256
#: Transport events kept for the snapshot.
MAX_TRANSPORT_EVENTS = 50

_ALL_REASONS = tuple(wire.REJECTION_REASONS) + tuple(
    r for r in PIPELINE_REJECTION_REASONS if r not in wire.REJECTION_REASONS
)


def _zero_reasons() -> dict[str, int]:
    return dict.fromkeys(wire.REJECTION_REASONS, 0)


class _PointRun:
    """Book-keeping of the current point of one stream."""

    def __init__(self, index: int, point: dict | None):
        self.index = index
        self.point = dict(point) if point is not None else {"id": None}
        self.stats = None  # stats.PointStatistics, created at the first samples
        self.spectra = None  # stats.point_spectra.PointSpectra (regularly sampled points only)
        self.columns: tuple[str, ...] | None = None
        self.rate_hz: float | None = None
        self.units: str | None = None  # of the first accepted samples
        self.messages = 0
        self.gaps = 0
        self.lost = 0
        self.rejected: Counter = Counter()
        self.last_t: float | None = None
        self.snapshot = None  # latest stats.snapshot.PointSnapshot
        self.quality = None  # stats.quality.SignalQuality, created with the statistics
        self.t0: float | None = None  # t of the point's first row (uniform sampling)
        self.held_s = 0.0  # duration of rows the quality checks hold back (random sampling)
        self.random = None  # monitor.random_sampling.RandomFeed (random sampling only)
        self.stale = False  # data arrived since the last statistics snapshot
        # the control signals: "converged" when the verdict says move on, "withdrawn" when a
        # signalled point turns suspect while data keep coming (at most one of each pending)
        self.signalled = False
        self.signalled_at_s: float | None = None
        self.withdrawn_at_s: float | None = None
        self.converged_clock: float | None = None
        self.history: dict[str, list[float]] = {"duration_s": []}

    @property
    def point_id(self):
        return self.point.get("id")


class _StreamState:
    """Everything the pipeline knows about one stream."""

    def __init__(self, name: str):
        self.name = name
        self.session: str | None = None
        self.expected_seq: int | None = None
        self.unreadable_pending = 0
        self.active = False  # at least one accepted message
        self.ended = False
        self.messages = 0  # accepted
        self.received = 0  # accepted + rejected
        self.samples = 0
        self.lost = 0
        self.gaps = 0
        self.restarts = 0
        self.rejected: Counter = Counter()
        self.carry_gaps = 0
        self.carry_lost = 0
        self.carry_rejected: Counter = Counter()
        self.point: _PointRun | None = None
        self.points_started = 0
        self.finished: list[dict] = []
        self.last_history: dict[str, list[float]] = {}  # of the last finished point (display)
        self.rate_hz: float | None = None
        self.trace = np.zeros((TRACE_ROWS, 0))
        self.trace_columns: tuple[str, ...] = ()
        self.trace_fill = 0
        self.receive = ReceiveRate()


class Pipeline:
    """Per-stream, per-point statistics of everything received, with summaries and snapshots.

    Parameters
    ----------
    targets : stats.Targets, optional
        Convergence targets; ``stats.Targets.defaults()`` when None.
    summary : path, text file, list of those, or SummaryWriter, optional
        Where the DESIGN §4 JSON lines go (each line flushed as written).
    on_converged : callable, optional
        ``on_converged(stream, point, at_s, summary_line)``, called when the point's verdict
        (:mod:`eddyvigil.stats.verdict`) first says move on: every target met and the record
        long enough for the drift check (the control socket hangs here). Decided at the
        statistics' checkpoints only, so a replay signals at the same samples.
    on_withdrawn : callable, optional
        ``on_withdrawn(stream, point, at_s, summary_line)``, called when a point that was
        signalled converged turns suspect at a later checkpoint (a statistic held by the
        stationarity guard) while data keep coming; after that the point may be signalled
        converged again. Default: ``on_converged.withdrawn`` when it has one (a
        :class:`~eddyvigil.monitor.control.ControlPublisher` sends both).
    recorder : monitor.recorder.Recorder, optional
        Receives every frame list exactly as received, with the rejection reason if any.
    snapshot_interval_s : float
        Shortest wall time between two published :class:`RunSnapshot` (point ends publish
        at once).
    clock : callable
        Monotonic clock in seconds (injected for tests).
    max_message_bytes : int
        Application size limit passed to :func:`eddyvigil.monitor.wire.decode`.
    """

    def __init__(
        self,
        targets=None,
        *,
        summary=None,
        on_converged: Callable | None = None,
        on_withdrawn: Callable | None = None,
        recorder=None,
        snapshot_interval_s: float = 0.25,
        clock: Callable[[], float] = time.monotonic,
        max_message_bytes: int = wire.DEFAULT_MAX_MESSAGE_BYTES,
        quality: str = "flag",
        weighting: str = "arrival",
    ):
        from eddyvigil import stats  # the numba-compiled core is loaded only when a pipeline is built
        from eddyvigil.stats.verdict import point_verdict

        self._stats = stats
        from eddyvigil.stats import point_spectra  # Welch spectra and eps beside the moments
        from eddyvigil.stats import quality as _quality

        self._spectra = point_spectra
        from eddyvigil.monitor.random_sampling import RandomFeed  # loads the weighted kernels

        self._random_feed = RandomFeed
        self._quality = _quality
        self.targets = targets if targets is not None else stats.Targets.defaults()
        self._writer = summary if isinstance(summary, SummaryWriter) else SummaryWriter(summary)
        self._on_converged = on_converged
        if on_withdrawn is None:
            on_withdrawn = getattr(on_converged, "withdrawn", None)
        self._on_withdrawn = on_withdrawn
        self._point_verdict = point_verdict
        self._recorder = recorder
        self._interval = float(snapshot_interval_s)
        self._clock = clock
        self.max_message_bytes = int(max_message_bytes)
        self.quality_policy = quality  # stats.quality: "flag" or "exclude" (README, Signal quality)
        self.weighting = weighting  # random sampling without a weight column (DESIGN §10)
        self._streams: dict[str, _StreamState] = {}
        self._rejected: Counter = Counter()
        self._received = 0
        self._points_finished = 0
        self._transport_events: list[str] = []
        self._sequence = 0
        self._last_publish = -math.inf
        self._closed = False
        self.internal_errors: list[str] = []
        self.snapshot: RunSnapshot = self._build_snapshot()

    # ------------------------------------------------------------------ socket / replay path

    def handle_frames(self, frames: Sequence, received_at: float | None = None) -> str | None:
        """Take one multipart message as received; returns the rejection reason or None.

        The frames are recorded (if a recorder is set) exactly as given, with the reason when
        rejected. Never raises on bad input.
        """
        self._received += 1
        try:
            msg = wire.decode(frames, self.max_message_bytes)
            reason = self._dispatch(msg, frames)
        except Exception:  # a bug must not take the monitor down; it is counted and shown
            reason = "internal_error"
            self._internal_error()
            self._rejected[reason] += 1
        if self._recorder is not None:
            self._recorder.write(
                frames, time.time() if received_at is None else received_at, rejected_reason=reason
            )
        self._maybe_publish()
        return reason

    def _dispatch(self, msg, frames) -> str | None:
        if isinstance(msg, wire.Rejection):
            self._reject_unplaced(msg, frames)
            return msg.reason
        st = self._stream(msg.stream)
        if st is None:
            self._rejected["too_many_streams"] += 1
            return "too_many_streams"
        st.received += 1
        reason = self._check_sequence(st, msg.session, msg.seq)
        if reason is None:
            if isinstance(msg, wire.SamplesMessage):
                reason = self._on_samples_message(st, msg)
            elif isinstance(msg, wire.PointMessage):
                self._on_point(st, msg.point)
            else:
                self._on_end(st, counts_message=True)
        if reason is not None:
            self._count_rejection(st, reason)
        else:
            st.active = True
            st.messages += 1
            if st.point is not None and not isinstance(msg, wire.EndMessage):
                st.point.messages += 1
        return reason

    def _reject_unplaced(self, rej, frames) -> None:
        # the topic names the stream the publisher sent on (a header naming another stream
        # is exactly what stream_mismatch rejects), so it takes precedence
        name = _topic_of(frames)
        if name is None:
            name = rej.stream
        st = self._stream(name) if name is not None else None
        if st is None:
            self._rejected[rej.reason] += 1
            return
        st.received += 1
        if rej.session is not None and rej.seq is not None:
            # it consumed its seq (a repeated seq is simply counted under the wire's reason)
            self._check_sequence(st, rej.session, rej.seq)
        else:
            st.unreadable_pending += 1
        self._count_rejection(st, rej.reason)

    def _count_rejection(self, st: _StreamState, reason: str) -> None:
        self._rejected[reason] += 1
        st.rejected[reason] += 1
        if st.point is not None:
            st.point.rejected[reason] += 1
        else:
            st.carry_rejected[reason] += 1

    def _check_sequence(self, st: _StreamState, session: str, seq: int) -> str | None:
        if st.session is None:
            st.session, st.expected_seq = session, seq + 1
            return None
        if session != st.session:
            if st.point is not None:
                self._finish_point(st, complete=False)
            st.restarts += 1
            st.session, st.expected_seq = session, seq + 1
            st.unreadable_pending = 0
            st.ended = False
            return None
        if seq < st.expected_seq:
            return "duplicate_seq"
        if seq > st.expected_seq:
            missing = seq - st.expected_seq
            lost = max(0, missing - st.unreadable_pending)
            if lost:
                st.gaps += 1
                st.lost += lost
                if st.point is not None:
                    st.point.gaps += 1
                    st.point.lost += lost
                else:
                    st.carry_gaps += 1
                    st.carry_lost += lost
        st.unreadable_pending = 0
        st.expected_seq = seq + 1
        return None

    def _on_samples_message(self, st: _StreamState, msg) -> str | None:
        if msg.point is not None and (st.point is None or msg.point.get("id") != st.point.point_id):
            self._on_point(st, msg.point)
        times = msg.times
        args = (msg.velocity, msg.velocity_columns, msg.rate_hz, times, msg.t0, msg.units)
        return self._feed_block(st, *args, weights=msg.weights)

    # ------------------------------------------------------------------ in-process API

    def begin_point(self, stream: str, point: Mapping) -> None:
        """Start a new measurement point on ``stream`` (finishing its current one, complete)."""
        st = self._stream(stream)
        if st is None:
            raise ValueError(f"more than {MAX_STREAMS} streams")
        st.active = True
        self._on_point(st, dict(point))
        self._maybe_publish()

    def feed(
        self,
        stream: str,
        block: np.ndarray,
        columns: Sequence[str] = ("u", "v", "w"),
        rate_hz: float | None = None,
        times: np.ndarray | None = None,
        units: str = "m/s",
        weights: np.ndarray | None = None,
    ) -> str | None:
        """Feed an ``(n, len(columns))`` block of velocity samples; returns a rejection reason.

        ``rate_hz`` for uniform sampling, or ``times`` (s, one per row) for random sampling;
        ``units`` of the velocities (a change within a point is rejected, ``units_changed``);
        ``weights`` (residence times, one per row) with ``times`` (DESIGN §10).
        A block that is not finite or not of the stated shape is rejected and counted, never
        raised on.
        """
        st = self._stream(stream)
        if st is None:
            raise ValueError(f"more than {MAX_STREAMS} streams")
        st.received += 1
        self._received += 1
        block = np.asarray(block)
        columns = tuple(columns)
        reason = None
        if block.ndim != 2 or block.shape[1] != len(columns) or block.shape[0] < 1:
            reason = "bad_shape"
        elif block.dtype.kind != "f":
            reason = "bad_dtype"
        elif not np.isfinite(block).all():
            reason = "non_finite"
        elif times is not None and (
            np.shape(times) != (block.shape[0],) or not np.all(np.diff(times) >= 0)
        ):
            reason = "time_backwards" if np.shape(times) == (block.shape[0],) else "bad_shape"
        elif rate_hz is None and times is None:
            reason = "missing_field"
        if reason is None:
            t0 = 0.0
            if times is None and st.point is not None and st.point.stats is not None:
                t0 = st.point.quality.n / float(rate_hz)  # rows received (the statistics may lag)
            reason = self._feed_block(st, block, columns, rate_hz, times, t0, units, weights)
        if reason is None:
            st.active = True
            st.messages += 1
            if st.point is not None:
                st.point.messages += 1
        else:
            self._count_rejection(st, reason)
        self._maybe_publish()
        return reason

    def end(self, stream: str) -> None:
        """The stream is over: finish its current point (complete)."""
        st = self._stream(stream)
        if st is None:
            raise ValueError(f"more than {MAX_STREAMS} streams")
        self._on_end(st)
        self._maybe_publish()

    def transport_event(self, text: str) -> None:
        """Note a transport event (a peer connected, dropped...) for readers of the snapshot."""
        self._transport_events.append(text)
        del self._transport_events[:-MAX_TRANSPORT_EVENTS]
        self._maybe_publish(force=True)

    def close(self) -> None:
        """Finish every current point (``complete: false``) and write the run line (idempotent)."""
        if self._closed:
            return
        self._closed = True
        for st in self._streams.values():
            if st.point is not None:
                self._finish_point(st, complete=False)
        self._writer.write(self.run_line())
        self._writer.close()
        self.publish()

    # ------------------------------------------------------------------ points

    def _on_point(self, st: _StreamState, point: dict) -> None:
        if st.point is not None:
            self._finish_point(st, complete=True)
        self._start_point(st, point)

    def _start_point(self, st: _StreamState, point: dict | None) -> _PointRun:
        run = _PointRun(st.points_started, point)
        st.points_started += 1
        run.gaps, run.lost, run.rejected = st.carry_gaps, st.carry_lost, st.carry_rejected
        st.carry_gaps, st.carry_lost, st.carry_rejected = 0, 0, Counter()
        st.point = run
        st.ended = False
        return run

    def _on_end(self, st: _StreamState, counts_message: bool = False) -> None:
        if st.point is not None:
            if counts_message:  # the end message belongs to the point it closes
                st.point.messages += 1
            self._finish_point(st, complete=True)
        st.ended = True
        st.active = True
        self._maybe_publish(force=True)  # readers see the end at once

    def _feed_block(
        self, st, velocity, columns, rate_hz, times, t0, units="m/s", weights=None
    ) -> str | None:
        run = st.point if st.point is not None else self._start_point(st, None)
        columns = tuple(columns)
        if run.units is not None and units != run.units:
            return "units_changed"  # never converted, never mixed in
        if run.stats is None:
            run.units = units
            run.columns, run.rate_hz = columns, rate_hz
            run.stats = self._stats.PointStatistics(columns, rate_hz, targets=self.targets)
            if rate_hz is None:  # random sampling: weighted statistics (monitor.random_sampling)
                has_w = weights is not None
                run.random = self._random_feed(columns, has_w, self.weighting, self.targets)
                run.stats = run.random.stats
            run.spectra = None if rate_hz is None else self._spectra.PointSpectra(columns, rate_hz)
            run.quality = self._quality.SignalQuality(columns, self.quality_policy)
            run.t0 = float(t0) if rate_hz is not None and t0 is not None else None
        elif columns != run.columns or rate_hz != run.rate_hz:
            return "layout_changed"
        duration_s = None
        if run.random is not None and (bad := run.random.check(weights)):
            return bad
        if rate_hz is None:
            t_first, t_last = float(times[0]), float(times[-1])
            if run.last_t is not None and t_first < run.last_t:
                return "time_backwards"
            duration_s = t_last - (t_first if run.last_t is None else run.last_t)
            run.last_t = t_last
        n = velocity.shape[0]
        mark = _checkpoint_mark(run.stats)
        cleaned = run.quality.update(velocity)  # the same block, or replaced rows ("exclude")
        if rate_hz is None:  # a duration waits for rows when "exclude" holds them back
            run.held_s += duration_s
            run.random.feed(cleaned, times, weights, run.held_s)
            if cleaned.shape[0]:
                run.held_s = 0.0
        else:
            run.stats.update(cleaned)
        if run.spectra is not None and cleaned.shape[0]:
            run.spectra.update(cleaned)  # the rows the statistics see: a continuous series
        st.samples += n
        st.receive.add(self._clock(), n)
        st.rate_hz = rate_hz
        self._trace(st, velocity, columns, rate_hz, times, t0)
        # Convergence is decided at the statistics' own checkpoints (inside update, from the
        # data alone). At a checkpoint the targeted statistics come from the checkpoint's own
        # evaluation (a history row, and the converged signal at once); every other statistic
        # waits for the next publication (pace of the clock) or the end of the point, and so
        # does everything between checkpoints, where the verdict cannot change.
        if mark is None or run.snapshot is None:
            self._take_stats_snapshot(st, run)
        elif _checkpoint_mark(run.stats) != mark:
            self._on_checkpoint(st, run)
        else:
            run.stale = True
        return None

    def _on_checkpoint(self, st: _StreamState, run: _PointRun) -> None:
        """The control signals are decided here only (sample-count checkpoints: replay = live).

        ``converged`` once the full snapshot's verdict says move on (the record-length rule
        needs the integral times, which only the full snapshot has); ``withdrawn`` when a
        signalled point has a suspect targeted statistic at a later checkpoint.
        """
        snap = run.stats.targeted_snapshot()
        snap = self._quality.hold_suspect(snap, run.quality.suspect_reasons())
        self._add_history(run, snap)
        if not run.signalled and snap.converged:
            self._take_stats_snapshot(st, run, history=False)  # the summary line needs all
            if self._point_verdict(run.snapshot).move_on:
                self._signal(st, run, converged=True)
        elif run.signalled and any(e.state == "suspect" for e in snap.targeted()):
            self._take_stats_snapshot(st, run, history=False)
            self._signal(st, run, converged=False)
        else:
            run.stale = True
            if run.snapshot is None:
                self._take_stats_snapshot(st, run, history=False)

    def _signal(self, st: _StreamState, run: _PointRun, converged: bool) -> None:
        at_s = float(run.snapshot.duration_s)
        run.signalled = converged
        if converged:
            run.signalled_at_s, run.converged_clock = at_s, self._clock()
        else:
            run.withdrawn_at_s, run.converged_clock = at_s, None
        callback = self._on_converged if converged else self._on_withdrawn
        if callback is not None:
            try:
                callback(st.name, dict(run.point), at_s, self._point_line(st, run, False))
            except Exception:
                self._internal_error()

    def _take_stats_snapshot(self, st: _StreamState, run: _PointRun, history=True) -> None:
        run.stale = False
        snap = self._quality.hold_suspect(run.stats.snapshot(), run.quality.suspect_reasons())
        run.snapshot = snap
        if history:
            self._add_history(run, snap)

    @staticmethod
    def _add_history(run: _PointRun, snap) -> None:
        """One row of the targeted statistics' values, half-widths and targets (dashboard)."""
        h = run.history
        h["duration_s"].append(float(snap.duration_s))
        for e in snap.targeted():
            h.setdefault(e.name, []).append(float(e.value))
            h.setdefault(e.name + "_hw", []).append(float(e.half_width))
            h.setdefault(e.name + "_target", []).append(float(e.target))
        if len(h["duration_s"]) >= HISTORY_ROWS:
            for key in h:
                h[key] = h[key][::2]

    def _finish_point(self, st: _StreamState, complete: bool) -> None:
        run = st.point
        if run.stats is not None:  # the rows the quality checks still hold
            tail = run.quality.flush()
            if run.random is not None:
                run.random.feed(tail, np.empty(0), run.random.no_weights(), run.held_s)
            else:
                run.stats.update(tail)
            run.stale = True
        if run.stats is not None and (run.snapshot is None or run.stale):
            self._take_stats_snapshot(st, run)
        line = self._point_line(st, run, complete)
        self._writer.write(line)
        st.finished.append(line)
        st.last_history = run.history
        st.point = None
        self._points_finished += 1
        self._maybe_publish(force=True)

    # ------------------------------------------------------------------ lines

    def _point_line(self, st: _StreamState, run: _PointRun, complete: bool) -> dict:
        snap = run.snapshot
        rejected = _zero_reasons()
        rejected.update(run.rejected)
        line = {
            "v": 1,
            "kind": "point",
            "complete": bool(complete),
            "stream": st.name,
            "session": st.session,
            "point": dict(run.point),
            "point_index": run.index,
            "samples": 0,
            "duration_s": 0.0,
            "messages": run.messages,
            "gaps": run.gaps,
            "lost_messages": run.lost,
            "rejected": rejected,
            "restarts": st.restarts,
            "confidence": float(self.targets.confidence),
            "converged": False,
            "converged_at_s": None,
            "k_method": None,
            "suspect": {},
            "verdict": self._point_verdict(snap).to_json(),
            "signalled_at_s": run.signalled_at_s,
            "withdrawn_at_s": run.withdrawn_at_s,
            "columns": list(run.columns) if run.columns else [],
            "rate_hz": run.rate_hz,
            "units": run.units,
            "statistics": [],
        }
        if snap is not None:
            fields = snap.summary_fields()
            line.update(fields)
            extra, rows = self._spectra.summary_fields(
                run.spectra, snap, run.point, random_sampling=run.rate_hz is None
            )
            line.update(extra)
            # keep the contract order: statistics last
            line["quality"] = run.quality.summary()
            if run.random is not None:
                line.update(run.stats.random_sampling_fields())  # DESIGN §10
            line["statistics"] = line.pop("statistics") + rows
        return line

    def run_line(self) -> dict:
        """The closing ``run`` line of DESIGN §4 (totals of the whole run)."""
        rejected = _zero_reasons()
        rejected.update(self._rejected)
        return {
            "v": 1,
            "kind": "run",
            "samples": sum(st.samples for st in self._streams.values()),
            "messages": self._received,
            "lost": sum(st.lost for st in self._streams.values()),
            "gaps": sum(st.gaps for st in self._streams.values()),
            "rejected": rejected,
            "points": self._points_finished,
            "streams": sorted(n for n, st in self._streams.items() if st.active),
            "restarts": sum(st.restarts for st in self._streams.values()),
        }

    # ------------------------------------------------------------------ state for readers

    @property
    def streams_seen(self) -> tuple[str, ...]:
        """Streams with at least one accepted message."""
        return tuple(n for n, st in self._streams.items() if st.active)

    @property
    def all_ended(self) -> bool:
        """True once at least one stream was seen and every stream seen has sent ``end``."""
        active = [st for st in self._streams.values() if st.active]
        return bool(active) and all(st.ended for st in active)

    def _stream(self, name: str) -> _StreamState | None:
        st = self._streams.get(name)
        if st is None:
            if len(self._streams) >= MAX_STREAMS:
                return None
            st = self._streams[name] = _StreamState(name)
        return st

    def _trace(self, st, velocity, columns, rate_hz, times, t0) -> None:
        """Keep a thinned copy of the latest samples (at most TRACE_ROWS rows) for display.

        The buffer holds twice TRACE_ROWS rows and is compacted only when full, so a message
        costs a strided copy of at most TRACE_ROWS_PER_MESSAGE rows.
        """
        n, m = velocity.shape
        if st.trace_columns != columns:
            st.trace = np.zeros((2 * TRACE_ROWS, m + 1))
            st.trace_columns, st.trace_fill = columns, 0
        stride = max(1, -(-n // TRACE_ROWS_PER_MESSAGE))
        thinned = velocity[::stride]
        k = thinned.shape[0]
        if st.trace_fill + k > st.trace.shape[0]:
            keep = TRACE_ROWS - k
            st.trace[:keep] = st.trace[st.trace_fill - keep : st.trace_fill]
            st.trace_fill = keep
        rows = st.trace[st.trace_fill : st.trace_fill + k]
        if times is not None:
            rows[:, 0] = times[::stride]
        else:
            rows[:, 0] = np.arange(0, n, stride)
            rows[:, 0] /= rate_hz
            rows[:, 0] += t0
        rows[:, 1:] = thinned
        st.trace_fill += k

    def _maybe_publish(self, force: bool = False) -> None:
        if force or self._clock() - self._last_publish >= self._interval:
            self.publish()

    def publish(self) -> RunSnapshot:
        """Build and publish a new snapshot now (rebinding :attr:`snapshot`)."""
        self.snapshot = self._build_snapshot()
        return self.snapshot

    def _build_snapshot(self) -> RunSnapshot:
        now = self._clock()
        self._last_publish = now
        self._sequence += 1
        views = {}
        for name, st in self._streams.items():
            run = st.point
            if run is not None and run.stale:
                self._take_stats_snapshot(st, run)
            trace = {}
            if st.trace_fill:
                # a copy: the buffer is overwritten by the next messages, a snapshot is not
                window = st.trace[max(0, st.trace_fill - TRACE_ROWS) : st.trace_fill].copy()
                trace["t"] = window[:, 0]
                for j, c in enumerate(st.trace_columns):
                    trace[c] = window[:, j + 1]
            # after a point ends its running estimates stay on screen until the next begins
            shown = run.history if run else st.last_history
            history = {k: np.asarray(v) for k, v in shown.items()}
            views[name] = StreamView(
                stream=name,
                session=st.session,
                point=dict(run.point) if run else None,
                point_index=run.index if run else st.points_started - 1,
                stats=run.snapshot if run else None,
                rate_hz=st.rate_hz,
                received_rate_hz=st.receive.rate_hz(now),
                messages=st.messages,
                lost_messages=st.lost,
                gaps=st.gaps,
                restarts=st.restarts,
                rejected=dict(st.rejected),
                trace=trace,
                history=history,
                finished=tuple(st.finished),
                ended=st.ended,
                converged_wall_age_s=(
                    now - run.converged_clock if run and run.converged_clock is not None else None
                ),
                spectrum=(run.spectra.live(run.snapshot, run.point.get("nu"), now)
                          if run and run.spectra is not None else None),
                quality=quality_view(run),
            )
        return RunSnapshot(
            sequence=self._sequence,
            created_at=time.time(),
            streams=views,
            rejected_total=dict(self._rejected),
            transport_events=tuple(self._transport_events),
        )

    def _internal_error(self) -> None:
        text = traceback.format_exc(limit=4)
        self.internal_errors.append(text)
        del self.internal_errors[:-20]
        print(f"eddyvigil: internal error (message dropped and counted):\n{text}", file=sys.stderr)


def quality_view(run: _PointRun | None) -> dict | None:
    """The point's quality object for readers, with the recent flagged samples as ``marks``
    (``t`` s, ``component``, ``kind`` 1 spike / 2 dropout, raw ``value``; uniform sampling only)."""
    if run is None or run.quality is None:
        return None
    out = run.quality.summary()
    marks = run.quality.marks if run.t0 is not None and run.rate_hz else []
    out["marks"] = {
        "t": [run.t0 + r / run.rate_hz for r, _, _, _ in marks],
        "component": [run.columns[c] for _, c, _, _ in marks],
        "kind": [k for _, _, k, _ in marks],
        "value": [v for _, _, _, v in marks],
    }
    return out


def quality_note(quality: Mapping | None) -> str:
    """Non-zero quality counts for the status line, e.g. `` quality u: 3 spikes, 200 dropout``."""
    if not quality:
        return ""
    parts = []
    for c, q in quality.items():
        if not isinstance(q, Mapping) or "spikes" not in q:
            continue
        found = [
            f"{q[key]} {label}"
            for key, label in (
                ("spikes", "spikes"),
                ("dropout_samples", "dropout"),
                ("clipped_samples", "clipped"),
            )
            if q[key]
        ]
        if found:
            parts.append(f"{c}: {', '.join(found)}")
    return (" quality " + "; ".join(parts)) if parts else ""


def _checkpoint_mark(point_stats):
    """The sample count of the statistics' next convergence checkpoint (None if unknown)."""
    checkpoints = getattr(point_stats, "checkpoints", None)
    return getattr(checkpoints, "next_n", None)


def _topic_of(frames) -> str | None:
    """The topic frame as text, if the frames are at least that readable."""
    try:
        first = frames[0]
        buf = getattr(first, "buffer", first)
        data = bytes(memoryview(buf)[:256])
        return data.decode("utf-8") or None
    except Exception:
        return None
