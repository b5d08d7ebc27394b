"""Pure functions from a :class:`eddyvigil.monitor.state.RunSnapshot` to what the page shows.

No Bokeh here: everything returns plain dicts of lists/arrays or HTML strings, so it is tested
without a server. Text that came over the wire (stream names, point ids, notes) is always
HTML-escaped before it is put into markup. Missing numbers are NaN in columns (Bokeh leaves a
gap) and an en dash in text.
"""

from __future__ import annotations

import html
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np

from eddyvigil.monitor.rate import WINDOW_S, format_rate
from eddyvigil.monitor.state import RunSnapshot, StreamView
from eddyvigil.stats.names import family
from eddyvigil.stats import verdict as verdict_words
from eddyvigil.stats.verdict import display_state, point_verdict, state_words

__all__ = [
    "OKABE_ITO", "STATE_COLOURS", "MEAN_NAMES", "STRESS_NAMES", "statistic_colour", "pick_stream",
    "KIND_COLOURS", "Banner", "banner", "verdict_html", "health_html", "status_columns", "rows_after",
    "trace_columns", "history_columns", "halfwidth_columns", "guide_columns",
    "profile_axis", "profile_columns", "current_profile_columns", "finished_columns",
    "format_value", "format_duration", "GREY", "targeted_names", "statistic_dash",
    "STYLE_NOTE", "flow_html", "slowest_first", "SPECTRAL_STATUS",
]

#: Okabe & Ito (2008, "Color universal design") palette: distinguishable with every common
#: form of colour blindness. Every plot and badge uses these and only these.
OKABE_ITO = {
    "black": "#000000", "orange": "#E69F00", "sky": "#56B4E9", "green": "#009E73",
    "yellow": "#F0E442", "blue": "#0072B2", "vermillion": "#D55E00", "purple": "#CC79A7",
}
#: Neutral grey for things that are not yet anything (not part of the palette's hues).
GREY = "#8C8C8C"

STATE_COLOURS = {
    "warming-up": GREY,
    "converging": OKABE_ITO["orange"],
    "converged": OKABE_ITO["green"],
    "confirming": OKABE_ITO["blue"],
    "suspect": OKABE_ITO["vermillion"],
    "no-interval": OKABE_ITO["purple"],
    "untargeted": OKABE_ITO["sky"],
}

#: Statistics the running-estimate and profile plots show, in this order.
from eddyvigil.stats.names import MEAN_NAMES, STRESS_NAMES  # noqa: E402  (the one name table)

_FIXED_COLOURS = {
    "U": OKABE_ITO["blue"], "V": OKABE_ITO["vermillion"], "W": OKABE_ITO["purple"],
    "uu": OKABE_ITO["blue"], "vv": OKABE_ITO["vermillion"], "ww": OKABE_ITO["purple"],
    "uv": OKABE_ITO["green"], "uw": OKABE_ITO["orange"], "vw": OKABE_ITO["sky"],
    "k": OKABE_ITO["black"],
}
_CYCLE = ("blue", "vermillion", "green", "orange", "purple", "sky", "black", "yellow")


def statistic_colour(name: str) -> str:
    """The one colour a statistic has in every plot of the page.

    Means and stresses have fixed colours (a component keeps its hue: ``U`` and ``uu`` are
    both blue); any other name gets a stable colour from its letters.

    >>> statistic_colour("uv"), statistic_colour("uv") == statistic_colour("uv")
    ('#009E73', True)
    """
    if name in _FIXED_COLOURS:
        return _FIXED_COLOURS[name]
    return OKABE_ITO[_CYCLE[sum(name.encode()) % len(_CYCLE)]]


#: Line style by family, so statistics that share a component's hue (U and uu, V and vv...)
#: stay apart: means solid, second moments dashed, everything else dotted.
_FAMILY_DASH = {"mean": "solid", "second": "dashed"}
#: Said beside every plot where hues are shared.
STYLE_NOTE = "colour = velocity component; line: solid = mean, dashed = stress/k, dotted = other"


