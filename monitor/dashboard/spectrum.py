"""The spectrum panel: the shown stream's Welch spectra, eps and the small scales.

Log-log PSD of every component (u with its chi^2 95 % band), the -5/3 line drawn from the
estimated eps through Taylor's hypothesis, the inertial fit range shaded, the noise floor and the
cut-off marked, narrow-band peaks marked; a toggle shows the compensated spectrum
``E11(k1) k1^{5/3}`` instead, where the inertial range is flat at ``C1 eps^{2/3}``.
:func:`spectrum_columns` and :func:`scales_html` are pure (tested without a server); the
:class:`SpectrumPanel` only moves their output into Bokeh models.
"""

from __future__ import annotations

import html
import math

import numpy as np
from bokeh.layouts import column, row
from bokeh.models import BoxAnnotation, ColumnDataSource, Div, Span, Toggle
from bokeh.plotting import figure

__all__ = ["SpectrumPanel", "scales_html", "spectrum_columns"]

_COLOURS = {"u": "#1f77b4", "v": "#d62728", "w": "#2ca02c"}
_PSD_LABEL = "one-sided PSD S(f) ((m/s)²/Hz)"
_COMP_LABEL = "E11(k1)·k1^(5/3) (m^(4/3)/s²), k1 = 2πf/U by Taylor's hypothesis"


def _compensate(f, psd, speed):
    k1 = 2 * math.pi * np.asarray(f) / speed
    return speed * np.asarray(psd) / (2 * math.pi) * k1 ** (5.0 / 3.0)


def spectrum_columns(spectrum, compensated: bool = False, max_bins: int = 200) -> dict:
    """Columns for the panel from ``StreamView.spectrum``.

    ``spectrum`` = (SpectrumSnapshot | None, Dissipation | None).

    Returns ``{"lines": {...}, "band": {...}, "slope": {...}, "peaks": {...},
    "fit": (lo, hi) | None,
    "floor": level | None, "cutoff": Hz | None, "compensated": bool}``; empty columns when there
    is no spectrum yet. Compensating needs the mean speed (from the dissipation result).
    """
    empty = {
        "lines": {"f_hz": []},
        "band": {"f_hz": [], "lo": [], "hi": []},
        "slope": {"f_hz": [], "y": []},
        "peaks": {"f_hz": [], "y": [], "label": []},
        "fit": None,
        "floor": None,
        "cutoff": None,
        "compensated": False,
    }
    if spectrum is None or spectrum[0] is None:
        return empty
    spec, diss = spectrum[:2]
    speed = diss.speed_ms if diss is not None else float("nan")
    comp = bool(compensated) and math.isfinite(speed) and speed > 0
    lb = spec.log_binned(max_bins)
    f = lb.f_hz

    def y_of(fx, s):
        return _compensate(fx, s, speed) if comp else np.asarray(s)

    lines = {"f_hz": f}
    for c, name in enumerate(spec.columns):
        lines[name] = y_of(f, lb.psd[:, c])
    from eddyvigil.stats.spectra import chi2_interval

    lo, hi = chi2_interval(lb.psd[:, 0], lb.dof)
    out = dict(
        empty, lines=lines, band={"f_hz": f, "lo": y_of(f, lo), "hi": y_of(f, hi)}, compensated=comp
    )
    if diss is None:
        return out
    out["fit"] = diss.fit_range_hz
    floor = diss.floors.get(spec.columns[0])
    if floor is not None:
        out["floor"] = (
            float(y_of(np.array([floor.cutoff_hz]), np.array([floor.level]))[0])
            if comp
            else floor.level
        )
        out["cutoff"] = floor.cutoff_hz
    if diss.eps.value is not None and math.isfinite(speed) and speed > 0:
        # E11 = C1 eps^{2/3} k1^{-5/3}, S = 2 pi E11 / U (Taylor's hypothesis)
        fl = f[(f > 0)]
        k1 = 2 * math.pi * fl / speed
        s = 2 * math.pi / speed * diss.c1 * diss.eps.value ** (2.0 / 3.0) * k1 ** (-5.0 / 3.0)
        out["slope"] = {"f_hz": fl, "y": y_of(fl, s)}
    if diss.peaks:
        pf = np.array([p.f_hz for p in diss.peaks])
        col = {n: i for i, n in enumerate(spec.columns)}
        py = np.array(
            [np.interp(p.f_hz, f, lb.psd[:, col.get(p.component, 0)]) for p in diss.peaks]
        )
        out["peaks"] = {
            "f_hz": pf,
            "y": y_of(pf, py) * 1.5,
            "label": [
                f"{p.component} {p.f_hz:.4g} Hz, {100 * p.fraction:.1f} % of variance"
                for p in diss.peaks
            ],
        }
    return out


def _fmt(q, unit: str) -> str:
    if q is None or q.value is None:
        return f"— ({html.escape(q.reason)})" if q is not None and q.reason else "—"
    if q.ci_low is None:
        return f"{q.value:.4g} {unit} (no interval: {html.escape(q.reason or '')})"
    return f"{q.value:.4g} {unit} [{q.ci_low:.4g}, {q.ci_high:.4g}]"


