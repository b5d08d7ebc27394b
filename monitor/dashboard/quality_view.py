"""Signal quality on the page: per-stream counts and the flagged samples on the live trace.

Pure column builders (:func:`quality_columns`, :func:`mark_columns`, tested without a server)
and :class:`QualityPanel`, which owns the table and the trace markers; the page calls
``QualityPanel(trace_figure)`` once and ``panel.update(snapshot, view)`` each tick.
"""

from __future__ import annotations

import math

from bokeh.models import ColumnDataSource, DataTable, StringFormatter, TableColumn

from eddyvigil.monitor.state import RunSnapshot, StreamView

__all__ = ["QualityPanel", "mark_columns", "quality_columns", "KIND_NAMES"]

#: Flag kinds of stats.quality marks.
KIND_NAMES = {1: "spike", 2: "dropout"}
_KIND_COLOURS = {1: "#d62728", 2: "#9467bd"}
_WARN = "#b25d00"
_OK = "#2b2b2b"


def _fmt(x: float | None, digits: int = 3) -> str:
    if x is None or not math.isfinite(x):
        return "–"
    return f"{x:.{digits}g}"


def quality_columns(snapshot: RunSnapshot | None) -> dict[str, list]:
    """One row per component of every stream's current point: the DESIGN §9 counts."""
    keys = ("stream", "component", "spikes", "dropouts", "clipped", "step", "sigma_step",
            "policy", "colour")
    cols: dict[str, list] = {k: [] for k in keys}
    if snapshot is None:
        return cols
    for name, view in snapshot.streams.items():
        q = view.quality
        if not q:
            continue
        suspect = view.stats.suspect if view.stats is not None else {}
        for c, counts in q.items():
            if not isinstance(counts, dict) or "spikes" not in counts:
                continue
            cols["stream"].append(name)
            cols["component"].append(c)
            spikes = counts["spikes"]  # null: not checked (random sampling, stats.quality)
            cols["spikes"].append("not checked" if spikes is None else str(spikes))
            cols["dropouts"].append(str(counts["dropout_samples"]))
            cols["clipped"].append(str(counts["clipped_samples"]))
            cols["step"].append(_fmt(counts["quantisation_step"]))
            cols["sigma_step"].append(_fmt(counts["sigma_over_step"]))
            replaced = counts.get("replaced", 0)
            cols["policy"].append(f"{q['policy']} ({replaced} replaced)" if replaced
                                  else q["policy"])
            bad = "signal quality" in str(suspect.get(c, ""))
            cols["colour"].append(_WARN if bad else _OK)
    return cols


def mark_columns(view: StreamView | None) -> dict[str, list]:
    """The flagged samples to draw on the trace: t, raw value, kind name and colour."""
    cols: dict[str, list] = {"t": [], "value": [], "kind": [], "component": [], "colour": []}
    marks = (view.quality or {}).get("marks") if view is not None else None
    if not marks:
        return cols
    trace_t = view.trace.get("t")
    shown_from = float(trace_t[0]) if trace_t is not None and len(trace_t) else -math.inf
    for t, c, k, v in zip(marks["t"], marks["component"], marks["kind"], marks["value"],
                          strict=True):
        if t < shown_from:  # older than the trace on screen
            continue
        cols["t"].append(float(t))
        cols["value"].append(float(v))
        cols["kind"].append(KIND_NAMES.get(k, "flag"))
        cols["component"].append(c)
        cols["colour"].append(_KIND_COLOURS.get(k, "black"))
    return cols


class QualityPanel:
    """The quality table and the flagged-sample markers on ``trace`` (a Bokeh figure)."""

    def __init__(self, trace):
        self.source = ColumnDataSource(quality_columns(None), name="quality_source")
        coloured = StringFormatter(text_color="colour", font_style="bold")
        self.table = DataTable(
            name="quality", source=self.source, height=140, width=640, index_position=None,
            columns=[TableColumn(field="stream", title="stream", width=80),
                     TableColumn(field="component", title="comp.", width=45),
                     TableColumn(field="spikes", title="spikes", formatter=coloured, width=60),
                     TableColumn(field="dropouts", title="dropout samples", width=95),
                     TableColumn(field="clipped", title="clipped", width=60),
                     TableColumn(field="step", title="ADC step", width=70),
                     TableColumn(field="sigma_step", title="σ / step", width=60),
                     TableColumn(field="policy", title="policy", width=130)])
        self.marks = ColumnDataSource(mark_columns(None), name="quality_marks")
        trace.scatter("t", "value", source=self.marks, color="colour", marker="x", size=9,
                      line_width=2, legend_label="flagged")

    def update(self, snapshot: RunSnapshot | None, view: StreamView | None) -> None:
        cols = quality_columns(snapshot)
        if cols != dict(self.source.data):
            self.source.data = cols
        marks = mark_columns(view)
        if marks != dict(self.marks.data):
            self.marks.data = marks