def statistic_dash(name: str) -> str:
    """The line style of a statistic in every plot (by family: see :data:`STYLE_NOTE`).

    >>> statistic_dash("U"), statistic_dash("uu"), statistic_dash("k"), statistic_dash("uuv")
    ('solid', 'dashed', 'dashed', 'dotted')
    """
    return _FAMILY_DASH.get(family(name), "dotted")


def _num(x) -> float:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return math.nan
    return x if math.isfinite(x) else math.nan


def format_value(x, digits: int = 4) -> str:
    """A number for a table cell: ``digits`` significant figures, en dash when missing.

    >>> format_value(8.21349), format_value(-0.000512), format_value(None), format_value(1.5e7)
    ('8.213', '-0.000512', '–', '1.5e+07')
    """
    x = _num(x)
    if math.isnan(x):
        return "–"
    return f"{x:.{digits}g}"


def value_text(e) -> str:
    """A statistic's value with its interval: ``value ± half-width``, or ``value +up −down``
    where the interval is not centred on the value (variances: stats.point._variance_intervals).

    >>> from types import SimpleNamespace as E
    >>> value_text(E(value=1.0, half_width=0.2, ci_low=0.8, ci_high=1.2))
    '1 ± 0.2'
    >>> value_text(E(value=1.0, half_width=0.2, ci_low=0.87, ci_high=1.27))
    '1 +0.27 −0.13'
    """
    v, lo, hi, hw = _num(e.value), _num(e.ci_low), _num(e.ci_high), _num(e.half_width)
    if math.isfinite(lo) and math.isfinite(hi) and abs((hi - v) - (v - lo)) > 0.1 * hw:
        return f"{format_value(v)} +{format_value(hi - v, 2)} −{format_value(v - lo, 2)}"
    return f"{format_value(v)} ± {format_value(hw, 2)}"


def unresolved_text(e) -> str:
    """The board's "unresolved σ" cell: the standard error slow content leaves unresolved
    (``Estimate.unresolved``) beside the resolved one, blank when there is none.

    >>> from types import SimpleNamespace as E
    >>> unresolved_text(E(stderr=0.012, unresolved=0.017))
    '0.017 (of 0.021)'
    >>> unresolved_text(E(stderr=0.01, unresolved=0.0))
    ''
    """
    u = _num(e.unresolved)
    if not u > 0:
        return ""
    total = math.hypot(_num(e.stderr), u)
    return f"{format_value(u, 2)} (of {format_value(total, 2)})"


def format_duration(seconds) -> str:
    """Seconds for people: ``42 s``, ``3 min 05 s``, ``1 h 02 min``; en dash when unknown.

    >>> format_duration(41.6), format_duration(185), format_duration(3720), format_duration(None)
    ('42 s', '3 min 05 s', '1 h 02 min', '–')
    """
    return verdict_words.format_duration(_num(seconds), unknown="–")


def pick_stream(snapshot: RunSnapshot, wanted: str | None) -> str | None:
    """The stream the plots show: ``wanted`` if the run has it, else the first one seen."""
    if wanted is not None and wanted in snapshot.streams:
        return wanted
    return next(iter(snapshot.streams), None)


# ---------------------------------------------------------------------------- verdict


#: Badge colour per verdict kind (``stats.verdict.KINDS``): (background, text).
KIND_COLOURS = {
    "waiting": (GREY, "#FFFFFF"),
    "no-targets": (OKABE_ITO["sky"], "#000000"),
    "warming-up": (GREY, "#FFFFFF"),
    "keep-acquiring": (OKABE_ITO["orange"], "#000000"),
    "check-signal": (OKABE_ITO["vermillion"], "#FFFFFF"),
    "move-on": (OKABE_ITO["green"], "#FFFFFF"),
}


@dataclass(frozen=True)
class Banner:
    """One stream's badge: the verdict's headline and reason, with the stream facts around it."""

    headline: str
    detail: str
    colour: str
    text_colour: str


