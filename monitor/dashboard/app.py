"""One browser tab of the dashboard: figures, data sources and ONE periodic callback.

Runs once per session; it only *reads* ``get_snapshot()`` (never starts acquisition) and turns
the snapshot into columns with the pure functions of :mod:`eddyvigil.monitor.dashboard.views`. Models
that tests look at carry a ``name=`` (``verdict``, ``status_source``, ``trace_source``, ...).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from bokeh.core.properties import value
from bokeh.document import Document
from bokeh.layouts import column, row
from bokeh.models import (
    Band,
    BasicTickFormatter,
    Checkbox,
    ColumnDataSource,
    CustomJS,
    DataTable,
    Div,
    LogTicker,
    Select,
    Span,
    StringFormatter,
    TableColumn,
    Whisker,
)
from bokeh.plotting import figure

from eddyvigil.monitor.dashboard import views
from eddyvigil.monitor.dashboard.quality_view import QualityPanel
from eddyvigil.monitor.dashboard.spectrum import SpectrumPanel
from eddyvigil.monitor.dashboard.budget_panel import BudgetPanel
from eddyvigil.monitor.dashboard.field_panel import FieldPanel
from eddyvigil.monitor.state import RunSnapshot

__all__ = ["build_document", "TICK_MS", "TRACE_ROLLOVER", "HISTORY_ROLLOVER"]

#: The page's one periodic callback (ms): about four updates a second.
TICK_MS = 250
#: Rows a page keeps of the live trace / of the running estimates.
TRACE_ROLLOVER = 2000
HISTORY_ROLLOVER = 4000
#: Points drawn at most per half-width line (log-spaced picks of the history).
HALFWIDTH_POINTS = 300
#: Half-width lines drawn unless "show all" is ticked: the statistics furthest from target.
HALFWIDTH_SLOWEST = 4

_PLOT = dict(height=300, sizing_mode="stretch_width", toolbar_location="right",
             tools="pan,wheel_zoom,box_zoom,reset,save")
_PROFILE_NAMES = ("uu", "vv", "ww", "uv", "k")
#: Every column of the profile sources: the moments' and eps (from the spectra).
_PROFILE_COLUMNS = views.MEAN_NAMES + views.STRESS_NAMES + ("eps",)


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
        self.campaign = Div(name="campaign", text="", sizing_mode="stretch_width")
        self.health = Div(name="health", text="", width=620)
        self.flow = Div(name="flow", text="", width=620)

        self.status_source = ColumnDataSource(
            views.status_columns(RunSnapshot(0, 0.0)), name="status_source")
        coloured = StringFormatter(text_color="colour", font_style="bold")
        self.status = DataTable(
            name="status", source=self.status_source, height=370, width=740, index_position=None,
            columns=[TableColumn(field="stream", title="stream", width=65),
                     TableColumn(field="point", title="point", width=90),
                     TableColumn(field="name", title="statistic", width=72),
                     TableColumn(field="value", title="value ± half-width", width=165),
                     TableColumn(field="unresolved", title="unresolved σ", width=90),
                     TableColumn(field="target", title="target", width=62),
                     TableColumn(field="state", title="state", formatter=coloured, width=118),
                     TableColumn(field="eta", title="ETA", width=72)])

        _redraw_on_new_data(self.status_source, self.status)

        self.trace_source = ColumnDataSource(views.trace_columns(None), name="trace_source")
        self.trace = figure(name="trace", title="live trace (decimated; breaks where blocks "
                                                "were rejected or lost)",
                            x_axis_label="time since the stream started (s)",
                            y_axis_label="velocity (m/s)", **_PLOT)
        for c in ("u", "v", "w"):
            self.trace.line("t", c, source=self.trace_source, color=views.statistic_colour(
                c.upper()), legend_label=c, line_width=1.2)
        self.quality = QualityPanel(self.trace)  # counts table + flagged samples on the trace
        _legend_outside(self.trace)

        self.history_source = ColumnDataSource(views.history_columns(None), name="history_source")
        self.running_mean = figure(name="running_mean", title="running mean U with confidence band",
                                   x_axis_label="acquisition time (s)",
                                   y_axis_label="U (m/s)", **_PLOT)
        self._band_and_line(self.running_mean, "U")
        _legend_outside(self.running_mean)
        self.running_stresses = figure(name="running_stresses",
                                       title="running Reynolds stresses and k, with bands",
                                       x_axis_label="acquisition time (s)",
                                       y_axis_label="stress (m²/s²)", **_PLOT)
        for n in views.STRESS_NAMES:
            self._band_and_line(self.running_stresses, n)
        _legend_outside(self.running_stresses)

        self.halfwidth_source = ColumnDataSource(
            {"xs": [], "ys": [], "name": [], "colour": [], "dash": []}, name="halfwidth_source")
        self.guide_source = ColumnDataSource(views.guide_columns(None), name="guide_source")
        self.halfwidth = figure(name="halfwidth",
                                title="half-width / target (1 = target met; thin: 1/√T outlook)",
                                x_axis_type="log", y_axis_type="log",
                                x_axis_label="acquisition time (s)",
                                y_axis_label="half-width / target", **_PLOT)
        self.halfwidth.multi_line("xs", "ys", source=self.halfwidth_source, line_color="colour",
                                  line_dash="dash", line_width=2.5, legend_field="name")
        self.halfwidth.multi_line("xs", "ys", source=self.guide_source, line_color="colour",
                                  line_dash="dotted", line_width=1.2)
        self.halfwidth.add_layout(Span(location=1.0, dimension="width", line_color="black",
                                       line_width=2, line_dash="dotdash"))
        for axis in (self.halfwidth.xaxis, self.halfwidth.yaxis):
            axis.ticker = LogTicker(desired_num_ticks=4, mantissas=[1, 3])
        _legend_outside(self.halfwidth)
        self.show_all = Checkbox(name="show_all", label=f"all targeted statistics (unticked: the "
                                 f"{HALFWIDTH_SLOWEST} furthest from target)", active=False)
        self.show_all.on_change("active", self._on_select)

        self.profile_source = ColumnDataSource(
            views.profile_columns(None, "y", _PROFILE_COLUMNS), name="profile_source")
        self.current_source = ColumnDataSource(
            views.current_profile_columns(None, "y", _PROFILE_COLUMNS), name="current_source")
        self.profile_mean = figure(name="profile_mean",
                                   title="traverse: U (95 % CI; diamond = the current point)",
                                   x_axis_label="y (m)", y_axis_label="U (m/s)", **_PLOT)
        self._profile(self.profile_mean, "U")
        _legend_outside(self.profile_mean)
        self.profile_stresses = figure(name="profile_stresses",
                                       title="traverse: stresses and k (95 % CI)",
                                       x_axis_label="y (m)", y_axis_label="stress (m²/s²)",
                                       **_PLOT)
        for n in _PROFILE_NAMES:
            self._profile(self.profile_stresses, n)
        _legend_outside(self.profile_stresses)
        self.profile_eps = figure(name="profile_eps",
                                  title="traverse: dissipation rate ε (95 % CI; from the u "
                                        "spectrum by Taylor's hypothesis)",
                                  x_axis_label="y (m)", y_axis_label="ε (m²/s³)", **_PLOT)
        self._profile(self.profile_eps, "eps")
        _legend_outside(self.profile_eps)
        for fig in (self.trace, self.running_mean, self.running_stresses, self.profile_mean,
                    self.profile_stresses, self.profile_eps):
            fig.yaxis.formatter = BasicTickFormatter(use_scientific=False)
            fig.xaxis.formatter = BasicTickFormatter(use_scientific=False)

        self.finished_source = ColumnDataSource(views.finished_columns(None),
                                                name="finished_source")
        self.finished = DataTable(
            name="finished", source=self.finished_source, height=200,
            sizing_mode="stretch_width", index_position=None,
            columns=[TableColumn(field=k, title=t) for k, t in (
                ("id", "point"), ("x", "x (m)"), ("y", "y (m)"), ("z", "z (m)"),
                ("samples", "samples"), ("duration", "duration"), ("converged", "converged"),
                ("lost", "lost msgs"), ("U", "U ± hw"), ("k", "k ± hw"))])
        _redraw_on_new_data(self.finished_source, self.finished)

        self.spectrum = SpectrumPanel()
        self.note = Div(name="style_note", text=f'<div style="font-size:12px;color:#444">'
                                                f"{views.STYLE_NOTE}</div>")
        self.budget = BudgetPanel(**_PLOT)  # k budget across the traverse (issue 15)
        self.field = FieldPanel(**_PLOT)  # rakes and PIV fields (issue 17)
        self.field.select.on_change("value", self._on_select)
        doc.title = title
        doc.add_root(column(
            row(self.header, self.select),
            self.verdict,
            self.campaign,
            self.field.layout,
            row(self.status, column(self.health, self.flow)),
            self.quality.table,
            row(self.note, self.show_all),
            row(self.trace, self.halfwidth, sizing_mode="stretch_width"),
            row(self.running_mean, self.running_stresses, sizing_mode="stretch_width"),
            row(self.profile_mean, self.profile_stresses, sizing_mode="stretch_width"),
            row(self.profile_eps, sizing_mode="stretch_width"),
            self.spectrum.layout,
            self.budget.figure,
            self.finished,
            name="root", sizing_mode="stretch_width"))

    def _band_and_line(self, fig, name: str) -> None:
        colour = views.statistic_colour(name)
        fig.add_layout(Band(base="duration_s", lower=f"{name}_lo", upper=f"{name}_hi",
                            source=self.history_source, fill_color=colour, fill_alpha=0.2,
                            line_color=None))
        fig.line("duration_s", name, source=self.history_source, color=colour, line_width=2,
                 line_dash=views.statistic_dash(name), legend_label=name)

    def _profile(self, fig, name: str) -> None:
        colour = views.statistic_colour(name)
        fig.add_layout(Whisker(base="coord", lower=f"{name}_lo", upper=f"{name}_hi",
                               source=self.profile_source, line_color=colour))
        fig.line("coord", name, source=self.profile_source, color=colour, line_alpha=0.5,
                 line_dash=views.statistic_dash(name))
        fig.scatter("coord", name, source=self.profile_source, color=colour, size=7,
                    legend_label=name)
        fig.add_layout(Whisker(base="coord", lower=f"{name}_lo", upper=f"{name}_hi",
                               source=self.current_source, line_color="black", line_width=2))
        fig.scatter("coord", name, source=self.current_source, marker="diamond", size=16,
                    fill_color=colour, line_color="black", line_width=2)
        fig.text("coord", name, text=value("now"), source=self.current_source, x_offset=-12,
                 y_offset=-4, text_align="right", text_font_size="11px", text_color=colour)
        fig.x_range.range_padding = 0.12
        fig.y_range.range_padding = 0.12

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
        _set_text(self.campaign, views.campaign_html(snap))
        _set_text(self.health, views.health_html(snap))
        _set_text(self.flow, views.flow_html(snap))
        status = views.status_columns(snap)
        if status != dict(self.status_source.data):
            self.status_source.data = status

        identity = (name, view.session, view.point_index) if view is not None else None
        new_point = identity != self.identity
        self.identity = identity
        self._update_trace(view, reset=new_point and name != self.stream)
        self.quality.update(snap, view)
        self._update_history(view, reset=new_point)
        self.stream = name

        hw = views.halfwidth_columns(view, views.targeted_names(view))
        keep = views.slowest_first(hw)
        if not self.show_all.active:
            keep = keep[:HALFWIDTH_SLOWEST]
        self.halfwidth_source.data = _lines({k: hw[k] for k in ("duration_s", *keep)})
        self.guide_source.data = views.guide_columns(view)

        axis = views.profile_axis(view)
        if axis != self.axis:
            self.axis = axis
            for fig in (self.profile_mean, self.profile_stresses, self.profile_eps):
                fig.xaxis.axis_label = f"{axis} (m)"
        profile = views.profile_columns(view, axis, _PROFILE_COLUMNS)
        if len(profile["coord"]) != len(self.profile_source.data["coord"]) or new_point:
            self.profile_source.data = profile
            self.finished_source.data = views.finished_columns(view)
        self.current_source.data = views.current_profile_columns(view, axis, _PROFILE_COLUMNS)
        self.spectrum.update(view)
        self.budget.update(view, axis)
        self.field.update(view)

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


def _redraw_on_new_data(source: ColumnDataSource, table: DataTable) -> None:
    """Make ``table`` redraw whenever ``source.data`` is replaced.

    BokehJS (3.x) redraws a DataTable's cells only when the table's CDSView announces new
    row indices; replacing the data with the same number of rows leaves the indices equal, so
    no change is announced and the browser keeps the old cells (the frozen status board: the
    rows of the moment the point or the page started). Announcing a change of the table model
    itself makes its view re-render from the current data.
    """
    source.js_on_change("data", CustomJS(args={"table": table}, code="table.change.emit()"))


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
    out = {"xs": [], "ys": [], "name": [], "colour": [], "dash": []}
    for n, r in hw.items():
        if n == "duration_s":
            continue
        out["xs"].append(d[idx])
        out["ys"].append(r[idx])
        out["name"].append(n)
        out["colour"].append(views.statistic_colour(n))
        out["dash"].append(views.statistic_dash(n))
    return out


def _legend_outside(fig) -> None:
    """The legend beside the plot, never over the data or an axis; click hides a line."""
    legend = fig.legend[0]
    legend.click_policy = "hide"
    legend.label_text_font_size = "11px"
    legend.spacing = 0
    legend.padding = 4
    fig.add_layout(legend, "right")


def build_document(doc: Document, *, get_snapshot: Callable[[], RunSnapshot],
                   title: str = "eddyvigil") -> None:
    """Fill ``doc`` with the dashboard and register its one periodic update."""
    page = _Page(doc, get_snapshot, title)
    page.update(force=True)
    doc.add_periodic_callback(page.update, TICK_MS)
