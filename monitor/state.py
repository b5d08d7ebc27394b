"""What the pipeline publishes for its readers: one immutable run snapshot.

The pipeline builds a new :class:`RunSnapshot` a few times per second and rebinds
``pipeline.snapshot`` to it; the dashboard, the status line and tests only ever read it, so
they never see a half-updated object and need no lock.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType

import numpy as np

from eddyvigil.stats.snapshot import PointSnapshot

__all__ = ["StreamView", "RunSnapshot"]


def _frozen_arrays(d: Mapping[str, np.ndarray]) -> Mapping[str, np.ndarray]:
    out = {}
    for k, v in d.items():
        a = np.array(v, copy=True)
        a.setflags(write=False)
        out[k] = a
    return MappingProxyType(out)


@dataclass(frozen=True)
class StreamView:
    """One stream (one probe) as of one snapshot.

    ``trace``: decimated recent samples, key ``"t"`` (s since session start) plus one key per
    velocity column, at most a few thousand rows. ``history``: the current point's running
    estimates, key ``"duration_s"`` plus, for every targeted statistic NAME, ``NAME`` (value)
    and ``NAME_hw`` (half-width), and ``NAME_target`` (resolved target half-width).
    ``finished``: DESIGN §4 point summaries of this stream's finished points, oldest first.
    ``rate_hz``: the nominal sampling rate the publisher states (None: random sampling or no
    samples yet); ``received_rate_hz``: samples accepted per second of wall clock over the
    last ``monitor.rate.WINDOW_S`` seconds (None while unknown; see :mod:`monitor.rate`).
    """

    stream: str
    session: str | None
    point: Mapping | None
    point_index: int
    stats: PointSnapshot | None
    rate_hz: float | None
    received_rate_hz: float | None
    messages: int
    lost_messages: int
    gaps: int
    restarts: int
    rejected: Mapping[str, int]
    trace: Mapping[str, np.ndarray] = field(default_factory=dict)
    history: Mapping[str, np.ndarray] = field(default_factory=dict)
    finished: tuple[Mapping, ...] = ()
    ended: bool = False
    converged_wall_age_s: float | None = None
    #: (SpectrumSnapshot | None, Dissipation | None) of the current point (stats.point_spectra)
    spectrum: tuple | None = None
    quality: Mapping | None = None  # the point's "quality" object (DESIGN §9) + recent "marks"
    #: the point's DESIGN §10 fields (``weighting``, ``random_sampling``); random sampling only
    random_sampling: Mapping | None = None
    #: the current point's targets from a [budget] table (the point line's "derived_targets")
    derived_targets: Mapping | None = None
    #: the traverse's campaign ETA (monitor.campaign: the summary's ``campaign`` object), or None
    campaign: Mapping | None = None
    #: (meta, PointSnapshot | None) of the stream's last finished point (shown after ``end``)
    last_point: tuple | None = None
    #: a rake or field point (monitor.fields.live_view): "snapshot" (stats.field.FieldSnapshot),
    #: "grid" or "probes" (the layout announced), "final"; None for one probe
    field: Mapping | None = None

    def __post_init__(self):
        object.__setattr__(self, "rejected", MappingProxyType(dict(self.rejected)))
        object.__setattr__(self, "trace", _frozen_arrays(self.trace))
        object.__setattr__(self, "history", _frozen_arrays(self.history))
        if self.point is not None:
            object.__setattr__(self, "point", MappingProxyType(dict(self.point)))


@dataclass(frozen=True)
class RunSnapshot:
    """Everything the monitor knows at one moment (``sequence`` grows by one per publication)."""

    sequence: int
    created_at: float
    streams: Mapping[str, StreamView] = field(default_factory=dict)
    rejected_total: Mapping[str, int] = field(default_factory=dict)
    transport_events: tuple[str, ...] = ()

    def __post_init__(self):
        object.__setattr__(self, "streams", MappingProxyType(dict(self.streams)))
        object.__setattr__(self, "rejected_total", MappingProxyType(dict(self.rejected_total)))


EMPTY = RunSnapshot(sequence=0, created_at=0.0)