def banner(view: StreamView) -> Banner:
    """The badge of one stream: the point verdict of :mod:`eddyvigil.stats.verdict`, worded
    with the point's name; a calm RUN ENDED once the stream has sent ``end``."""
    point = _point_label(view)
    if view.ended and view.stats is None:
        last = view.finished[-1] if view.finished else None
        tail = ""
        if last is not None:
            pid = html.escape(str((last.get("point") or {}).get("id", "–")))
            verdict = last.get("verdict") or {}
            tail = f"; last point {pid}: {html.escape(str(verdict.get('reason', '')))}"
        n = len(view.finished)
        return Banner("RUN ENDED", f"the publisher sent end: {n} point{'s' * (n != 1)} "
                      f"finished{tail}", GREY, "#FFFFFF")
    # a rake or field: the field's verdict (vectors meeting every target, stats.field)
    v = point_verdict(view.stats) if view.field is None else view.field["snapshot"].verdict()
    colour, text_colour = KIND_COLOURS[v.kind]
    detail = f"{point}: {html.escape(v.reason)}"
    if v.move_on and view.converged_wall_age_s is not None:
        detail += f", {format_duration(view.converged_wall_age_s)} ago"
    if view.stats is not None and view.point is not None and view.point.get("id") is None:
        detail += " (data arrived before any point message: counted under point null)"
    return Banner(v.headline, detail, colour, text_colour)


def _point_label(view: StreamView) -> str:
    p = view.point or {}
    if view.point and p.get("id") is None:
        return "no point message yet"
    pid = html.escape(str(p.get("id", "no point yet")))
    return f"point {pid}" if view.point else pid


def campaign_html(snapshot: RunSnapshot) -> str:
    """One line per stream whose traverse is known: points done and the time left with its
    range (the words of the terminal status line, ``monitor.campaign.campaign_text``)."""
    from eddyvigil.monitor.campaign import campaign_text

    rows = []
    for name, v in snapshot.streams.items():
        text = campaign_text(v.campaign)
        if text:
            rows.append(f"<div>{html.escape(name)} {html.escape(text)}</div>")
    if not rows:
        return ""
    return ('<div style="font-size:16px;padding:2px 0" title="time left for the positions still '
            'to come, from the finished points (README: Campaign ETA)">' + "".join(rows) + "</div>")


def verdict_html(snapshot: RunSnapshot) -> str:
    """One large, unmistakable badge per stream (headline words, not just a colour)."""
    if not snapshot.streams:
        return _badge("", Banner("WAITING FOR DATA", "no stream has been heard yet", GREY,
                                 "#FFFFFF"))
    return "".join(_badge(html.escape(name), banner(v)) for name, v in snapshot.streams.items())


def _badge(stream: str, v: Banner) -> str:
    return (
        f'<div style="display:inline-block;margin:4px 8px 4px 0;padding:10px 18px;'
        f'border-radius:6px;background:{v.colour};color:{v.text_colour};min-width:380px">'
        f'<div style="font-size:13px;opacity:0.9">{stream}</div>'
        f'<div style="font-size:34px;font-weight:700;letter-spacing:1px">{v.headline}</div>'
        f'<div style="font-size:14px">{v.detail}</div></div>'
    )


# ---------------------------------------------------------------------------- health


