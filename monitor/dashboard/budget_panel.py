"""The dashboard's k-budget panel: the terms across the stream's traverse with their
intervals, filled in as points finish (the same computation as the summary's ``budget``
line, :func:`eddyvigil.monitor.budget_cmd.budget_line`). :func:`budget_columns` is pure and
tested without a server; :class:`BudgetPanel` holds the figure and its one source.
"""

from __future__ import annotations

import math

__all__ = ["BUDGET_TERMS", "BudgetPanel", "budget_columns", "derived_text"]

TITLE = "k budget across the traverse (95 % intervals)"

#: terms drawn, with their colours
BUDGET_TERMS = {"production": "#1f5f8b", "turbulent_transport": "#c0392b",
                "dissipation": "#2e8b57", "advection": "#d68910", "residual": "#5d6d7e"}


def _nan(v):
    return float(v) if isinstance(v, int | float) and math.isfinite(v) else math.nan


def budget_columns(view, axis: str = "y", confidence: float = 0.95) -> dict:
    """Columns ``coord``, ``point`` and per term ``TERM``, ``TERM_lo``, ``TERM_hi``,
    ``TERM_limit`` (the point whose noise limits it) from the finished points of ``view``
    (a :class:`~eddyvigil.monitor.state.StreamView`, or None). NaN where a term or an
    interval does not exist, so Bokeh leaves a gap rather than inventing a value."""
    from eddyvigil.monitor.budget_cmd import budget_line

    cols: dict = {"coord": [], "point": []}
    for t in BUDGET_TERMS:
        cols.update({t: [], f"{t}_lo": [], f"{t}_hi": [], f"{t}_limit": []})
    if view is None or not view.finished:
        return cols
    stream = view.finished[-1].get("stream")
    line = budget_line(stream, list(view.finished), confidence, axis)
    n = len(line["points"])
    cols["coord"] = [float(p) for p in line["position"]]
    cols["point"] = [str(p) for p in line["points"]]
    for t in BUDGET_TERMS:
        term = line.get(t)
        if term is None:
            cols.update({t: [math.nan] * n, f"{t}_lo": [math.nan] * n,
                         f"{t}_hi": [math.nan] * n, f"{t}_limit": [""] * n})
            continue
        cols[t] = [_nan(v) for v in term["value"]]
        cols[f"{t}_lo"] = [_nan(v) for v in term["ci_low"]]
        cols[f"{t}_hi"] = [_nan(v) for v in term["ci_high"]]
        cols[f"{t}_limit"] = [str(p) for p in term["limiting_point"]]
    return cols


def derived_text(view) -> str:
    """The current point's budget-derived targets in words (stats/budget_targets.py), e.g.
    ``"point P07: production ±0.25 -> uv ±0.011, U ±0.024"``; "" without a [budget] table."""
    d = getattr(view, "derived_targets", None) if view is not None else None
    if not d:
        return ""
    pid = (view.point or {}).get("id")
    parts = []
    for term, entry in d.get("terms", {}).items():
        used = [f"{s['name']} ±{s['half_width']:.2g}" for s in d.get("statistics", ())
                if s.get("term") == term and s.get("applied")]
        h = entry.get("half_width")
        head = term.replace("_", " ") + (f" ±{h:.2g}" if h is not None else "")
        parts.append(head + (" -> " + ", ".join(used) if used else ": plain targets"))
    return f"point {pid}: " + "; ".join(parts)


class BudgetPanel:
    """A figure of the budget terms with interval whiskers; ``update(view, axis)`` per tick."""

    def __init__(self, **plot):
        from bokeh.models import ColumnDataSource, HoverTool, Whisker
        from bokeh.plotting import figure

        self.source = ColumnDataSource(budget_columns(None), name="budget_source")
        self.figure = figure(title=TITLE,
                             x_axis_label="y (m)", y_axis_label="m²/s³", name="budget",
                             **plot)
        for t, colour in BUDGET_TERMS.items():
            label = t.replace("_", " ")
            self.figure.add_layout(Whisker(base="coord", lower=f"{t}_lo", upper=f"{t}_hi",
                                           source=self.source, line_color=colour))
            self.figure.line("coord", t, source=self.source, color=colour, line_alpha=0.6,
                             legend_label=label)
            self.figure.scatter("coord", t, source=self.source, color=colour, size=6,
                                legend_label=label)
        self.figure.legend.location = "top_left"
        self.figure.legend.click_policy = "hide"
        self.figure.add_tools(HoverTool(tooltips=[
            ("point", "@point"), ("production", "@production (noise from @production_limit)"),
            ("transport", "@turbulent_transport (noise from @turbulent_transport_limit)"),
            ("residual", "@residual")]))
        self._shown: tuple | None = None

    def update(self, view, axis: str) -> None:
        """Recompute when the set of finished points (or the axis) changed."""
        key = (axis, len(view.finished) if view is not None else -1,
               view.finished[-1].get("point", {}).get("id") if view and view.finished else None,
               derived_text(view))
        if key == self._shown:
            return
        self._shown = key
        note = key[-1]  # the current point's budget-derived targets, in the title
        self.figure.title.text = TITLE + (f" | {note}" if note else "")
        self.figure.xaxis.axis_label = f"{axis} (m)"
        self.source.data = budget_columns(view, axis)
