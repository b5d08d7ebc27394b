"""What the monitor keeps only to show: a stream's trace, a point's history rows, quality marks.

None of this enters a statistic or a summary line; it feeds the published
:class:`~eddyvigil.monitor.state.StreamView` (dashboard, terminal status).

- :class:`Trace`: a thinned copy of a stream's latest samples (at most :data:`TRACE_ROWS`
  rows; each message gives every stride-th row, at most :data:`TRACE_ROWS_PER_MESSAGE`).
- :class:`History`: one row per statistics snapshot of a point: the targeted statistics'
  values, half-widths and targets against the record's duration (at most
  :data:`HISTORY_ROWS`; when full, every other row is dropped).
- :func:`quality_view`: a point's quality object with its recent flagged samples as marks;
  :func:`quality_note`: the non-zero quality counts in words, for the status line.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

__all__ = [
    "HISTORY_ROWS",
    "TRACE_ROWS",
    "TRACE_ROWS_PER_MESSAGE",
    "History",
    "Trace",
    "quality_note",
    "quality_view",
]

#: Rows kept in a stream's decimated trace.
TRACE_ROWS = 2000
#: Rows taken at most from one samples message into the trace.
TRACE_ROWS_PER_MESSAGE = 256
#: Entries kept in a point's history; when full, every other entry is dropped.
HISTORY_ROWS = 2000


class Trace:
    """A thinned copy of a stream's latest samples (at most TRACE_ROWS rows) for display.

    The buffer holds twice TRACE_ROWS rows and is compacted only when full, so a message
    costs a strided copy of at most TRACE_ROWS_PER_MESSAGE rows.
    """

    def __init__(self) -> None:
        self.buffer = np.zeros((TRACE_ROWS, 0))
        self.columns: tuple[str, ...] = ()
        self.fill = 0

    def add(self, velocity, columns, rate_hz, times, t0) -> None:
        """Keep every stride-th row of one block; times from ``times`` or ``t0 + i / rate_hz``."""
        n, m = velocity.shape
        if self.columns != columns:
            self.buffer = np.zeros((2 * TRACE_ROWS, m + 1))
            self.columns, self.fill = columns, 0
        stride = max(1, -(-n // TRACE_ROWS_PER_MESSAGE))
        thinned = velocity[::stride]
        k = thinned.shape[0]
        if self.fill + k > self.buffer.shape[0]:
            keep = TRACE_ROWS - k
            self.buffer[:keep] = self.buffer[self.fill - keep : self.fill]
            self.fill = keep
        rows = self.buffer[self.fill : self.fill + k]
        if times is not None:
            rows[:, 0] = times[::stride]
        else:
            rows[:, 0] = np.arange(0, n, stride)
            rows[:, 0] /= rate_hz
            rows[:, 0] += t0
        rows[:, 1:] = thinned
        self.fill += k

    def window(self) -> dict[str, np.ndarray]:
        """The latest rows as ``{"t": ..., column: ...}``: a copy (the buffer is overwritten by
        the next messages, a published snapshot is not)."""
        out = {}
        if self.fill:
            rows = self.buffer[max(0, self.fill - TRACE_ROWS) : self.fill].copy()
            out["t"] = rows[:, 0]
            for j, c in enumerate(self.columns):
                out[c] = rows[:, j + 1]
        return out


class History:
    """The running estimates of one point's targeted statistics, one row per snapshot.

    At ``limit`` rows (default :data:`HISTORY_ROWS`) every other row is dropped.
    """

    def __init__(self, limit: int | None = None) -> None:
        self.limit = HISTORY_ROWS if limit is None else int(limit)
        self.rows: dict[str, list[float]] = {"duration_s": []}

    def add(self, snap) -> None:
        """One row of the targeted statistics' values, half-widths and targets."""
        h = self.rows
        h["duration_s"].append(float(snap.duration_s))
        for e in snap.targeted():
            h.setdefault(e.name, []).append(float(e.value))
            h.setdefault(e.name + "_hw", []).append(float(e.half_width))
            h.setdefault(e.name + "_target", []).append(float(e.target))
        if len(h["duration_s"]) >= self.limit:
            for key in h:
                h[key] = h[key][::2]

    def arrays(self) -> dict[str, np.ndarray]:
        return {k: np.asarray(v) for k, v in self.rows.items()}


def quality_view(point_run) -> dict | None:
    """The point's quality object for readers, with the recent flagged samples as ``marks``
    (``t`` s, ``component``, ``kind`` 1 spike / 2 dropout, raw ``value``; uniform sampling only).

    ``point_run``: a :class:`~eddyvigil.monitor.point_run.PointRun` or None.
    """
    if point_run is None or point_run.quality is None:
        return None
    out = point_run.quality.summary()
    t0, rate_hz = point_run.t0, point_run.rate_hz
    marks = point_run.quality.marks if t0 is not None and rate_hz else []
    out["marks"] = {
        "t": [t0 + r / rate_hz for r, _, _, _ in marks],
        "component": [point_run.columns[c] for _, c, _, _ in marks],
        "kind": [k for _, _, k, _ in marks],
        "value": [v for _, _, _, v in marks],
    }
    return out


def quality_note(quality: Mapping | None) -> str:
    """Non-zero quality counts for the status line, e.g. `` quality u: 3 spikes, 200 dropout``.

    >>> quality_note({"u": {"spikes": 3, "dropout_samples": 200, "clipped_samples": 0}})
    ' quality u: 3 spikes, 200 dropout'
    """
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