def health_html(snapshot: RunSnapshot) -> str:
    """Sample rate, lost messages, restarts and rejections per stream; non-zero is flagged.

    A flagged cell carries a "!" as well as a colour, so it does not depend on colour vision.
    """
    head = ("<tr><th>stream</th><th>sampling rate</th>"
            f"<th>received (last {WINDOW_S:.0f} s)</th><th>messages</th>"
            "<th>lost</th><th>gaps</th><th>restarts</th><th>rejected</th></tr>")
    rows = []
    for name, v in snapshot.streams.items():
        rejected = {k: int(n) for k, n in v.rejected.items() if n}
        rej = ", ".join(f"{html.escape(str(k))} {n}" for k, n in sorted(rejected.items()))
        cells = [
            _cell(html.escape(name)),
            _cell(_nominal_rate(v)),
            _cell(format_rate(v.received_rate_hz)),
            _cell(str(v.messages)),
            _cell(str(v.lost_messages), flag=v.lost_messages > 0),
            _cell(str(v.gaps), flag=v.gaps > 0),
            _cell(str(v.restarts), flag=v.restarts > 0),
            _cell(rej or "0", flag=bool(rejected)),
        ]
        rows.append("<tr>" + "".join(cells) + "</tr>")
    extra = ""
    other = {k: int(n) for k, n in snapshot.rejected_total.items() if n}
    if other:
        listed = ", ".join(f"{html.escape(str(k))} {n}" for k, n in sorted(other.items()))
        extra += f'<div style="{_FLAG}">! rejected in this run: {listed}</div>'
    ended = bool(snapshot.streams) and all(v.ended for v in snapshot.streams.values())
    for event in snapshot.transport_events[-3:]:
        text = html.escape(str(event))
        if ended and any(word in text.lower() for word in _AFTER_END):
            extra += (f'<div style="font-size:12px;padding:2px 6px">the publisher closed its '
                      f"connection after end (normal): {text}</div>")
        elif any(word in text.lower() for word in _TROUBLE):
            extra += f'<div style="{_FLAG}">! transport: {text}</div>'
        else:
            extra += f'<div style="font-size:12px;padding:2px 6px">transport: {text}</div>'
    table = (f'<table style="border-collapse:collapse;font-size:13px">{head}{"".join(rows)}'
             "</table>")
    return table + extra + random_sampling_html(snapshot)


def random_sampling_html(snapshot: RunSnapshot) -> str:
    """Notes of every randomly sampled stream's current point (monitor.random_sampling's
    wording: weighting, data rate per T_int, dead-time check, no spectrum); a warning is
    flagged with "!" as well as colour. Empty when no stream is randomly sampled."""
    from eddyvigil.monitor.random_sampling import random_sampling_notes

    out = []
    for name, v in snapshot.streams.items():
        if not v.random_sampling:
            continue
        for text, flag in random_sampling_notes(v.random_sampling):
            words = f"{html.escape(name)}: {html.escape(text)}"
            if flag:
                out.append(f'<div style="{_FLAG}">! {words}</div>')
            else:
                out.append(f'<div style="font-size:12px;padding:2px 6px">{words}</div>')
    return "".join(out)


def _nominal_rate(v: StreamView) -> str:
    """The rate the publisher states; random sampling says so; en dash before any sample."""
    if v.rate_hz:
        return format_rate(v.rate_hz)
    if v.stats is not None and v.stats.samples > 0:
        return "random sampling"
    return "–"


#: A peer going away after every stream sent ``end`` is the normal ending, not trouble.
_AFTER_END = ("closed", "disconnect")
#: Words that make a transport event a problem rather than news (e.g. "connected").
_TROUBLE = ("closed", "disconnect", "drop", "lost", "fail", "error", "refused", "limit")

_FLAG = (f"background:{OKABE_ITO['vermillion']};color:#FFFFFF;font-weight:700;padding:2px 6px;"
         "margin-top:2px")


def _cell(text: str, flag: bool = False) -> str:
    if flag:
        return f'<td style="{_FLAG}">! {text}</td>'
    return f'<td style="padding:2px 8px">{text}</td>'


# ---------------------------------------------------------------------------- status board


