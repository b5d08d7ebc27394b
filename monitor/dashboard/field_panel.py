"""The dashboard's panel for a rake or a PIV field (the stream's ``field`` view, monitor.fields).

A rake: one badge per probe (its verdict: every target met, still acquiring, no valid samples)
and the profile of the chosen statistic across the probes with its intervals. A field: two
colour maps, the chosen statistic and its half-width / target (the worst over the targeted
statistics when the chosen one has no target), on perceptually uniform, colour-blind-safe
palettes (Viridis for values, Cividis for the ratio, fixed from 0 to 2 so that 1, the target,
is always the middle colour); vectors without valid samples are left blank. Above both, the
converged fraction in words (the field verdict, stats.field.FieldSnapshot.verdict).

:func:`rake_columns`, :func:`grid_image` and :func:`summary_text` are pure and tested without
a server; :class:`FieldPanel` holds the models and is updated once per tick.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["FieldPanel", "rake_columns", "grid_image", "summary_text", "RATIO_RANGE",
           "BADGE_COLOURS"]

#: Range of the half-width / target map (1 = target met, in the middle of the palette).
RATIO_RANGE = (0.0, 2.0)
#: Badge colours by probe state (Okabe & Ito 2008 colour-blind-safe set).
BADGE_COLOURS = {"met": "#009E73", "acquiring": "#E69F00", "no data": "#999999"}


def _snapshot(view):
    return None if view is None else view.get("snapshot")


def ratio(snap, name: str) -> np.ndarray:
    """Half-width / target per vector for ``name`` (NaN where unknown); for an untargeted
    ``name``, the worst over the targeted statistics (what decides the vector's verdict)."""
    names = [name] if name in snap.targeted else list(snap.targeted)
    if not names:
        return np.full(snap.probes, np.nan)
    out = []
    with np.errstate(invalid="ignore", divide="ignore"):
        for n in names:
            hw = 0.5 * (snap.ci_high[n] - snap.ci_low[n])
            out.append(np.where(snap.target[n] > 0, hw / snap.target[n], np.nan))
    stacked = np.stack(out)
    worst = np.full(snap.probes, np.nan)
    known = np.isfinite(stacked).any(axis=0)
    worst[known] = np.nanmax(stacked[:, known], axis=0)
    return worst


def rake_columns(view, name: str) -> dict:
    """Columns of a rake's badges and profile: ``probe`` (id), ``index``, ``coord`` (the
    probes' y, or their index without positions), ``value``, ``lo``, ``hi``, ``ratio``,
    ``state`` and ``colour`` (BADGE_COLOURS); empty without a rake."""
    keys = ("probe", "index", "coord", "value", "lo", "hi", "ratio", "state", "colour", "label")
    snap = _snapshot(view)
    if snap is None or view.get("probes") is None or name not in snap.values:
        return {k: [] for k in keys}
    probes = list(view["probes"])
    P = snap.probes
    ids = [str(p.get("id", i)) for i, p in enumerate(probes)][:P]
    ys = [p.get("y") for p in probes]
    coord = ([float(y) for y in ys] if all(isinstance(y, int | float) for y in ys)
             else [float(i) for i in range(P)])
    state = np.where(snap.counts == 0, "no data",
                     np.where(snap.probe_converged, "met", "acquiring"))
    r = ratio(snap, name)
    return {
        "probe": ids,
        "index": list(range(P)),
        "coord": coord,
        "value": snap.values[name].tolist(),
        "lo": snap.ci_low[name].tolist(),
        "hi": snap.ci_high[name].tolist(),
        "ratio": r.tolist(),
        "state": state.tolist(),
        "colour": [BADGE_COLOURS[s] for s in state],
        "label": [f"{i}\n{'—' if not math.isfinite(x) else f'{x:.2f}'}"
                  for i, x in zip(ids, r.tolist(), strict=True)],
    }


def grid_image(view, name: str, what: str = "value") -> dict:
    """One image of a field: ``image`` [(ny, nx) array], ``x``, ``y``, ``dw``, ``dh`` (the
    cells centred on the grid points), of the statistic ``name`` (``what="value"``) or of its
    half-width / target (``"ratio"``); NaN (blank) where a vector has no valid samples."""
    empty = {"image": [], "x": [], "y": [], "dw": [], "dh": []}
    snap = _snapshot(view)
    grid = None if view is None else view.get("grid")
    if snap is None or grid is None or name not in snap.values:
        return empty
    nx, ny = int(grid["nx"]), int(grid["ny"])
    if nx * ny != snap.probes:
        return empty
    data = snap.values[name] if what == "value" else ratio(snap, name)
    data = np.where(snap.counts > 0, data, np.nan).astype(float).reshape(ny, nx)  # row-major
    dx, dy = float(grid["dx"]), float(grid["dy"])
    return {"image": [data], "x": [float(grid["x0"]) - dx / 2], "y": [float(grid["y0"]) - dy / 2],
            "dw": [nx * dx], "dh": [ny * dy]}


def summary_text(view) -> str:
    """The converged fraction in words (HTML), or "" for a stream that is not a rake/field."""
    snap = _snapshot(view)
    if snap is None:
        return ""
    v = snap.verdict()
    kind = "rake" if view.get("probes") is not None else "field"
    more = ""
    if v.kind != "move-on" and v.eta_s is not None:
        more = f"; the slowest decile needs about {v.eta_s:.0f} s more"
    done = " (point finished)" if view.get("final") else ""
    colour = BADGE_COLOURS["met"] if v.move_on else BADGE_COLOURS["acquiring"]
    return (f'<div style="font-size:15px"><b style="color:{colour}">{v.headline}</b> '
            f"{kind} of {snap.probes} vectors: {v.reason}{more}{done}; converged fraction "
            f"<b>{snap.converged_fraction:.3f}</b></div>")


class FieldPanel:
    """Badges and profile of a rake, colour maps of a field; ``update(view)`` per tick."""

    def __init__(self, **plot):
        from bokeh.layouts import column, row
        from bokeh.models import (
            ColorBar,
            ColumnDataSource,
            Div,
            HoverTool,
            LinearColorMapper,
            Select,
            Whisker,
        )
        from bokeh.palettes import Cividis256, Viridis256
        from bokeh.plotting import figure

        self.summary = Div(name="field_summary", text="", sizing_mode="stretch_width")
        self.select = Select(name="field_statistic", title="statistic shown", value="U",
                             options=["U"], width=160)
        self.rake_source = ColumnDataSource(rake_columns(None, "U"), name="rake_source")
        self.badges = figure(name="rake_badges", title="probes (verdict; half-width/target)",
                             height=130, sizing_mode="stretch_width", toolbar_location=None,
                             tools="", y_range=(-0.5, 0.5))
        self.badges.rect("index", 0.0, 0.9, 0.9, source=self.rake_source, fill_color="colour",
                         line_color="white")
        self.badges.text("index", 0.0, text="label", source=self.rake_source,
                         text_align="center", text_baseline="middle", text_font_size="10px")
        self.badges.axis.visible = False
        self.badges.grid.visible = False
        self.profile = figure(name="rake_profile", title="profile across the rake (95 % CI)",
                              x_axis_label="y (m)", **plot)
        self.profile.add_layout(Whisker(base="coord", lower="lo", upper="hi",
                                        source=self.rake_source))
        self.profile.scatter("coord", "value", source=self.rake_source, size=8,
                             fill_color="colour", line_color="black")
        self.profile.add_tools(HoverTool(tooltips=[("probe", "@probe"), ("value", "@value"),
                                                   ("hw/target", "@ratio"), ("state", "@state")]))
        self.value_source = ColumnDataSource(grid_image(None, "U"), name="field_value_source")
        self.ratio_source = ColumnDataSource(grid_image(None, "U"), name="field_ratio_source")
        self.value_mapper = LinearColorMapper(palette=Viridis256, nan_color=(0, 0, 0, 0))
        self.ratio_mapper = LinearColorMapper(palette=Cividis256, low=RATIO_RANGE[0],
                                              high=RATIO_RANGE[1], nan_color=(0, 0, 0, 0))
        maps = []
        for fig_name, source, mapper, title in (
                ("field_value", self.value_source, self.value_mapper, "U"),
                ("field_ratio", self.ratio_source, self.ratio_mapper,
                 "half-width / target (1 = met)")):
            fig = figure(name=fig_name, title=title, x_axis_label="x (m)",
                         y_axis_label="y (m)", match_aspect=True, **plot)
            fig.image(image="image", x="x", y="y", dw="dw", dh="dh", source=source,
                      color_mapper=mapper)
            fig.add_layout(ColorBar(color_mapper=mapper, width=10), "right")
            maps.append(fig)
        self.value_map, self.ratio_map = maps
        self.rake_row = column(self.badges, self.profile, sizing_mode="stretch_width",
                               visible=False)
        self.map_row = row(self.value_map, self.ratio_map, sizing_mode="stretch_width",
                           visible=False)
        self.layout = column(row(self.summary, self.select), self.rake_row, self.map_row,
                             name="field_panel", sizing_mode="stretch_width", visible=False)
        self._shown: tuple | None = None

    def update(self, view) -> None:
        """Redraw when the stream's field view changed (a new snapshot or statistic)."""
        field = None if view is None else view.field
        snap = _snapshot(field)
        self.layout.visible = snap is not None
        if snap is None:
            return
        options = list(snap.names)
        if self.select.options != options:
            self.select.options = options
        if self.select.value not in options:
            self.select.value = options[0]
        name = self.select.value
        key = (id(snap), name)
        if key == self._shown:
            return
        self._shown = key
        if self.summary.text != (text := summary_text(field)):
            self.summary.text = text
        is_rake = field.get("probes") is not None
        self.rake_row.visible = is_rake
        self.map_row.visible = not is_rake
        if is_rake:
            self.profile.yaxis.axis_label = name
            self.rake_source.data = rake_columns(field, name)
            return
        self.value_map.title.text = f"{name} per vector"
        self.ratio_map.title.text = (f"half-width / target of {name} (1 = met)"
                                     if name in snap.targeted
                                     else "half-width / target, worst targeted statistic")
        img = grid_image(field, name, "value")
        if img["image"]:
            finite = img["image"][0][np.isfinite(img["image"][0])]
            if finite.size:
                self.value_mapper.low, self.value_mapper.high = (float(finite.min()),
                                                                 float(finite.max()))
        self.value_source.data = img
        self.ratio_source.data = grid_image(field, name, "ratio")
