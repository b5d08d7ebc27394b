"""One browser tab of the dashboard: figures, data sources and ONE periodic callback.

Runs once per session; it only *reads* ``get_snapshot()`` (never starts acquisition) and turns
the snapshot into columns with the pure functions of :mod:`eddyvigil.monitor.dashboard.views`. Models
that tests look at carry a ``name=`` (``verdict``, ``status_source``, ``trace_source``, ...).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from bokeh.document import Document
from bokeh.layouts import column, row
from bokeh.models import (
    Band,
    ColumnDataSource,
    DataTable,
    Div,
    Select,
    Span,
    StringFormatter,
    TableColumn,
    Whisker,
)
from bokeh.plotting import figure

from eddyvigil.monitor.dashboard import views
from eddyvigil.monitor.dashboard.budget_panel import BudgetPanel
from eddyvigil.monitor.state import RunSnapshot

__all__ = ["build_document", "TICK_MS", "TRACE_ROLLOVER", "HISTORY_ROLLOVER"]

#: The page's one periodic callback (ms): about four updates a second.
TICK_MS = 250
#: Rows a page keeps of the live trace / of the running estimates.
TRACE_ROLLOVER = 2000
HISTORY_ROLLOVER = 4000
#: Points drawn at most per half-width line (log-spaced picks of the history).
HALFWIDTH_POINTS = 300

_PLOT = dict(height=300, sizing_mode="stretch_width", toolbar_location="right",
             tools="pan,wheel_zoom,box_zoom,reset,save")
_PROFILE_NAMES = ("uu", "vv", "ww", "uv", "k")


def _empty(columns: dict) -> dict:
    return {k: [] for k in columns}


class _Page:
    """The models of one tab and the little it remembers between ticks."""

    def __init__(self, doc: Document, get_snapshot: Callable[[], RunSnapshot], title: str):
        self.get_snapshot = get_snapshot
        self.seen_sequence: int | None = None
        self.stream: str | None = None
        self.identity: tuple | None = None  # (stream, session, point index) shown
        self.last_t: float | None = None
        self.last_d: float | None = None
        self.axis = "y"
        self._updating = False

        self.header = Div(name="header", text=f'<div style="font-size:20px;font-weight:700">'
                                              f"{title}</div>")
        self.select = Select(name="stream_select", title="stream shown in the plots",
                             options=[], value="", width=240)
        self.select.on_change("value", self._on_select)
        self.verdict = Div(name="verdict", text="", sizing_mode="stretch_width")
        self.health = Div(name="health", text="", width=620)

        self.status_source = ColumnDataSource(
            views.status_columns(RunSnapshot(0, 0.0)), name="status_source")
        coloured = StringFormatter(text_color="colour", font_style="bold")
        self.status = DataTable(
            name="status", source=self.status_source, height=220, width=640, index_position=None,
            columns=[TableColumn(field="stream", title="stream", width=80),
                     TableColumn(field="point", title="point", width=60),
                     TableColumn(field="name", title="statistic", width=60),
                     TableColumn(field="value", title="value ± half-width", width=150),
                     TableColumn(field="target", title="target", width=80),
                     TableColumn(field="state", title="state", formatter=coloured, width=90),
                     TableColumn(field="eta", title="ETA", width=80)])

        self.trace_source = ColumnDataSource(views.trace_columns(None), name="trace_source")
        self.trace = figure(name="trace", title="live trace (decimated)", x_axis_label="t (s)",
                            y_axis_label="velocity", **_PLOT)
        for c in ("u", "v", "w"):
            self.trace.line("t", c, source=self.trace_source, color=views.statistic_colour(
                c.upper()), legend_label=c, line_width=1.2)
        self.trace.legend.location = "top_left"

        self.history_source = ColumnDataSource(views.history_columns(None), name="history_source")
        self.running_mean = figure(name="running_mean", title="running mean U with confidence band",
                                   x_axis_label="acquisition time (s)", y_axis_label="U", **_PLOT)
        self._band_and_line(self.running_mean, "U")
        self.running_stresses = figure(name="running_stresses",
                                       title="running Reynolds stresses and k, with bands",
                                       x_axis_label="acquisition time (s)",
                                       y_axis_label="stress", **_PLOT)
        for n in views.STRESS_NAMES:
            self._band_and_line(self.running_stresses, n)
        self.running_stresses.legend.location = "top_right"

        self.halfwidth_source = ColumnDataSource({"xs": [], "ys": [], "name": [], "colour": []},
                                                 name="halfwidth_source")
        self.guide_source = ColumnDataSource(views.guide_columns(None), name="guide_source")
        self.halfwidth = figure(name="halfwidth", title="half-width / target (1 = target met)",
                                x_axis_type="log", y_axis_type="log",
                                x_axis_label="acquisition time (s)",
                                y_axis_label="half-width / target", **_PLOT)
        self.halfwidth.multi_line("xs", "ys", source=self.halfwidth_source, line_color="colour",
                                  line_width=2, legend_field="name")
        self.halfwidth.multi_line("xs", "ys", source=self.guide_source, line_color="colour",
                                  line_dash="dashed", line_width=1.5)
        self.halfwidth.add_layout(Span(location=1.0, dimension="width", line_color="black",
                                       line_width=2, line_dash="dotdash"))
        self.halfwidth.legend.location = "bottom_left"

        self.profile_source = ColumnDataSource(views.profile_columns(None, "y"),
                                               name="profile_source")
        self.current_source = ColumnDataSource(views.current_profile_columns(None, "y"),
                                               name="current_source")
        self.profile_mean = figure(name="profile_mean", title="traverse: U (95 % CI)",
                                   x_axis_label="y (m)", y_axis_label="U", **_PLOT)
        self._profile(self.profile_mean, "U")
        self.profile_stresses = figure(name="profile_stresses",
                                       title="traverse: stresses and k (95 % CI)",
                                       x_axis_label="y (m)", y_axis_label="stress", **_PLOT)
        for n in _PROFILE_NAMES:
            self._profile(self.profile_stresses, n)
        self.profile_stresses.legend.location = "top_right"

        self.finished_source = ColumnDataSource(views.finished_columns(None),
                                                name="finished_source")
        self.finished = DataTable(
            name="finished", source=self.finished_source, height=200,
            sizing_mode="stretch_width", index_position=None,
            columns=[TableColumn(field=k, title=t) for k, t in (
                ("id", "point"), ("x", "x (m)"), ("y", "y (m)"), ("z", "z (m)"),
                ("samples", "samples"), ("duration", "duration"), ("converged", "converged"),
                ("lost", "lost msgs"), ("U", "U ± hw"), ("k", "k ± hw"))])

        self.budget = BudgetPanel(**_PLOT)  # k budget across the traverse (issue 15)
        doc.title = title
        doc.add_root(column(
            row(self.header, self.select),
            self.verdict,
            row(self.status, self.health),
            row(self.trace, self.halfwidth, sizing_mode="stretch_width"),
            row(self.running_mean, self.running_stresses, sizing_mode="stretch_width"),
            row(self.profile_mean, self.profile_stresses, sizing_mode="stretch_width"),
            self.budget.figure,
            self.finished,
            name="root", sizing_mode="stretch_width"))

    def _band_and_line(self, fig, name: str) -> None:
        colour = views.statistic_colour(name)
        fig.add_layout(Band(base="duration_s", lower=f"{name}_lo", upper=f"{name}_hi",
                            source=self.history_source, fill_color=colour, fill_alpha=0.2,
                            line_color=None))
        fig.line("duration_s", name, source=self.history_source, color=colour, line_width=2,
                 legend_label=name)

    def _profile(self, fig, name: str) -> None:
        colour = views.statistic_colour(name)
        fig.add_layout(Whisker(base="coord", lower=f"{name}_lo", upper=f"{name}_hi",
                               source=self.profile_source, line_color=colour))
        fig.line("coord", name, source=self.profile_source, color=colour, line_alpha=0.5)
        fig.scatter("coord", name, source=self.profile_source, color=colour, size=7,
                    legend_label=name)
        fig.add_layout(Whisker(base="coord", lower=f"{name}_lo", upper=f"{name}_hi",
                               source=self.current_source, line_color="black", line_width=2))
        fig.scatter("coord", name, source=self.current_source, marker="diamond", size=16,
                    fill_color=colour, line_color="black", line_width=2)

    def _on_select(self, _attr, _old, _new) -> None:
        if not self._updating:
            self.update(force=True)

    # ------------------------------------------------------------------ tick

    def update(self, force: bool = False) -> None:
        """Read the latest snapshot and bring every model up to date (the one tick)."""
        snap = self.get_snapshot()
        if snap is None or (not force and snap.sequence == self.seen_sequence):
            return
        self.seen_sequence = snap.sequence
        options = list(snap.streams)
        if options != self.select.options:
            self.select.options = options
        wanted = self.select.value or None
        name = views.pick_stream(snap, wanted)
        if name is not None and self.select.value != name:
            self._updating = True
            try:
                self.select.value = name
            finally:
                self._updating = False
        view = snap.streams.get(name) if name is not None else None

        _set_text(self.verdict, views.verdict_html(snap))
        _set_text(self.health, views.health_html(snap))
        status = views.status_columns(snap)
        if status != dict(self.status_source.data):
            self.status_source.data = status

        identity = (name, view.session, view.point_index) if view is not None else None
        new_point = identity != self.identity
        self.identity = identity
        self._update_trace(view, reset=new_point and name != self.stream)
        self._update_history(view, reset=new_point)
        self.stream = name

        hw = views.halfwidth_columns(view, views.targeted_names(view))
        self.halfwidth_source.data = _lines(hw)
        self.guide_source.data = views.guide_columns(view)

        axis = views.profile_axis(view)
        if axis != self.axis:
            self.axis = axis
            for fig in (self.profile_mean, self.profile_stresses):
                fig.xaxis.axis_label = f"{axis} (m)"
        profile = views.profile_columns(view, axis)
        if len(profile["coord"]) != len(self.profile_source.data["coord"]) or new_point:
            self.profile_source.data = profile
            self.finished_source.data = views.finished_columns(view)
        self.current_source.data = views.current_profile_columns(view, axis)
        self.budget.update(view, axis)

    def _update_trace(self, view, reset: bool) -> None:
        cols = views.trace_columns(view)
        rows, restart = views.rows_after(cols, "t", None if reset else self.last_t)
        if restart:
            self.trace_source.data = {k: v[-TRACE_ROLLOVER:] for k, v in rows.items()}
        elif len(rows["t"]):
            self.trace_source.stream(rows, rollover=TRACE_ROLLOVER)
        self.last_t = float(cols["t"][-1]) if len(cols["t"]) else None

    def _update_history(self, view, reset: bool) -> None:
        cols = views.history_columns(view)
        rows, restart = views.rows_after(cols, "duration_s", None if reset else self.last_d)
        if restart:
            self.history_source.data = {k: v[-HISTORY_ROLLOVER:] for k, v in rows.items()}
        elif len(rows["duration_s"]):
            self.history_source.stream(rows, rollover=HISTORY_ROLLOVER)
        d = cols["duration_s"]
        self.last_d = float(d[-1]) if len(d) else None


def _set_text(div: Div, text: str) -> None:
    if div.text != text:
        div.text = text


def _lines(hw: dict) -> dict:
    """Half-width columns as one multi-line row per statistic, thinned on a log scale."""
    d = hw["duration_s"]
    if len(d) > HALFWIDTH_POINTS:
        idx = np.unique(np.geomspace(1, len(d), HALFWIDTH_POINTS).astype(int) - 1)
    else:
        idx = np.arange(len(d))
    out = {"xs": [], "ys": [], "name": [], "colour": []}
    for n, r in hw.items():
        if n == "duration_s":
            continue
        out["xs"].append(d[idx])
        out["ys"].append(r[idx])
        out["name"].append(n)
        out["colour"].append(views.statistic_colour(n))
    return out


def build_document(doc: Document, *, get_snapshot: Callable[[], RunSnapshot],
                   title: str = "eddyvigil") -> None:
    """Fill ``doc`` with the dashboard and register its one periodic update."""
    page = _Page(doc, get_snapshot, title)
    page.update(force=True)
    doc.add_periodic_callback(page.update, TICK_MS)