def status_columns(snapshot: RunSnapshot) -> dict[str, list]:
    """The status board: one row per targeted statistic of every stream's current point, or,
    between points and after ``end``, of its last finished point (point "P3 (finished)")."""
    cols: dict[str, list] = {k: [] for k in (
        "stream", "point", "name", "value", "unresolved", "target", "state", "eta", "colour")}
    for name, v in snapshot.streams.items():
        stats, point, tag = v.stats, v.point, ""
        if stats is None and v.last_point is not None:
            (point, stats), tag = v.last_point, " (finished)"
        if stats is None:
            continue
        pid = str((point or {}).get("id", "–")) + tag
        derived = derived_terms(v) if not tag else {}
        for e in stats.targeted():
            cols["stream"].append(name)
            cols["point"].append(pid)
            cols["name"].append(e.name)
            cols["value"].append(value_text(e))
            cols["unresolved"].append(unresolved_text(e))
            cols["target"].append(f"± {format_value(e.target, 2)}"
                                  + (f" ({derived[e.name]})" if e.name in derived else ""))
            state = display_state(e)
            cols["state"].append(state_words(state))
            cols["eta"].append("done" if e.converged else _eta(e.eta_s))
            cols["colour"].append(STATE_COLOURS.get(state, GREY))
        _spectral_status_rows(cols, name, pid, v)
    return cols


def derived_terms(view: StreamView | None) -> dict[str, str]:
    """``name -> "from production"`` for the current point's targets that a ``[budget]`` term
    set (stats/budget_targets.py); the status board notes them beside the target."""
    derived = getattr(view, "derived_targets", None) or {}
    return {s["name"]: f"from {s['term'].replace('_', ' ')}"
            for s in derived.get("statistics", ()) if s.get("applied")}


#: Rows of the status board from the spectra (ε targeted or not, then the scales it sets).
SPECTRAL_STATUS = ("eps", "eta", "Re_lambda")


def _spectral_quantity(view: StreamView | None, name: str):
    """The current point's ``dissipation.Quantity`` of ``name`` (None without a spectrum)."""
    spectrum = view.spectrum if view is not None else None
    if not spectrum or len(spectrum) < 2 or spectrum[1] is None:
        return None
    return spectrum[1].rows().get(name)


def _spectral_status_rows(cols: dict[str, list], stream: str, pid: str, v: StreamView) -> None:
    """ε, η and Re_λ of the current point with their intervals (as :func:`value_text`).

    ε carries its target, state and ETA when it is targeted (``stats/eps_target.py``); a value
    without an honest interval says so instead of showing one.
    """
    if not v.spectrum or v.spectrum[0] is None:
        return
    status = v.spectrum[2] if len(v.spectrum) > 2 else None
    for n in SPECTRAL_STATUS:
        q = _spectral_quantity(v, n)
        honest = q is not None and q.value is not None and q.ci_low is not None
        if honest:
            # as the moments' rows: "value ± h" or "value +up −down" (η's bounds in full,
            # "0.0001659 [0.0001651, 0.0001667]", did not fit the column)
            text = value_text(
                SimpleNamespace(value=q.value, ci_low=q.ci_low, ci_high=q.ci_high,
                                half_width=0.5 * (q.ci_high - q.ci_low))
            )
        elif q is not None and q.value is not None:
            text = f"{format_value(q.value)} (no interval)"
        else:
            text = "–"
        state = "untargeted" if honest else "no-interval"
        target, eta = "–", "–"
        if n == "eps" and status is not None:
            state = status.state
            target = "–" if status.target is None else f"± {format_value(status.target, 2)}"
            eta = "done" if status.converged else _eta(status.eta_s)
        cols["stream"].append(stream)
        cols["point"].append(pid)
        cols["name"].append(n)
        cols["value"].append(text)
        cols["unresolved"].append("")
        cols["target"].append(target)
        cols["state"].append(state_words(state))
        cols["eta"].append(eta)
        cols["colour"].append(STATE_COLOURS.get(state, GREY))


def _eta(seconds) -> str:
    """An open statistic's ETA: never "0 s" while it is not done.

    >>> _eta(0.3), _eta(12.4), _eta(None)
    ('< 1 s', '12 s', '–')
    """
    s = _num(seconds)
    return "< 1 s" if 0 <= s < 0.5 else format_duration(s)


# ---------------------------------------------------------------------------- time series


