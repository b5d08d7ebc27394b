"""One self-contained HTML report of a run, from its summary file (opens offline).

Profiles across each stream's traverse with their intervals, the k budget (as ``eddyvigil
budget``), spectra and signal quality where the points carry them, the per-point table, the
settings and the cautions. Bokeh's JavaScript is inlined: the file opens with no network.
"""

from __future__ import annotations

import html
import math
import os
from collections import Counter

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail

__all__ = ["add_arguments", "run", "report_html"]

EPILOG = epilog("report")

PROFILE_GROUPS = (
    ("means", ("U", "V", "W"), "m/s"),
    ("Reynolds stresses", ("uu", "vv", "ww", "uv", "uw", "vw", "k"), "m²/s²"),
    ("triple moments", ("uuv", "vvv", "vww", "uuu"), "m³/s³"),
)

CAUTIONS = (
    "A budget from one traverse assumes a thin shear layer: streamwise derivatives of the "
    "stresses are neglected, and terms that need a second station (advection, the normal-"
    "stress production) are left out.",
    "The residual collects every unmeasured term (pressure transport, viscous diffusion, "
    "advection where not measured) and every error of the other terms.",
    "Derivatives across the traverse amplify the points' errors; their intervals include an "
    "estimate of the discretisation error, which is itself approximate where the profile is "
    "resolved by few points.",
    "An interval is shown only where an honest one exists; a point marked no-interval or "
    "suspect in the table deserves a look before its numbers are used.",
)


def add_arguments(p) -> None:
    p.add_argument("summary", metavar="SUMMARY", help="summary file (JSON lines) of a run")
    p.add_argument("-o", "--output", required=True, metavar="FILE.html", help="report to write")
    p.add_argument("--axis", choices=("x", "y", "z"), default="y",
                   help="traverse axis (default y)")


def _e(v) -> str:
    return html.escape(str(v))


def _num(v, digits=4) -> str:
    if isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v):
        return f"{v:.{digits}g}"
    return "–"


