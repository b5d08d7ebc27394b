"""Bokeh figures of the offline report (``eddyvigil report``): pure functions from summary
lines to figures; :func:`standalone_html` writes them with Bokeh's JavaScript inlined, so the
file opens with no network. Kept here because nothing outside ``dashboard/`` imports Bokeh.
"""

from __future__ import annotations

import math

__all__ = ["profile_figures", "budget_figure", "spectra_figure", "standalone_html"]

PALETTE = ("#1f5f8b", "#c0392b", "#2e8b57", "#8e44ad", "#d68910", "#5d6d7e")


def _finite(v):
    return isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)


def _errorbar_figure(title, x_label, y_label, series, name):
    """``series``: list of (label, x, y, lo, hi); bars drawn where lo/hi are finite."""
    from bokeh.models import ColumnDataSource
    from bokeh.plotting import figure

    fig = figure(title=title, width=560, height=340, x_axis_label=x_label,
                 y_axis_label=y_label, name=name, tools="pan,wheel_zoom,box_zoom,reset,save")
    for (label, x, y, lo, hi), color in zip(series, PALETTE * 4, strict=False):
        rows = [(a, b, c, d) for a, b, c, d in zip(x, y, lo, hi, strict=True) if _finite(b)]
        if not rows:
            continue
        src = ColumnDataSource({"x": [r[0] for r in rows], "y": [r[1] for r in rows],
                                "lo": [r[2] if _finite(r[2]) else r[1] for r in rows],
                                "hi": [r[3] if _finite(r[3]) else r[1] for r in rows]})
        fig.line("x", "y", source=src, color=color, legend_label=label)
        fig.scatter("x", "y", source=src, color=color, size=6, legend_label=label)
        fig.segment("x", "lo", "x", "hi", source=src, color=color, line_width=2)
    if fig.legend:
        fig.legend.location = "top_left"
        fig.legend.click_policy = "hide"
    return fig


def profile_figures(points, axis, groups):
    """One figure per group of statistics (e.g. means, stresses) across the traverse, each
    value with its interval (``ci_low``..``ci_high``) as a bar."""
    figs = []
    pos = [p["point"][axis] for p in points]
    for title, names, unit in groups:
        series = []
        for n in names:
            rows = [next((s for s in p.get("statistics") or () if s.get("name") == n), None)
                    for p in points]
            if all(r is None for r in rows):
                continue
            series.append((n, pos, [(r or {}).get("value") for r in rows],
                           [(r or {}).get("ci_low") for r in rows],
                           [(r or {}).get("ci_high") for r in rows]))
        if series:
            figs.append(_errorbar_figure(title, f"{axis} (m)", unit, series,
                                         f"profile-{title.split()[0].lower()}"))
    return figs


def budget_figure(line):
    """The budget terms across the traverse, each with its interval."""
    series = []
    for name in ("production", "turbulent_transport", "dissipation", "advection", "residual",
                 "pressure_lumley"):
        t = line.get(name)
        if t is None:
            continue
        series.append((name.replace("_", " "), line["position"], t["value"], t["ci_low"],
                       t["ci_high"]))
    return _errorbar_figure(f"k budget, stream {line['stream']} "
                            f"({round(100 * line.get('confidence', 0.95))} % intervals)",
                            f"{line['axis']} (m)", "m²/s³", series, "budget")


def spectra_figure(points):
    """Spectra of the points that carry them (DESIGN §8), first component, log-log."""
    from bokeh.plotting import figure

    fig = figure(title="spectra (first component of each point)", width=560, height=340,
                 x_axis_type="log", y_axis_type="log", x_axis_label="f (Hz)",
                 y_axis_label="PSD ((m/s)²/Hz)", name="spectra")
    drawn = 0
    for p, color in zip(points, PALETTE * 50, strict=False):
        spectra = p.get("spectra")
        if not isinstance(spectra, dict) or not spectra:
            continue
        comp, s = next(iter(spectra.items()))
        f = s.get("f_hz") or []
        psd = s.get("psd") or []
        xy = [(a, b) for a, b in zip(f, psd, strict=False) if _finite(a) and _finite(b)
              and a > 0 and b > 0]
        if xy:
            fig.line([a for a, _ in xy], [b for _, b in xy], color=color,
                     legend_label=f"{p['point'].get('id')} {comp}")
            drawn += 1
    return fig if drawn else None


def standalone_html(figures, title: str, before: str, after: str) -> str:
    """One HTML page: ``before`` (HTML), the figures in a grid, ``after`` (HTML); Bokeh's
    JavaScript and CSS inlined (``bokeh.resources.INLINE``), so it needs no network."""
    from bokeh.embed import components
    from bokeh.layouts import gridplot
    from bokeh.resources import INLINE

    grid = gridplot([figures[i:i + 2] for i in range(0, len(figures), 2)], toolbar_location="right")
    script, div = components(grid)
    return (f"<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{title}</title>\n{INLINE.render()}\n<style>{_CSS}</style></head>\n"
            f"<body>\n{before}\n{div}\n{after}\n{script}\n</body></html>\n")


_CSS = """
body { font-family: sans-serif; margin: 1.5em; color: #222; }
table { border-collapse: collapse; font-size: 0.85em; margin: 0.5em 0 1.5em; }
th, td { border: 1px solid #ccc; padding: 0.2em 0.5em; text-align: right; }
th { background: #eef; }
td.t { text-align: left; }
.caution { background: #fff6e0; border-left: 4px solid #d68910; padding: 0.5em 1em; }
"""