def rows_after(columns: Mapping[str, np.ndarray], key: str, last: float | None
               ) -> tuple[dict[str, np.ndarray], bool]:
    """Rows whose ``key`` is beyond ``last`` (what to stream), or everything on a restart.

    Returns ``(rows, reset)``: ``reset`` is True when the page must replace its data (nothing
    shown yet, or ``key`` went backwards: a new point or a restarted publisher).

    >>> rows, reset = rows_after({"t": np.array([0.0, 1.0, 2.0])}, "t", 1.0)
    >>> rows["t"].tolist(), reset
    ([2.0], False)
    >>> rows_after({"t": np.array([0.0, 0.5])}, "t", 1.0)[1]
    True
    """
    if key not in columns or len(columns[key]) == 0:
        return {k: np.asarray(v)[:0] for k, v in columns.items()}, last is not None
    k = np.asarray(columns[key])
    if last is None or k[-1] < last:
        return {c: np.asarray(v) for c, v in columns.items()}, True
    start = int(np.searchsorted(k, last, side="right"))
    return {c: np.asarray(v)[start:] for c, v in columns.items()}, False


def trace_columns(view: StreamView | None, components: Sequence[str] = ("u", "v", "w")
                  ) -> dict[str, np.ndarray]:
    """The decimated live trace, one column per velocity component (NaN where absent).

    Where time jumps by more than three typical steps (a rejected or lost block, a pause of
    the publisher) a NaN row is put in, so the line breaks there instead of bridging the gap.

    >>> cols = trace_columns(StreamView("a", None, None, 0, None, None, None, 0, 0, 0, 0, {},
    ...     trace={"t": np.array([0.0, 0.1, 0.2, 1.0, 1.1]), "u": np.arange(5.0)}), ("u",))
    >>> cols["t"].tolist()[:4], bool(np.isnan(cols["u"][3]))
    ([0.0, 0.1, 0.2, 0.6], True)
    """
    t = np.asarray(view.trace.get("t", np.empty(0)) if view else np.empty(0), dtype=float)
    out = {"t": t}
    for c in components:
        col = view.trace.get(c) if view else None
        out[c] = np.asarray(col, dtype=float) if col is not None else np.full(t.shape, np.nan)
    if len(t) > 2:
        dt = np.diff(t)
        gaps = np.flatnonzero(dt > 3.0 * np.median(dt))
        if len(gaps):
            mid = 0.5 * (t[gaps] + t[gaps + 1])
            out = {k: np.insert(v, gaps + 1, mid if k == "t" else np.nan) for k, v in out.items()}
    return out


def history_columns(view: StreamView | None, names: Sequence[str] = MEAN_NAMES + STRESS_NAMES
                    ) -> dict[str, np.ndarray]:
    """Running estimates with their confidence band: ``NAME``, ``NAME_lo``, ``NAME_hi``.

    Statistics without history (untargeted) are NaN, so the plot shows nothing for them.
    """
    h = view.history if view is not None else {}
    d = np.asarray(h.get("duration_s", np.empty(0)), dtype=float)
    out = {"duration_s": d}
    nan = np.full(d.shape, np.nan)
    for n in names:
        value = np.asarray(h[n], dtype=float) if n in h else nan
        hw = np.asarray(h[n + "_hw"], dtype=float) if n + "_hw" in h else nan
        out[n] = value
        out[n + "_lo"] = value - hw
        out[n + "_hi"] = value + hw
    return out


def targeted_names(view: StreamView | None) -> list[str]:
    """Names of the statistics with a target in the current point's history."""
    if view is None:
        return []
    return [k[:-7] for k in view.history if k.endswith("_target")]


def halfwidth_columns(view: StreamView | None, names: Sequence[str]) -> dict[str, np.ndarray]:
    """Half-width over target for each ``name`` against acquisition time (log-log ready).

    1 is the target; values that cannot sit on a log axis (non-positive, non-finite) are NaN.
    """
    h = view.history if view is not None else {}
    d = np.asarray(h.get("duration_s", np.empty(0)), dtype=float)
    out = {"duration_s": np.where(d > 0, d, np.nan)}
    for n in names:
        if n + "_hw" in h and n + "_target" in h:
            with np.errstate(divide="ignore", invalid="ignore"):
                r = np.asarray(h[n + "_hw"], dtype=float) / np.asarray(h[n + "_target"], float)
        else:
            r = np.full(d.shape, np.nan)
        out[n] = np.where(np.isfinite(r) & (r > 0), r, np.nan)
    return out