def _table(head, rows) -> str:
    h = "".join(f"<th>{_e(c)}</th>" for c in head)
    body = "".join("<tr>" + "".join(
        f"<td class=\"t\">{_e(c)}</td>" if i == 0 else f"<td>{_e(c)}</td>"
        for i, c in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><tr>{h}</tr>{body}</table>"


def _stat(line, name):
    return next((s for s in line.get("statistics") or () if s.get("name") == name), None)


def _point_table(points, axis) -> str:
    names = [n for n in ("U", "uu", "vv", "uv", "k", "uuv", "vvv")
             if any(_stat(p, n) for p in points)]
    head = ["point", f"{axis} (m)", "samples", "duration (s)", "complete", "converged"]
    head += [f"{n} ± SE" for n in names]
    rows = []
    for p in points:
        cells = [p["point"].get("id"), _num(p["point"].get(axis)), p.get("samples"),
                 _num(p.get("duration_s"), 3), "yes" if p.get("complete") else "no",
                 "yes" if p.get("converged") else "no"]
        for n in names:
            s = _stat(p, n) or {}
            state = s.get("state")
            extra = f" ({state})" if state in ("no-interval", "suspect", "warming-up") else ""
            cells.append(f"{_num(s.get('value'))} ± {_num(s.get('stderr'), 2)}{extra}")
        rows.append(cells)
    return _table(head, rows)


def _quality_table(points) -> str | None:
    rows = []
    for p in points:
        q = p.get("quality")
        if not isinstance(q, dict):
            continue
        for comp, v in q.items():
            if isinstance(v, dict):
                rows.append([f"{p['point'].get('id')} {comp}", v.get("spikes"),
                             v.get("dropout_samples"), v.get("clipped_samples"),
                             _num(v.get("quantisation_step"))])
    if not rows:
        return None
    return _table(["point / component", "spikes", "dropout samples", "clipped samples",
                   "quantisation step"], rows)


def _budget_table(line) -> str:
    from eddyvigil.stats.budget import TERMS

    names = [t for t in TERMS if line.get(t) is not None]
    rows = []
    for i, (pid, pos) in enumerate(zip(line["points"], line["position"], strict=True)):
        limits = ", ".join(f"{n.split('_')[-1]}: {line[n]['limiting_point'][i]}"
                           for n in ("production", "turbulent_transport")
                           if line.get(n) is not None)
        rows.append([pid, _num(pos)] + [
            f"{_num(line[n]['value'][i], 3)} ± {_num(line[n]['stderr'][i], 2)}" for n in names]
            + [limits])
    return _table(["point", f"{line['axis']} (m)"] + [f"{n} (m²/s³)" for n in names]
                  + ["noise mostly from point"], rows)


def report_html(lines, axis: str = "y", source: str = "") -> str:
    """The report page of a run's summary lines."""
    from eddyvigil.monitor.budget_cmd import budget_line, traverse
    from eddyvigil.monitor.dashboard.report_plots import (
        budget_figure,
        profile_figures,
        spectra_figure,
        standalone_html,
    )

    points_all = [ln for ln in lines if ln.get("kind") == "point"]
    run = next((ln for ln in reversed(lines) if ln.get("kind") == "run"), None)
    streams = list(Counter(p.get("stream") for p in points_all))
    first = points_all[0]
    parts = [f"<h1>eddyvigil report</h1><p>Summary: {_e(source)}</p>"]
    if run is not None:
        rejected = sum((run.get("rejected") or {}).values())
        parts.append(f"<p>Run: {_e(run.get('samples'))} samples, {_e(run.get('points'))} "
                     f"points, streams {_e(', '.join(map(str, streams)))}, "
                     f"{_e(run.get('lost'))} messages lost, {rejected} rejected.</p>")
    else:
        parts.append("<p>No run line: the run did not finish normally (or is still going).</p>")
    parts.append("<h2>Settings</h2>" + _table(["setting", "value"], [
        ["confidence", first.get("confidence")], ["columns", ", ".join(first.get("columns") or [])],
        ["rate (Hz)", first.get("rate_hz")], ["units", first.get("units")],
        ["k", first.get("k_method")], ["traverse axis", axis]]))
    parts.append("<h2>Cautions</h2><div class=\"caution\"><ul>"
                 + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul></div>")
    figures = []
    after = []
    for stream in streams:
        points, notes = traverse(points_all, stream, axis)
        after.append(f"<h2>Stream {_e(stream)}: points</h2>")
        after += [f"<p>{_e(n)}</p>" for n in notes]
        after.append(_point_table(points, axis))
        if not points:
            continue
        figures += profile_figures(points, axis, PROFILE_GROUPS)
        b = budget_line(stream, points_all, float(first.get("confidence") or 0.95), axis)
        after.append(f"<h2>Stream {_e(stream)}: k budget</h2>")
        if b["production"] is not None or b["turbulent_transport"] is not None:
            figures.append(budget_figure(b))
            after.append(_budget_table(b))
        after.append("<ul>" + "".join(f"<li>{_e(a)}</li>" for a in b["assumptions"]) + "</ul>")
        spec = spectra_figure(points)
        if spec is not None:
            figures.append(spec)
        q = _quality_table(points)
        if q is not None:
            after.append(f"<h2>Stream {_e(stream)}: signal quality</h2>{q}")
    parts.append("<h2>Profiles and budget</h2>")
    return standalone_html(figures, "eddyvigil report", "\n".join(parts), "\n".join(after))


def run(args) -> int:
    from eddyvigil.monitor.budget_cmd import read_point_lines

    lines, code = read_point_lines("report", args.summary)
    if lines is None:
        return code
    page = report_html(lines, args.axis, os.path.basename(args.summary))
    tmp = f"{args.output}.tmp"
    try:
        with open(tmp, "w", encoding="utf-8") as f:
            f.write(page)
        os.replace(tmp, args.output)
    except OSError as e:
        return fail("report", ExitCode.CANNOT_WRITE, f"cannot write {args.output}: {e.strerror}")
    print(f"report written to {args.output}")
    return int(ExitCode.OK)
