"""The monitor's core loop: decoded messages -> per-stream, per-point statistics -> snapshots.

The orchestrator only; each job has its own module:

- :mod:`~eddyvigil.monitor.stream`: one stream's totals, current point, finished lines, view;
- :mod:`~eddyvigil.monitor.sequence`: a stream's session, expected ``seq``, gaps, losses;
- :mod:`~eddyvigil.monitor.point_run`: one point's accumulators, counts, snapshots and
  control signals (:meth:`~eddyvigil.monitor.point_run.PointRun.feed` is where a block enters
  the statistics);
- :mod:`~eddyvigil.monitor.display`: trace buffer, history rows, quality marks (readers only);
- :mod:`~eddyvigil.monitor.lines`: the summary's point and run lines.

Words used here: a *stream* is one publisher's named series; a *point run* is what one
measurement point of a stream has gathered (``stream.current``); the *run* is the whole
monitoring session (the run line); a *point snapshot* is the statistics of one point
(``stats.PointSnapshot``), the *run snapshot* what the pipeline publishes for readers
(:attr:`Pipeline.snapshot`, a :class:`~eddyvigil.monitor.state.RunSnapshot`).

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
- Consecutive accepted blocks of a point (uniform sampling) go to its accumulators together
  once they span ``coalesce_s`` (0.5 s) of data (:mod:`~eddyvigil.monitor.coalesce`): the
  statistics, and so the snapshots and the converged signal, lag the received rows by less
  than that; the trace and the counts do not. The groups depend on the rows alone.
- Convergence and ``converged_at_s`` are decided by the statistics at their own checkpoints
  of the sample count, from the data alone, so a replay reproduces a live run's summaries bit
  for bit whatever its pace. The pipeline takes a statistics snapshot right after each
  checkpoint (when the control signal may fire), when it publishes a
  :class:`~eddyvigil.monitor.state.RunSnapshot` (paced by the clock) and when a point ends.
"""

from __future__ import annotations

import math
import sys
import time
import traceback
from collections import Counter
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from eddyvigil.monitor import wire
from eddyvigil.monitor.display import (
    HISTORY_ROWS,
    TRACE_ROWS,
    TRACE_ROWS_PER_MESSAGE,
    quality_note,
    quality_view,
)
from eddyvigil.monitor.budget_cmd import budget_line
from eddyvigil.monitor.coalesce import COALESCE_S, Coalescer, target_rows
from eddyvigil.monitor.campaign import Campaign
from eddyvigil.monitor.lines import point_line, run_line
from eddyvigil.monitor.point_run import PointRun
from eddyvigil.monitor.state import RunSnapshot
from eddyvigil.monitor.stream import StreamState
from eddyvigil.monitor.summary import SummaryWriter

__all__ = [
    "Pipeline",
    "PIPELINE_REJECTION_REASONS",
    "TRACE_ROWS",
    "TRACE_ROWS_PER_MESSAGE",
    "HISTORY_ROWS",
    "quality_note",
    "quality_view",
]