def slowest_first(hw: Mapping[str, np.ndarray]) -> list[str]:
    """Names of half-width columns, furthest from their target now first (NaN last).

    >>> slowest_first({"duration_s": np.array([1.0, 2.0]), "U": np.array([3.0, 0.5]),
    ...                "uv": np.array([4.0, 2.0]), "k": np.array([np.nan, np.nan])})
    ['uv', 'U', 'k']
    """
    def last(n):
        r = np.asarray(hw[n], dtype=float)
        r = r[np.isfinite(r)]
        return -r[-1] if len(r) else math.inf

    return sorted((n for n in hw if n != "duration_s"), key=last)


def guide_columns(view: StreamView | None, span: float = 1e4) -> dict[str, list]:
    """T^(-1/2) guides through the current half-width of every open targeted statistic.

    An error bar of a stationary signal shrinks as 1/√T, so the guide of a statistic at
    ratio r (half-width / target) after T seconds reaches the target at T·r². The line is drawn
    from now to there (at most ``span`` times now). Source: the variance of a time average,
    ``Var ≈ 2σ²T_int/T`` (Lumley & Panofsky 1964; Tennekes & Lumley 1972 §6.4).
    """
    out: dict[str, list] = {"xs": [], "ys": [], "name": [], "colour": []}
    if view is None or view.stats is None:
        return out
    t_now = _num(view.stats.duration_s)
    if not t_now > 0:
        return out
    for e in view.stats.targeted():
        r = _num(e.half_width) / _num(e.target) if _num(e.target) > 0 else math.nan
        if e.converged or not r > 0 or math.isnan(r):
            continue
        t_end = t_now * min(max(r * r, 1.0), span)
        out["xs"].append([t_now, t_end])
        out["ys"].append([r, r * math.sqrt(t_now / t_end)])
        out["name"].append(e.name)
        out["colour"].append(statistic_colour(e.name))
    return out


# ---------------------------------------------------------------------------- flow facts


def flow_html(snapshot: RunSnapshot) -> str:
    """Turbulence intensity √uu/|U|, integral time scales and effective sample counts.

    |U| is the local mean speed over the components present (DESIGN's relative scale).
    """
    rows = []
    for name, v in snapshot.streams.items():
        s = v.stats
        if s is None or s.samples == 0:
            continue
        have = set(s.names)

        def val(n, have=have, s=s):
            return _num(s.estimate(n).value) if n in have else math.nan

        speed = math.sqrt(sum(val(c.upper()) ** 2 for c in s.columns
                              if not math.isnan(val(c.upper()))))
        ti = math.sqrt(val("uu")) / speed if val("uu") >= 0 and speed > 0 else math.nan
        tint = " / ".join(format_value(val(f"Tint_{c}") * 1e3, 3) for c in s.columns)
        neff = " / ".join("–" if math.isnan(val(f"Neff_{c}")) else f"{val(f'Neff_{c}'):.0f}"
                          for c in s.columns)
        comps = "/".join(s.columns)
        ti_text = "–" if math.isnan(ti) else f"{100 * ti:.1f} %"
        rows.append(f"<tr><td>{html.escape(name)}</td><td>{ti_text}</td>"
                    f"<td>{tint}</td><td>{neff}</td><td>{comps}</td></tr>")
    if not rows:
        return ""
    head = ("<tr><th>stream</th><th>turbulence intensity √uu/|U|</th>"
            "<th>T<sub>int</sub> (ms)</th><th>N<sub>eff</sub></th><th>components</th></tr>")
    return (f'<table style="border-collapse:collapse;font-size:13px;margin-top:8px" '
            f'cellpadding="4">{head}{"".join(rows)}</table>')


# ---------------------------------------------------------------------------- traverse


