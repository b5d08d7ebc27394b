"""Everything the monitor knows about one stream, and what readers see of it.

:class:`StreamState` holds a stream's totals over the whole run (messages, samples,
rejections), its :class:`~eddyvigil.monitor.sequence.SequenceAccount`, its current
:class:`~eddyvigil.monitor.point_run.PointRun` (``current``; None between points), the lines
of its finished points and its display buffers (:class:`~eddyvigil.monitor.display.Trace`,
the last finished point's history and statistics, the received rate) and its traverse
(:class:`~eddyvigil.monitor.campaign.Campaign`: the campaign ETA). A loss or a rejection
found while no point is current is carried to the next point of the stream.
:meth:`StreamState.view` builds the stream's :class:`~eddyvigil.monitor.state.StreamView` for a published run snapshot.
"""

from __future__ import annotations

from collections import Counter

from eddyvigil.monitor.campaign import Campaign
from eddyvigil.monitor.display import History, Trace, quality_view
from eddyvigil.monitor.point_run import PointRun
from eddyvigil.monitor.random_sampling import random_sampling_view
from eddyvigil.monitor.rate import ReceiveRate
from eddyvigil.monitor.sequence import SequenceAccount
from eddyvigil.monitor.state import StreamView

__all__ = ["StreamState"]


class StreamState:
    """One stream: sequence account, totals, current point run, finished lines, display."""

    def __init__(self, name: str, campaign: Campaign | None = None):
        self.name = name
        self.campaign = campaign if campaign is not None else Campaign()
        self.sequence = SequenceAccount()
        self.active = False  # at least one accepted message
        self.ended = False
        self.messages = 0  # accepted
        self.received = 0  # accepted + rejected
        self.samples = 0
        self.rejected: Counter = Counter()
        # losses and rejections found while no point is current, charged to the next point
        self.carry_gaps = 0
        self.carry_lost = 0
        self.carry_rejected: Counter = Counter()
        self.current: PointRun | None = None
        self.points_started = 0
        self.finished: list[dict] = []  # point lines of its finished points
        self.last_history: History | None = None  # of the last finished point (display)
        self.last_point: tuple | None = None  # (meta, PointSnapshot) of the last finished one
        self.last_spectrum: tuple | None = None  # its (spectrum, dissipation, eps status)
        self.last_field = None  # the last rake/field view (monitor.fields.live_view)
        self.rate_hz: float | None = None
        self.trace = Trace()
        self.receive = ReceiveRate()

    def count_rejection(self, reason: str) -> None:
        """A rejected message: the stream's count and the current (or next) point's."""
        self.rejected[reason] += 1
        if self.current is not None:
            self.current.rejected[reason] += 1
        else:
            self.carry_rejected[reason] += 1

    def charge_loss(self, lost: int) -> None:
        """A gap of ``lost`` messages (the sequence account has counted it for the stream)."""
        if self.current is not None:
            self.current.gaps += 1
            self.current.lost += lost
        else:
            self.carry_gaps += 1
            self.carry_lost += lost

    def start_point(self, meta: dict | None, history_rows: int | None = None,
                    header: dict | None = None, now: float | None = None) -> PointRun:
        """A new current point, with the losses and rejections carried so far (``header``:
        its point message's, where the publisher may announce its traverse)."""
        point_run = PointRun(self.points_started, meta, history_rows=history_rows)
        self.points_started += 1
        point_run.gaps, point_run.lost = self.carry_gaps, self.carry_lost
        point_run.rejected = self.carry_rejected
        self.carry_gaps, self.carry_lost, self.carry_rejected = 0, 0, Counter()
        self.current = point_run
        self.ended = False
        self.campaign.start(meta, header, now)
        return point_run

    def end_point(self) -> None:
        """The current point is over (its line written); its history and statistics stay on
        screen."""
        self.last_history = self.current.history
        self.last_point = (dict(self.current.meta), self.current.point_snapshot)
        spectra = self.current.spectra
        self.last_spectrum = None
        if spectra is not None:  # the point line's evaluation (cached), for the display
            at_end = spectra.evaluate(self.current.point_snapshot, self.current.meta.get("nu"))
            self.last_spectrum = (*at_end, spectra.eps_status)
        self.last_field = self.current.field_view
        self.current = None

    def add_samples(self, velocity, columns, rate_hz, times, t0, now: float) -> None:
        """Accepted samples: totals, received rate (``now``: the pipeline's clock), trace."""
        n = velocity.shape[0]
        self.samples += n
        self.receive.add(now, n)
        self.rate_hz = rate_hz
        self.trace.add(velocity, columns, rate_hz, times, t0)

    def view(self, now: float) -> StreamView:
        """What readers see of the stream (a fresh point snapshot first, if data arrived)."""
        point_run = self.current
        if point_run is None:
            # after a point ends its running estimates stay on screen until the next begins
            shown = self.last_history
            meta = point_snapshot = converged_age = None
            spectrum = self.last_spectrum
            point_index = self.points_started - 1
            campaign = self.campaign.view(live=True)
        else:
            if point_run.snapshot_stale:
                point_run.take_snapshot()
            shown = point_run.history
            meta, point_index = dict(point_run.meta), point_run.index
            point_snapshot = point_run.point_snapshot
            converged_age = None
            if point_run.converged_clock is not None:
                converged_age = now - point_run.converged_clock
            spectrum = None
            if point_run.spectra is not None:
                spectrum = point_run.spectra.live(point_snapshot, point_run.meta.get("nu"), now)
            elapsed = point_snapshot.duration_s if point_snapshot is not None else 0.0
            campaign = self.campaign.view(float(elapsed), live=True)
        return StreamView(
            stream=self.name,
            session=self.sequence.session,
            point=meta,
            point_index=point_index,
            stats=point_snapshot,
            rate_hz=self.rate_hz,
            received_rate_hz=self.receive.rate_hz(now),
            messages=self.messages,
            lost_messages=self.sequence.lost,
            gaps=self.sequence.gaps,
            restarts=self.sequence.restarts,
            rejected=dict(self.rejected),
            trace=self.trace.window(),
            history=shown.arrays() if shown is not None else {},
            finished=tuple(self.finished),
            ended=self.ended,
            converged_wall_age_s=converged_age,
            spectrum=spectrum,
            quality=quality_view(point_run),
            random_sampling=random_sampling_view(point_run),
            derived_targets=(point_run.derived.to_json()
                             if point_run is not None and point_run.derived is not None else None),
            campaign=campaign,
            last_point=self.last_point,
            field=self.last_field if point_run is None else _field_view(point_run, now),
        )


def _field_view(point_run, now: float):
    if point_run.field is None:
        return None
    from eddyvigil.monitor import fields

    return fields.live_view(point_run, now)