#: Reasons the pipeline itself rejects a well-formed message for (in addition to the wire's).
PIPELINE_REJECTION_REASONS = (
    "duplicate_seq",
    "late_session",
    "layout_changed",
    "units_changed",
    "time_backwards",
    "too_many_streams",
    "internal_error",
)
#: Streams tracked at most (protects memory against a flood of invented stream names).
MAX_STREAMS = 256
#: Streams with rejected messages only (no message ever accepted) kept at most: a misconfigured
#: publisher stays visible with its reasons, but a sender of garbage under ever new names
#: cannot fill the MAX_STREAMS slots and lock real streams out. The oldest is forgotten first;
#: its rejections, losses and gaps stay in the run's totals.
MAX_REJECTED_ONLY = 16
#: Transport events kept for the snapshot.
MAX_TRANSPORT_EVENTS = 50


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
    quality : str
        ``"flag"`` or ``"exclude"`` (:mod:`eddyvigil.stats.quality`; README, Signal quality).
    coalesce_s : float
        Consecutive blocks of a point (uniform sampling) go to its accumulators together once
        they span this much data (:mod:`eddyvigil.monitor.coalesce`); 0: every block alone.
        A replay must use the value the live run used to reproduce it bit for bit.
    spectra_thread : bool
        Run the spectra's windowing and transforms on one worker thread of the pipeline's own,
        beside the statistics (scipy.fft and the numba kernels release the GIL): the same
        results, bit for bit, in less wall time where a second core is free
        (benchmarks/bench_spectra.py). False: inline.
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
        coalesce_s: float = COALESCE_S,
        points: Sequence[Mapping] | None = None,
        spectra_thread: bool = True,
    ):
        from eddyvigil import stats  # the numba-compiled core loads only when a pipeline is built

        # one worker for every point's spectra; its thread starts with the first transform
        self._spectra_pool = (
            ThreadPoolExecutor(max_workers=1, thread_name_prefix="eddyvigil-spectra")
            if spectra_thread
            else None
        )

        self._coalesce_s = float(coalesce_s)

        self.targets = targets if targets is not None else stats.Targets.defaults()
        self._writer = summary if isinstance(summary, SummaryWriter) else SummaryWriter(summary)
        self._on_converged = on_converged
        if on_withdrawn is None:
            on_withdrawn = getattr(on_converged, "withdrawn", None)
        self._on_withdrawn = on_withdrawn
        self._recorder = recorder
        self._interval = float(snapshot_interval_s)
        self._clock = clock
        self.max_message_bytes = int(max_message_bytes)
        self.quality_policy = quality  # stats.quality: "flag" or "exclude" (README, Signal quality)
        self.weighting = weighting  # random sampling without a weight column (DESIGN §10)
        # the traverse's points (watch --points; monitor.campaign), for the campaign ETA
        self.points = [dict(p) for p in points] if points is not None else None
        self._streams: dict[str, StreamState] = {}
        self._unconfirmed: dict[str, None] = {}  # names created, not yet known to be active
        self._forgotten = {"lost": 0, "gaps": 0, "restarts": 0, "streams": 0}
        self._rejected: Counter = Counter()  # of the whole run
        self._received = 0  # messages of the whole run
        self._points_finished = 0
        self._transport_events: list[str] = []
        self._snapshots_published = 0  # numbers the run snapshots (RunSnapshot.sequence)
        self._last_publish = -math.inf
        self._closed = False
        self.internal_errors: list[str] = []
        #: peers refused by CURVE (set by watch with --curve-*; None: no CURVE, not in the run line)
        self.refused_peers: int | None = None
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
                self._on_point(st, msg.point, msg.header)
                if msg.n_probes is not None:  # a rake or field (monitor.fields)
                    st.current.layout_rake, st.current.layout_grid = msg.probes, msg.grid
                    st.current.layout_probes = msg.n_probes
            else:
                self._on_end(st, counts_message=True)
        if reason is not None:
            self._count_rejection(st, reason)
        else:
            st.active = True
            st.messages += 1
            if st.current is not None and not isinstance(msg, wire.EndMessage):
                st.current.messages += 1
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
            st.sequence.unreadable()
        self._count_rejection(st, rej.reason)

    def _count_rejection(self, st: StreamState, reason: str) -> None:
        self._rejected[reason] += 1
        st.count_rejection(reason)

    def _check_sequence(self, st: StreamState, session: str, seq: int) -> str | None:
        """Sequence accounting (monitor.sequence); a restart finishes the current point and a
        loss is charged to the current point, or to the next when none is current. A late
        message of a session a restart ended (PULL interleaves a lagging old connection with
        the new one) is rejected as ``late_session``: its point is already finished."""
        if st.sequence.is_late(session):
            return "late_session"
        if st.sequence.is_restart(session):
            if st.current is not None:
                self._finish_point(st, complete=False)  # its line names the old session
            st.ended = False
        outcome = st.sequence.check(session, seq)
        if outcome.duplicate:
            return "duplicate_seq"
        if outcome.lost:
            st.charge_loss(outcome.lost)
        return None

    def _on_samples_message(self, st: StreamState, msg) -> str | None:
        if msg.point is not None and (
            st.current is None or msg.point.get("id") != st.current.point_id
        ):
            self._on_point(st, msg.point)
        if msg.probes is not None or (st.current is not None and st.current.field is not None):
            from eddyvigil.monitor import fields

            return fields.feed(self, st, msg)
        args = (msg.velocity, msg.velocity_columns, msg.rate_hz, msg.times, msg.t0, msg.units)
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
        reason = _block_rejection(block, columns, rate_hz, times)
        if reason is None:
            t0 = 0.0
            if times is None and st.current is not None and st.current.statistics is not None:
                t0 = st.current.rows_received / float(rate_hz)
            reason = self._feed_block(st, block, columns, rate_hz, times, t0, units, weights)
        if reason is None:
            st.active = True
            st.messages += 1
            if st.current is not None:
                st.current.messages += 1
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
            if st.current is not None:
                self._finish_point(st, complete=False)
        self._writer.write(self.run_line())
        self._writer.close()
        self.publish()
        if self._spectra_pool is not None:
            self._spectra_pool.shutdown(wait=True)

    # ------------------------------------------------------------------ a point's lifecycle

    def _on_point(self, st: StreamState, meta: dict, header: Mapping | None = None) -> None:
        if st.current is not None:
            self._finish_point(st, complete=True)
        self._start_point(st, meta, header)

    def _start_point(self, st: StreamState, meta: dict | None,
                     header: Mapping | None = None) -> PointRun:
        point_run = st.start_point(meta, history_rows=HISTORY_ROWS, header=header, now=self._clock())
        point_run.spectra_executor = self._spectra_pool
        if self.targets.budget is not None:  # [budget]: targets from the finished neighbours
            point_run.derive_targets(self.targets, st.finished, st.name)
        return point_run

    def _on_end(self, st: StreamState, counts_message: bool = False) -> None:
        if st.current is not None:
            if counts_message:  # the end message belongs to the point it closes
                st.current.messages += 1
            self._finish_point(st, complete=True)
        st.ended = True
        st.active = True
        self._maybe_publish(force=True)  # readers see the end at once

    def _feed_block(
        self, st, velocity, columns, rate_hz, times, t0, units="m/s", weights=None
    ) -> str | None:
        """A block of accepted samples: checks against the point, the point's accumulators
        (PointRun.feed), the stream's totals and trace, then the checkpoint's signals."""
        point_run = st.current if st.current is not None else self._start_point(st, None)
        columns = tuple(columns)
        reason = point_run.accept_layout(
            columns, rate_hz, units, t0, self.targets, self.quality_policy, self.weighting,
            weights,
        )
        if reason is not None:
            return reason
        reason, duration_s = point_run.accept_times(times)
        if reason is not None:
            return reason
        mark = point_run.checkpoint_mark()
        if point_run.random is None and self._coalesce_s > 0:  # joined blocks (monitor.coalesce)
            if point_run.pending is None:
                point_run.pending = Coalescer(target_rows(rate_hz, self._coalesce_s))
            groups = point_run.pending.add(velocity)
        else:
            groups = (velocity,)
        for group in groups:
            point_run.feed(group, duration_s, times, weights)
        st.add_samples(velocity, columns, rate_hz, times, t0, self._clock())
        if not groups:  # the rows wait for the next ones: the statistics did not change
            return None
        # Convergence is decided at the statistics' own checkpoints (inside update, from the
        # data alone). At a checkpoint the targeted statistics come from the checkpoint's own
        # evaluation (a history row, and the converged signal at once); every other statistic
        # waits for the next publication (pace of the clock) or the end of the point, and so
        # does everything between checkpoints, where the verdict cannot change.
        if mark is None or point_run.point_snapshot is None:
            point_run.take_snapshot()
        elif point_run.checkpoint_mark() != mark:
            signal = point_run.checkpoint_signal()
            if signal is not None:
                self._signal(st, point_run, converged=signal == "converged")
        else:
            point_run.snapshot_stale = True
        return None

    def _signal(self, st: StreamState, point_run: PointRun, converged: bool, at_s=None) -> None:
        """Send a converged or withdrawn signal (control socket) with the point's line so far."""
        at_s = point_run.record_signal(converged, self._clock() if converged else None, at_s)
        callback = self._on_converged if converged else self._on_withdrawn
        if callback is not None:
            try:
                line = self._point_line(st, point_run, False)
                if point_run.field is not None:  # a rake or field (monitor.fields)
                    from eddyvigil.monitor import fields

                    fields.live_line(point_run, st.name, line)
                callback(st.name, dict(point_run.meta), at_s, line)
            except Exception:
                self._internal_error()

    def _finish_point(self, st: StreamState, complete: bool) -> None:
        """The point ends: its last rows, a final snapshot, its line written; readers told."""
        point_run = st.current
        point_run.flush()
        if point_run.statistics is not None and (
            point_run.point_snapshot is None or point_run.snapshot_stale
        ):
            point_run.take_snapshot()
        if point_run.signalled and point_run.field is None and not point_run.final_move_on():
            # the final evaluation also sees the rows after the last checkpoint: a point the
            # traverse may already have left on `converged` is taken back, with the reason
            self._signal(st, point_run, converged=False)
        line = self._point_line(st, point_run, complete)
        if point_run.field is not None:  # a rake or field: per-vector arrays go to a file
            from eddyvigil.monitor import fields

            paths = self._writer.file_paths()
            scalars, line["field"] = fields.finish(point_run, st.name, paths[0] if paths else None)
            line.update(scalars)
        self._write_point_line(st, line)
        st.end_point()
        self._points_finished += 1
        self._maybe_publish(force=True)

    # ------------------------------------------------------------------ lines

    def _point_line(self, st: StreamState, point_run: PointRun, complete: bool) -> dict:
        return point_line(
            st.name,
            st.sequence.session,
            st.sequence.restarts,
            point_run,
            complete,
            self.targets.confidence,
        )

    def _write_point_line(self, st: StreamState, line: dict) -> None:
        """The one place a finished point's line is written (and kept for readers)."""
        self._writer.write(line)
        st.finished.append(line)
        st.campaign.finish(line, st.current.t0 if st.current is not None else None,
                           self._clock())
        # DESIGN §11: the stream's k budget so far, after every point (null terms, with the
        # reason, before three positions), with the traverse's campaign ETA
        self._writer.write(budget_line(st.name, st.finished, float(self.targets.confidence),
                                       campaign=st.campaign.view()))

    def run_line(self) -> dict:
        """The closing ``run`` line of DESIGN §4 (totals of the whole run)."""
        line = run_line(
            self._streams.values(), self._received, self._rejected, self._points_finished
        )
        for key in ("lost", "gaps", "restarts"):  # of streams forgotten with rejections only
            line[key] += self._forgotten[key]
        if self.refused_peers is not None:
            line["refused_peers"] = int(self.refused_peers)
        return line

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

    def _stream(self, name: str) -> StreamState | None:
        st = self._streams.get(name)
        if st is None:
            self._forget_rejected_only(MAX_REJECTED_ONLY - 1)
            if len(self._streams) >= MAX_STREAMS:
                return None
            st = self._streams[name] = StreamState(name, Campaign(
                self.points, self.targets.required_record_s, float(self.targets.confidence)))
            self._unconfirmed[name] = None
        return st

    def _forget_rejected_only(self, keep: int) -> None:
        """Keep at most ``keep`` streams that never had a message accepted (the oldest go;
        MAX_REJECTED_ONLY). Their counts stay in the run's totals."""
        for n in list(self._unconfirmed):
            if self._streams[n].active:
                del self._unconfirmed[n]
        while len(self._unconfirmed) > keep:
            n = next(iter(self._unconfirmed))
            del self._unconfirmed[n]
            st = self._streams.pop(n)
            self._forgotten["lost"] += st.sequence.lost
            self._forgotten["gaps"] += st.sequence.gaps
            self._forgotten["restarts"] += st.sequence.restarts
            self._forgotten["streams"] += 1

    def _maybe_publish(self, force: bool = False) -> None:
        if force or self._clock() - self._last_publish >= self._interval:
            self.publish()

    def publish(self) -> RunSnapshot:
        """Build and publish a new run snapshot now (rebinding :attr:`snapshot`)."""
        self.snapshot = self._build_snapshot()
        return self.snapshot

    def _build_snapshot(self) -> RunSnapshot:
        now = self._clock()
        self._last_publish = now
        self._snapshots_published += 1
        views = {}
        for name, st in self._streams.items():
            views[name] = st.view(now)
        return RunSnapshot(
            sequence=self._snapshots_published,
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


def _block_rejection(block: np.ndarray, columns: tuple, rate_hz, times) -> str | None:
    """Why a block given to :meth:`Pipeline.feed` cannot be taken (the wire's reasons), or None."""
    if block.ndim != 2 or block.shape[1] != len(columns) or block.shape[0] < 1:
        return "bad_shape"
    if block.dtype.kind != "f":
        return "bad_dtype"
    if not np.isfinite(block).all():
        return "non_finite"
    if times is not None and (
        np.shape(times) != (block.shape[0],) or not np.all(np.diff(times) >= 0)
    ):
        return "time_backwards" if np.shape(times) == (block.shape[0],) else "bad_shape"
    if rate_hz is None and times is None:
        return "missing_field"
    return None


def _topic_of(frames) -> str | None:
    """The topic frame as text, if the frames are at least that readable."""
    try:
        first = frames[0]
        buf = getattr(first, "buffer", first)
        data = bytes(memoryview(buf)[:256])
        return data.decode("utf-8") or None
    except Exception:
        return None