def profile_axis(view: StreamView | None) -> str:
    """The traverse coordinate: whichever of x, y, z varies most over the points so far."""
    if view is None:
        return "y"
    pts = [dict(s.get("point") or {}) for s in view.finished]
    if view.point:
        pts.append(dict(view.point))
    best, spread = "y", 0.0
    for axis in ("x", "y", "z"):
        vals = [_num(p.get(axis)) for p in pts]
        vals = [v for v in vals if not math.isnan(v)]
        if len(vals) > 1 and max(vals) - min(vals) > spread:
            best, spread = axis, max(vals) - min(vals)
    return best


def _stat_entry(summary: Mapping, name: str) -> Mapping | None:
    for s in summary.get("statistics") or ():
        if isinstance(s, Mapping) and s.get("name") == name:
            return s
    return None


def profile_columns(view: StreamView | None, axis: str,
                    names: Sequence[str] = MEAN_NAMES + STRESS_NAMES) -> dict[str, list]:
    """Finished points as profile rows: coordinate, ``NAME``, ``NAME_lo``, ``NAME_hi`` (CI)."""
    out: dict[str, list] = {"coord": [], "id": []}
    for n in names:
        out[n], out[n + "_lo"], out[n + "_hi"] = [], [], []
    for s in (view.finished if view is not None else ()):
        point = s.get("point") or {}
        out["coord"].append(_num(point.get(axis)))
        out["id"].append(str(point.get("id", "")))
        for n in names:
            e = _stat_entry(s, n) or {}
            out[n].append(_num(e.get("value")))
            out[n + "_lo"].append(_num(e.get("ci_low")))
            out[n + "_hi"].append(_num(e.get("ci_high")))
    return out


def current_profile_columns(view: StreamView | None, axis: str,
                            names: Sequence[str] = MEAN_NAMES + STRESS_NAMES) -> dict[str, list]:
    """The current point in the same columns as :func:`profile_columns` (zero or one row)."""
    out: dict[str, list] = {"coord": [], "id": []}
    for n in names:
        out[n], out[n + "_lo"], out[n + "_hi"] = [], [], []
    if view is None or view.stats is None or not view.point:
        return out
    out["coord"].append(_num(view.point.get(axis)))
    out["id"].append(str(view.point.get("id", "")))
    have = set(view.stats.names)
    for n in names:
        # a statistic of the moments, or one of the spectra's (eps: dissipation.Quantity)
        e = view.stats.estimate(n) if n in have else _spectral_quantity(view, n)
        out[n].append(_num(e.value) if e else math.nan)
        out[n + "_lo"].append(_num(e.ci_low) if e else math.nan)
        out[n + "_hi"].append(_num(e.ci_high) if e else math.nan)
    return out


def finished_columns(view: StreamView | None) -> dict[str, list]:
    """The table of finished points (DESIGN §4 summaries), oldest first."""
    keys = ("id", "x", "y", "z", "samples", "duration", "converged", "lost", "U", "k")
    out: dict[str, list] = {k: [] for k in keys}
    for s in (view.finished if view is not None else ()):
        point = s.get("point") or {}
        out["id"].append(str(point.get("id", "")))
        for axis in ("x", "y", "z"):
            out[axis].append(format_value(point.get(axis)))
        out["samples"].append(str(s.get("samples", "–")))
        out["duration"].append(format_duration(s.get("duration_s")))
        if s.get("converged"):
            conv = f"yes, after {format_duration(s.get('converged_at_s'))}"
        else:
            conv = "no"
        if s.get("complete") is False:
            conv += " (cut short)"
        out["converged"].append(conv)
        out["lost"].append(str(s.get("lost_messages", 0)))
        for n in ("U", "k"):
            e = _stat_entry(s, n) or {}
            lo, hi = _num(e.get("ci_low")), _num(e.get("ci_high"))
            hw = (hi - lo) / 2 if not (math.isnan(lo) or math.isnan(hi)) else math.nan
            out[n].append(f"{format_value(e.get('value'))} ± {format_value(hw, 2)}")
    return out

