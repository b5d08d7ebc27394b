"""The live campaign ETA of one stream: what the monitor learns of the traverse, and its wording.

The positions still to come come from ``watch --points FILE`` (the ``[[points]]`` TOML that
``eddyvigil plan --points`` reads; it wins when given) or from the traverse plan the publisher
announces on its ``point`` messages, an optional header field (wire v1 ignores unknown fields,
so old publishers stay valid and old monitors ignore it)::

    "traverse": {"index": 4, "of": 12, "limit_s": 60.0,
                 "remaining": [{"id": "p06", "x": 0.3, "y": 0.02, "z": 0.0, "limit_s": 60.0}, ...]}

``remaining``: the points after this one, in order; ``index``/``of``: this point's place and
the count (enough for a count, and for an ETA from the average of the finished points when no
positions are given); ``limit_s``: the longest record the publisher gives a point. A field
that does not have this form is ignored whole (the ETA then says the positions are unknown);
it never touches a statistic.

:class:`Campaign` keeps, per stream, the finished points' times to target (from their summary
lines, :func:`point_need`), the gaps between points on the publisher's clock (``t0`` of a
point's first row less the end of the one before), and computes the forecast
(:func:`eddyvigil.stats.campaign.forecast`) when a point starts or finishes; readers ask
:meth:`Campaign.view` with the record so far of the point in progress. Everything here comes
from the messages, so a replay gives the same ``campaign`` objects in the summary.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Mapping

__all__ = ["Campaign", "announced_traverse", "campaign_text", "point_need", "read_points"]

_AXES = ("x", "y", "z")


def _number(v) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)


def point_need(line: Mapping) -> tuple[float, int | None, float]:
    """(time to meet every target counted from the start of the point, blocks of that need's
    half-width, largest T_int) of a point summary line; NaN where it has no such statistic."""
    from eddyvigil.stats.planner import seconds_to_target

    need, tint, blocks = math.nan, math.nan, None
    duration = line.get("duration_s")
    for s in line.get("statistics") or ():
        if not isinstance(s, Mapping):
            continue
        name = str(s.get("name", ""))
        if name.startswith("Tint_") and _number(s.get("value")):
            tint = s["value"] if math.isnan(tint) else max(tint, s["value"])
        lo, hi, target = s.get("ci_low"), s.get("ci_high"), s.get("target")
        if not all(_number(v) for v in (lo, hi, target, duration)):
            continue
        t = seconds_to_target((hi - lo) / 2, duration, target)
        if math.isfinite(t) and (math.isnan(need) or t > need):
            b = s.get("blocks")
            need, blocks = t, int(b) if _number(b) else None
    return need, blocks, tint


def _position(p: Mapping) -> dict:
    return {a: float(p[a]) for a in _AXES if _number(p.get(a))}


def read_points(path) -> list[dict]:
    """The ``[[points]]`` of a TOML points file as ``{"id", "x"?, "y"?, "z"?}`` (ids default
    to ``#1``, ``#2``...). Raises OSError, or ValueError with the reason."""
    with open(path, "rb") as f:
        try:
            d = tomllib.load(f)
        except tomllib.TOMLDecodeError as e:
            raise ValueError(f"not valid TOML ({e})") from None
    pts = d.get("points")
    if not isinstance(pts, list) or not pts:
        raise ValueError("needs [[points]] tables")
    out = []
    for i, p in enumerate(pts):
        if not isinstance(p, dict):
            raise ValueError(f"[[points]] #{i + 1} is not a table")
        for a in _AXES:
            if a in p and not _number(p[a]):
                raise ValueError(f"[[points]] #{i + 1}: '{a}' must be a number")
        out.append({"id": str(p.get("id", f"#{i + 1}")), **_position(p)})
    return out


def announced_traverse(header: Mapping) -> dict | None:
    """The ``traverse`` field of a point message's header in a checked form, or None when it
    is absent or does not have the documented form (then ignored whole)."""
    t = header.get("traverse") if isinstance(header, Mapping) else None
    if not isinstance(t, Mapping):
        return None
    index, of, limit = t.get("index"), t.get("of"), t.get("limit_s")
    remaining = t.get("remaining")
    if index is not None and not (isinstance(index, int) and index >= 0):
        return None
    if of is not None and not (isinstance(of, int) and of >= 1):
        return None
    if limit is not None and not (_number(limit) and limit > 0):
        return None
    if remaining is not None:
        if not isinstance(remaining, list) or len(remaining) > 100_000:
            return None
        rows = []
        for p in remaining:
            if not isinstance(p, Mapping):
                return None
            cap = p.get("limit_s")
            if cap is not None and not (_number(cap) and cap > 0):
                return None
            pid = p.get("id")
            rows.append({"id": None if pid is None else str(pid), "position": _position(p),
                         "limit_s": cap})
    elif index is not None and of is not None and index < of:
        rows = [{"id": None, "position": {}, "limit_s": limit}] * (of - index - 1)
    else:
        return None
    return {"index": index, "of": of, "limit_s": limit, "remaining": rows}


class Campaign:
    """One stream's traverse as far as the monitor knows it, and its forecast."""

    def __init__(self, planned=None, min_record_s: float = 0.0, confidence: float = 0.95):
        self.planned = list(planned) if planned is not None else None  # from --points
        self.min_record_s = float(min_record_s)
        self.confidence = float(confidence)
        self.announced: dict | None = None  # of the point in progress (or the last one)
        self.current: dict | None = None  # meta of the point in progress
        self.done_ids: list = []
        self.finished = []  # stats.campaign.Finished
        self.gaps_s: list[float] = []
        self._last_end_s: float | None = None
        self._forecast = None
        # the pace: wall-clock seconds (the monitor's clock) per second of the publisher's
        # clock over the finished points, for the live display only (never in the summary)
        self._wall_first: float | None = None
        self._wall_last: float | None = None
        self._record_s = 0.0

    def start(self, meta: Mapping | None, header: Mapping | None,
              wall_s: float | None = None) -> None:
        """A point begins (``header``: its point message's, None for an implicit point;
        ``wall_s``: the monitor's clock)."""
        self.current = dict(meta or {})
        if self._wall_first is None and wall_s is not None:
            self._wall_first = float(wall_s)
        if header is not None:
            self.announced = announced_traverse(header)
        self._forecast = None

    def finish(self, line: Mapping, t0_s: float | None, wall_s: float | None = None) -> None:
        """The point in progress finished with summary ``line``; ``t0_s``: its first row's
        time on the publisher's clock (uniform sampling), for the gap before it; ``wall_s``:
        the monitor's clock."""
        from eddyvigil.stats.campaign import Finished

        need, blocks, tint = point_need(line)
        point = line.get("point") if isinstance(line.get("point"), Mapping) else {}
        self.finished.append(Finished(_position(point), need, blocks, tint))
        self.done_ids.append(point.get("id"))
        duration = line.get("duration_s")
        if _number(duration):
            self._record_s += float(duration)
        if t0_s is not None and _number(duration):
            if self._last_end_s is not None and t0_s >= self._last_end_s:
                self.gaps_s.append(float(t0_s - self._last_end_s))
                self._record_s += self.gaps_s[-1]
            self._last_end_s = float(t0_s) + float(duration)
        if wall_s is not None:
            self._wall_last = float(wall_s)
        self.current = None
        self._forecast = None

    def _to_come(self):
        """(source, positions to come after the point in progress, their limits, the point
        in progress's limit) or None when unknown."""
        if self.planned is not None:
            skip = set(self.done_ids)
            if self.current is not None:
                skip.add(self.current.get("id"))
            rows = [p for p in self.planned if p["id"] not in skip]
            return ("points file", [{a: p[a] for a in _AXES if a in p} for p in rows],
                    None, None)
        if self.announced is not None:
            rows = self.announced["remaining"]
            return ("publisher", [r["position"] for r in rows], [r["limit_s"] for r in rows],
                    self.announced["limit_s"])
        return None

    def forecast(self):
        """The :class:`~eddyvigil.stats.campaign.Forecast` as of the last start or finish
        (None: nothing is known of the points to come)."""
        from eddyvigil.stats.campaign import forecast

        if self._forecast is None:
            known = self._to_come()
            if known is None:
                return None
            source, to_come, limits, current_limit = known
            current = None
            if self.current is not None:
                current = _position(self.current)
            f = forecast(self.finished, to_come, current, gaps_s=self.gaps_s, limits_s=limits,
                         current_limit_s=current_limit, min_record_s=self.min_record_s,
                         confidence=self.confidence)
            self._forecast = (source, f)
        return self._forecast

    def pace(self) -> float | None:
        """Wall-clock seconds per second of record (gaps included) over the finished points;
        None before a point has finished."""
        if self._wall_first is None or self._wall_last is None or self._record_s <= 0:
            return None
        wall = self._wall_last - self._wall_first
        return wall / self._record_s if wall > 0 else None

    def view(self, elapsed_s: float = 0.0, live: bool = False) -> dict | None:
        """The ``campaign`` object (summary and readers) with ``elapsed_s`` of record on the
        point in progress; None when the positions to come are unknown. ``live`` adds
        ``pace`` (:meth:`pace`), which the display multiplies the times by."""
        known = self.forecast()
        if known is None:
            return None
        source, f = known
        out = f.left(elapsed_s).to_json()
        out["source"] = source
        if live:
            out["pace"] = self.pace()
        return out


def _unit(seconds: float) -> tuple[float, str]:
    if seconds < 120:
        return 1.0, "s"
    return (60.0, "min") if seconds < 7200 else (3600.0, "h")


def _in(seconds: float, div: float) -> str:
    v = seconds / div
    return f"{v:.1f}" if div == 3600.0 or (div == 60.0 and v < 10) else f"{v:.0f}"


def campaign_text(c: Mapping | None) -> str | None:
    """The one wording of a ``campaign`` object (terminal status line and dashboard), e.g.
    ``traverse: 5 of 12 points done, about 14 min left (10–19 min)``; times in wall-clock
    seconds where the object carries a ``pace`` (the record seconds times the pace).

    >>> campaign_text({"points_done": 5, "points_left": 7, "seconds_left": 840.0,
    ...                "range_s": [600.0, 1140.0], "reason": None})
    'traverse: 5 of 12 points done, about 14 min left (10–19 min)'
    """
    if not c:
        return None
    done, left = int(c.get("points_done") or 0), int(c.get("points_left") or 0)
    head = f"traverse: {done} of {done + left} points done"
    if left == 0:
        return head
    seconds, (low, high) = c.get("seconds_left"), c.get("range_s") or (None, None)
    pace = c.get("pace")
    if _number(pace) and pace > 0 and _number(seconds):
        seconds = seconds * pace
        low, high = (v * pace if _number(v) else v for v in (low, high))
    if c.get("reason") or not _number(seconds):
        return f"{head}, time left not known yet ({c.get('reason') or 'no estimate'})"
    if seconds < 1.0 and not (_number(high) and high >= 1.0):
        return f"{head}, less than 1 s left"
    ranged = _number(low) and _number(high)
    div, unit = _unit(max(seconds, high) if ranged else seconds)  # one unit for all three
    text = f"{head}, about {_in(seconds, div)} {unit} left"
    if ranged:
        text += f" ({_in(low, div)}–{_in(high, div)} {unit})"
    elif c.get("range_reason"):
        text += f" (no range yet: {c['range_reason']})"
    return text