def scales_html(spectrum) -> str:
    """ε, η, τ_η, λ_g, Re_λ with their 95 % intervals, the method and ν (plain HTML)."""
    if spectrum is None or spectrum[0] is None:
        return "<i>spectrum: waiting for the first complete segment</i>"
    spec, d = spectrum[:2]
    head = (
        f"Welch: {spec.segments} segments of {spec.segment} samples "
        f"(Δf = {spec.df_hz:.3g} Hz, Hann, 50 % overlap)"
    )
    if d is None:
        return f"<div>{head}; ε needs the mean speed and u′² first</div>"
    rows = [
        ("ε", d.eps, "m²/s³"),
        ("ε inertial", d.eps_inertial, "m²/s³"),
        ("ε iso", d.eps_iso, "m²/s³"),
        ("η", d.eta, "m"),
        ("τ_η", d.tau_eta, "s"),
        ("λ_g", d.lambda_g, "m"),
        ("Re_λ", d.Re_lambda, ""),
    ]
    body = "".join(f"<tr><td>{n}</td><td>{_fmt(q, unit)}</td></tr>" for n, q, unit in rows)
    source = "from the point" if d.nu_source == "point" else "air at 20 °C, default"
    nu = f"ν = {d.nu:.4g} m²/s ({source})"
    iso = ""
    if d.isotropy_ratio is not None and d.isotropy_ratio.value is not None:
        iso = f"; isotropy ratio ⟨(∂v/∂x)²⟩/⟨(∂u/∂x)²⟩ = {_fmt(d.isotropy_ratio, '')} (2 expected)"
    return (
        f"<div style='font-size:13px'>{head}<br>method: {html.escape(d.eps_method)}<br>{nu}{iso}"
        f"<table>{body}</table>"
        f"<small>Taylor's hypothesis (k1 = 2πf/U) converts time to space; "
        f"it fails at high turbulence "
        f"intensity.</small></div>"
    )


class SpectrumPanel:
    """Bokeh models of the panel; :meth:`update` takes the shown ``StreamView``."""

    def __init__(self, height: int = 340):
        self.lines = ColumnDataSource(
            {"f_hz": [], "u": [], "v": [], "w": []}, name="spectrum_source"
        )
        self.band = ColumnDataSource({"f_hz": [], "lo": [], "hi": []})
        self.slope = ColumnDataSource({"f_hz": [], "y": []}, name="spectrum_slope")
        self.peaks = ColumnDataSource({"f_hz": [], "y": [], "label": []}, name="spectrum_peaks")
        self.fig = figure(
            name="spectrum",
            title="spectra (Welch, 95 % χ² band on u)",
            height=height,
            x_axis_type="log",
            y_axis_type="log",
            sizing_mode="stretch_width",
            x_axis_label="frequency f (Hz)",
            y_axis_label=_PSD_LABEL,
            tools="pan,wheel_zoom,box_zoom,reset,save,hover",
            tooltips=[("f (Hz)", "@f_hz{0.000}"), ("", "@label")],
        )
        self.fig.varea(
            "f_hz", "lo", "hi", source=self.band, fill_color=_COLOURS["u"], fill_alpha=0.15
        )
        for c, colour in _COLOURS.items():
            self.fig.line(
                "f_hz", c, source=self.lines, color=colour, line_width=1.6, legend_label=c
            )
        self.fig.line(
            "f_hz",
            "y",
            source=self.slope,
            color="black",
            line_dash="dashed",
            line_width=1.5,
            legend_label="−5/3 from ε (Taylor)",
        )
        self.fig.scatter(
            "f_hz",
            "y",
            source=self.peaks,
            marker="inverted_triangle",
            size=12,
            color="#ff7f0e",
            legend_label="peak",
        )
        self.fit = BoxAnnotation(fill_color="#bbbbbb", fill_alpha=0.3, visible=False)
        self.floor = Span(
            dimension="width", line_color="#7f7f7f", line_dash="dotted", line_width=2, visible=False
        )
        self.cutoff = Span(
            dimension="height",
            line_color="#7f7f7f",
            line_dash="dotdash",
            line_width=1.5,
            visible=False,
        )
        for m in (self.fit, self.floor, self.cutoff):
            self.fig.add_layout(m)
        self.fig.legend.location = "bottom_left"
        self.toggle = Toggle(
            name="spectrum_compensated", label="compensated E11·k1^(5/3)", active=False, width=220
        )
        self.toggle.on_change("active", self._on_toggle)
        self.text = Div(name="spectrum_scales", text=scales_html(None), width=520)
        self.layout = row(self.fig, column(self.toggle, self.text), sizing_mode="stretch_width")
        self._view = None
        self._shown = None

    def _on_toggle(self, _attr, _old, _new) -> None:
        self.update(self._view, force=True)

    def update(self, view, force: bool = False) -> None:
        self._view = view
        spectrum = getattr(view, "spectrum", None) if view is not None else None
        key = (id(spectrum), self.toggle.active)
        if not force and key == self._shown:
            return
        self._shown = key
        cols = spectrum_columns(spectrum, self.toggle.active)
        data = {"f_hz": cols["lines"]["f_hz"]}
        for c in _COLOURS:
            data[c] = cols["lines"].get(c, np.full(len(data["f_hz"]), np.nan))
        self.lines.data = data
        self.band.data = cols["band"]
        self.slope.data = cols["slope"]
        self.peaks.data = cols["peaks"]
        self.fig.yaxis.axis_label = _COMP_LABEL if cols["compensated"] else _PSD_LABEL
        self.fit.visible = cols["fit"] is not None
        if cols["fit"] is not None:
            self.fit.left, self.fit.right = cols["fit"]
        self.floor.visible = cols["floor"] is not None and not cols["compensated"]
        if cols["floor"] is not None:
            self.floor.location = cols["floor"]
        self.cutoff.visible = cols["cutoff"] is not None
        if cols["cutoff"] is not None:
            self.cutoff.location = cols["cutoff"]
        text = scales_html(spectrum)
        if self.text.text != text:
            self.text.text = text
