"""The k budget across a traverse, with uncertainty, from a summary file (DESIGN §11).

Reads the ``point`` lines of a summary file, keeps one stream's points at one station (the
coordinates off the traverse axis that most points share), orders them along the axis and
computes production, turbulent transport, dissipation (where the points carry ``eps``) and the
residual with :func:`eddyvigil.stats.budget.tke_budget`. The same computation makes the
``budget`` line the monitor appends to the summary whenever a point of a stream finishes
(:func:`budget_line`).

The velocity component along the traverse axis plays the part of ``v`` (x: u, y: v, z: w);
``u`` is always the streamwise component.
"""

from __future__ import annotations

import json
import math
import sys
from collections import Counter
from collections.abc import Iterable, Mapping

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail

__all__ = ["add_arguments", "run", "read_summary", "traverse", "budget_line", "budget_table",
           "budget_names", "derive_point_targets"]

EPILOG = epilog("budget")

AXES = ("x", "y", "z")
_COMPONENT = {"x": "u", "y": "v", "z": "w"}


def add_arguments(p) -> None:
    p.add_argument("summary", metavar="SUMMARY", help="summary file (JSON lines) of a run")
    p.add_argument("--stream", help="stream to use (default: the one with the most points)")
    p.add_argument("--axis", choices=AXES, default="y", help="traverse axis (default y)")
    p.add_argument("--wwv", choices=("vvv", "half"), default="vvv",
                   help="when w is not measured: <wwv> = <vvv> (default) or (<uuv>+<vvv>)/2")
    p.add_argument("--json", action="store_true", help="print the budget line as JSON")
    p.add_argument("--target", action="append", default=[], metavar="TERM=TOL",
                   help="derive per-point tolerances on the statistics feeding TERM "
                   "(production or turbulent_transport) so its half-width is TOL: a number "
                   "in m^2/s^3, or a percentage of the term's RMS across the "
                   "traverse (e.g. production=10%%); repeatable")


def read_summary(path) -> list[dict]:
    """The JSON objects of a summary file; raises OSError or ValueError (with the line number)."""
    lines = []
    with open(path, encoding="utf-8") as f:
        for number, text in enumerate(f, 1):
            if not text.strip():
                continue
            try:
                obj = json.loads(text)
            except ValueError as e:
                raise ValueError(f"line {number} is not JSON ({e.msg})") from None
            if isinstance(obj, dict):
                lines.append(obj)
    return lines


def _name(letters: str) -> str:
    """Canonical statistic name (components in u, v, w order, DESIGN §3)."""
    return "".join(sorted(letters, key="uvw".index))


def traverse(lines: Iterable[Mapping], stream: str, axis: str = "y"):
    """(point lines sorted along ``axis``, notes) of one stream at its main station.

    The latest line of a point id wins; points without a position on the axis, or at another
    station (other coordinates), or repeating a position are left out and named in the notes.
    """
    latest = _latest(lines, stream)
    notes = []
    others = [a for a in AXES if a != axis]

    coord = _coord

    placed = [ln for ln in latest.values() if coord(ln, axis) is not None]
    if len(placed) < len(latest):
        notes.append(f"{len(latest) - len(placed)} point(s) without a {axis} position left out")
    if not placed:
        return [], notes
    station = Counter(tuple(coord(ln, a) for a in others) for ln in placed).most_common(1)[0][0]
    kept = [ln for ln in placed if tuple(coord(ln, a) for a in others) == station]
    if len(kept) < len(placed):
        notes.append(f"{len(placed) - len(kept)} point(s) at another station left out "
                     f"(kept {others[0]}={station[0]}, {others[1]}={station[1]})")
    by_pos: dict = {}
    for ln in kept:  # later lines win a repeated position (within a nanometre)
        by_pos[round(coord(ln, axis), 9)] = ln
    if len(by_pos) < len(kept):
        notes.append(f"{len(kept) - len(by_pos)} repeated position(s): the later point kept")
    return [by_pos[p] for p in sorted(by_pos)], notes


def _latest(lines, stream) -> dict:
    latest: dict = {}
    for line in lines:
        if isinstance(line, Mapping) and line.get("kind") == "point" \
                and line.get("stream") == stream:
            point = line.get("point")
            pid = point.get("id") if isinstance(point, Mapping) else None
            latest[pid if pid is not None else f"#{line.get('point_index')}"] = line
    return latest


def _coord(line, a):
    point = line.get("point")
    v = point.get(a) if isinstance(point, Mapping) else None
    ok = isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)
    return float(v) if ok else None


def _streamwise(lines, stream, axis, points, notes) -> dict:
    """dU/dx and dk/dx at the main station's points from the stream's other x stations (same
    positions along the axis, same third coordinate); {} when there is no other station."""
    from eddyvigil.stats.budget import station_derivative

    if axis == "x" or not points:
        return {}
    third = next(a for a in ("y", "z") if a != axis)
    x0, c0 = _coord(points[0], "x"), _coord(points[0], third)
    pos = [_coord(p, axis) for p in points]
    stations: dict = {x0: {round(q, 9): p for q, p in zip(pos, points, strict=True)}}
    for line in _latest(lines, stream).values():
        x, q = _coord(line, "x"), _coord(line, axis)
        if x is None or q is None or x == x0 or _coord(line, third) != c0:
            continue
        stations.setdefault(x, {})[round(q, 9)] = line
    if len(stations) < 2:
        return {}
    xs = sorted(stations)
    out = {}
    for key in ("U", "k"):
        f = [[math.nan] * len(points) for _ in xs]
        se = [[math.nan] * len(points) for _ in xs]
        for i, x in enumerate(xs):
            for j, q in enumerate(pos):
                line = stations[x].get(round(q, 9))
                row = next((r for r in (line or {}).get("statistics") or ()
                            if isinstance(r, Mapping) and r.get("name") == key), None)
                if row is not None:
                    f[i][j], se[i][j] = _num(row.get("value")), _num(row.get("stderr"))
        out[key] = station_derivative(xs, f, se, xs.index(x0))
    notes.append(f"streamwise derivatives from {len(xs)} stations at x = "
                 + ", ".join(f"{x:g}" for x in xs) + " (same positions along the axis)")
    return out


def budget_names(axis: str) -> dict[str, str]:
    """tke_budget's names -> the statistics' names along ``axis`` (v = the axis component)."""
    a = _COMPONENT[axis]
    o = next(c for c in "vw" if c != a) if a != "u" else "v"
    return {"U": "U", "V": a.upper(), "uv": _name("u" + a), "uuv": _name("uu" + a),
            "vvv": a * 3, "vww": _name(a + o + o), "eps": "eps", "uu": "uu", "vv": a * 2,
            "k": "k"}


def _statistics(points: list[Mapping], axis: str) -> dict:
    """``name -> (values, stderrs)`` under the names tke_budget expects (v = axis component)."""
    wanted = budget_names(axis)
    per_point = []
    for line in points:
        table = {}
        for s in line.get("statistics") or ():
            if isinstance(s, Mapping) and "name" in s:
                table[s["name"]] = s
        per_point.append(table)
    out = {}
    doubtful = []
    missing = []
    for key, name in wanted.items():
        rows = [t.get(name) or {} for t in per_point]
        values = [_num(r.get("value")) for r in rows]
        if all(math.isnan(v) for v in values):
            continue
        out[key] = (values, [_num(r.get("stderr")) for r in rows])
        ids = [p["point"].get("id") for p in points]
        missing += [f"{i} {name}" for i, v in zip(ids, values, strict=True) if math.isnan(v)]
        doubtful += [f"{i} {name} {r.get('state')}"
                     for i, r in zip(ids, rows, strict=True) if r.get("state") in DOUBTFUL]
    if missing:
        doubtful.append("no value (terms using them are null): " + ", ".join(missing))
    return out, doubtful


#: statistic states whose error bar the budget uses but the user should know about
DOUBTFUL = ("warming-up", "suspect", "no-interval")


def _num(v) -> float:
    return float(v) if isinstance(v, int | float) and not isinstance(v, bool) else math.nan


def budget_line(stream: str, lines: Iterable[Mapping], confidence: float = 0.95,
                axis: str = "y", wwv: str = "vvv", minimum_points: int = 0,
                campaign: Mapping | None = None) -> dict | None:
    """The ``budget`` summary line of DESIGN §11 for ``stream`` (None when fewer than
    ``minimum_points`` distinct positions). ``reason``: why every term is null (fewer than
    three positions), else null. ``campaign`` (the monitor's: the traverse's ETA,
    :mod:`eddyvigil.monitor.campaign`) is added when given."""
    import numpy as np

    from eddyvigil.stats.budget import TERMS, Budget, tke_budget

    lines = list(lines)
    points, notes = traverse(lines, stream, axis)
    if len(points) < minimum_points:
        return None
    position = [float(p["point"][axis]) for p in points]
    ids = [p["point"].get("id") for p in points]
    stats, doubtful = _statistics(points, axis)
    try:
        with np.errstate(all="ignore"):  # non-finite inputs give null terms, said below
            b = tke_budget(position, stats, wwv=wwv,
                           streamwise=_streamwise(lines, stream, axis, points, notes))
    except (ValueError, ArithmeticError, np.linalg.LinAlgError) as e:
        # e.g. positions a rounding error apart: no budget rather than a crashed monitor
        b = Budget(np.asarray(position), dict.fromkeys(TERMS), (f"budget not computed: {e}",))
    if doubtful:
        notes.append("inputs to check (state): " + ", ".join(doubtful))
    out = {"v": 1, "kind": "budget", "stream": stream, "axis": axis, "points": ids,
           "position": position, "confidence": confidence}

    def term(t):
        if t is None:
            return None
        lo, hi = t.interval(confidence)
        return {"value": t.value.tolist(), "stderr": t.stderr.tolist(), "ci_low": lo.tolist(),
                "ci_high": hi.tolist(), "noise_stderr": t.noise_stderr.tolist(),
                "discretisation": t.discretisation.tolist(),
                "limiting_point": [ids[int(i)] for i in t.limiting_point]}

    for name in TERMS:
        out[name] = term(b.terms[name])
    out["pressure_lumley"] = term(b.pressure_lumley)
    out["assumptions"] = list(notes) + list(b.assumptions)
    out["reason"] = None
    if all(b.terms[t] is None for t in TERMS):
        n = len(points)
        out["reason"] = (f"{n} position{'s' * (n != 1)} along {axis}: the derivatives need at "
                         "least three" if n < 3 else next(
                             (a for a in b.assumptions if "not computed" in a),
                             "no term could be computed from these points"))
    if campaign is not None:
        out["campaign"] = dict(campaign)
    from eddyvigil.monitor.summary import json_safe

    return json_safe(out)  # non-finite numbers as null, as they are written


def _fmt(v, se) -> str:
    if v is None or not math.isfinite(v):
        return f"{'-':>19}"
    if se is None or not math.isfinite(se):
        return f"{v:>9.3g} {'(no SE)':>9}"
    return f"{v:>9.3g} ±{se:<8.2g}"


def budget_table(line: Mapping) -> str:
    """A text table of a budget line: one row per point, value ± SE of each term."""
    from eddyvigil.stats.budget import TERMS

    names = [t for t in TERMS if line.get(t) is not None]
    z = 1.959963984540054 if line.get("confidence") == 0.95 else None
    head = [f"k budget of stream {line['stream']} along {line['axis']} (m^2/s^3, value ± SE"
            + (f"; interval value ± {z:.2f} SE)" if z else ")"),
            f"{'point':<8}{line['axis'] + ' (m)':>10}  " + "".join(f"{n[:19]:>20}" for n in names)]
    rows = []
    for i, (pid, pos) in enumerate(zip(line["points"], line["position"], strict=True)):
        cells = "".join(" " + _fmt(_none(line[n]["value"][i]), _none(line[n]["stderr"][i]))
                        for n in names)
        rows.append(f"{str(pid):<8}{pos:>10.4g}  {cells}")
    missing = [t for t in TERMS if line.get(t) is None]
    tail = [f"no budget yet: {line['reason']}"] if line.get("reason") else []
    if missing and len(missing) < len(TERMS):
        tail.append("not available: " + ", ".join(missing))
    lum = line.get("pressure_lumley")
    if lum is not None:
        tail.append("cross-check, Lumley (1978) pressure transport = -0.4 x transport: "
                    + ", ".join(f"{v:.3g}" for v in map(_none, lum["value"]) if v is not None))
    tail.append("assumptions:")
    tail += [f"  - {a}" for a in line.get("assumptions", [])]
    return "\n".join(head + rows + tail)


def _none(v):
    return float(v) if isinstance(v, int | float) and math.isfinite(v) else None


def read_point_lines(command: str, path):
    """``(lines, points per stream)`` of a summary file for ``command`` (budget, plan,
    report), or ``(None, exit code)`` once it has said why the file cannot be used."""
    try:
        lines = read_summary(path)
    except OSError as e:
        return None, fail(command, ExitCode.INPUT_FILE, f"cannot read {path}: {e.strerror}")
    except ValueError as e:
        return None, fail(command, ExitCode.INPUT_FILE, f"{path}: {e}")
    counts = Counter(ln.get("stream") for ln in lines if ln.get("kind") == "point")
    if not counts:
        return None, fail(command, ExitCode.INPUT_FILE, f"{path} holds no point lines")
    return lines, counts


def run(args) -> int:
    lines, counts = read_point_lines("budget", args.summary)
    if lines is None:
        return counts
    stream = args.stream if args.stream is not None else counts.most_common(1)[0][0]
    if stream not in counts:
        return fail("budget", ExitCode.USAGE, f"no stream {stream!r} in {args.summary} "
                    f"(streams: {', '.join(map(str, counts))})")
    line = budget_line(stream, lines, _confidence(lines), args.axis, args.wwv)
    from eddyvigil.monitor.summary import dumps_line

    sys.stdout.write((dumps_line(line) if args.json else budget_table(line)) + "\n")
    for spec in args.target:
        try:
            text = tolerance_table(lines, stream, args.axis, spec, line)
        except ValueError as e:
            return fail("budget", ExitCode.USAGE, f"--target {spec}: {e}")
        sys.stdout.write(text + "\n")
    return int(ExitCode.OK)


def tolerance_table(lines, stream, axis, spec: str, line) -> str:
    """Per-point tolerances derived from ``--target TERM=TOL`` (stats.budget.derived_tolerances)
    beside each statistic's present half-width and the time it needs at that rate."""
    import numpy as np

    from eddyvigil.stats.budget import derived_tolerances
    from eddyvigil.stats.planner import seconds_to_target

    term, _, tol = spec.partition("=")
    if term not in ("production", "turbulent_transport") or not tol:
        raise ValueError("say production=TOL or turbulent_transport=TOL")
    if line.get(term) is None:
        raise ValueError(f"the summary gives no {term}")
    values = np.array([np.nan if v is None else v for v in line[term]["value"]])
    try:
        # a percentage is of the RMS across the traverse, as a [budget] relative tolerance
        h = (float(tol[:-1]) / 100 * np.sqrt(np.nanmean(values**2)) if tol.endswith("%")
             else float(tol))
    except ValueError:
        raise ValueError(f"{tol!r} is not a number or a percentage") from None
    if not (math.isfinite(h) and h > 0):
        raise ValueError("the tolerance must be positive")
    points, _ = traverse(lines, stream, axis)
    stats, _ = _statistics(points, axis)
    position = [float(p["point"][axis]) for p in points]
    with np.errstate(all="ignore"):
        tolerances, unreachable = derived_tolerances(position, stats, term, h,
                                                     float(line.get("confidence", 0.95)))
    real = budget_names(axis)
    out = [f"{term} within ±{h:.3g} m^2/s^3 at every point needs, per point, half-widths "
           "(present -> needed; 'met', or the record length that meets it at the present "
           "rate; '-' where no tolerance follows):"]
    for key, tol_arr in tolerances.items():
        name = real[key]
        cells = []
        for p, t in zip(points, tol_arr, strict=True):
            row = next((r for r in p.get("statistics") or ()
                        if isinstance(r, Mapping) and r.get("name") == name), {})
            lo, hi = _num(row.get("ci_low")), _num(row.get("ci_high"))
            hw = (hi - lo) / 2
            need = seconds_to_target(hw, _num(p.get("duration_s")), t)
            pid = p["point"].get("id")
            if not math.isfinite(t):
                cells.append(f"{pid}: -")
            elif hw <= t:
                cells.append(f"{pid}: {hw:.2g} -> {t:.2g} met")
            else:
                cells.append(f"{pid}: {hw:.2g} -> {t:.2g}"
                             + (f" ({need:.0f} s in all)" if math.isfinite(need) else ""))
        out.append(f"  {name}: " + "; ".join(cells))
    if np.any(unreachable):
        ids = [p["point"].get("id") for p, u in zip(points, unreachable, strict=True) if u]
        out.append("  not reachable by time at " + ", ".join(map(str, ids)) + ": the "
                   "discretisation estimate alone exceeds the tolerance (measure more points "
                   "there)")
    return "\n".join(out)


def derive_point_targets(targets, lines: Iterable[Mapping], stream: str, meta: Mapping):
    """The ``[budget]`` targets of the point ``meta`` of ``stream`` about to be measured, from
    the stream's finished point lines at the same station (stats.budget_targets.derive); a
    finished line of the same point id or position is this point measured before: its
    values stand for the point's own (``own``), it is not a neighbour."""
    from eddyvigil.stats.budget_targets import DerivedTargets, derive

    axis = targets.budget.axis
    pos = _coord({"point": meta}, axis)
    if pos is None:
        return DerivedTargets(targets, None, {}, (), (
            f"the point has no {axis} position: plain targets only",))
    others = [a for a in AXES if a != axis]
    station = tuple(_coord({"point": meta}, a) for a in others)
    by_pos, own_line = {}, None
    for line in _latest(lines, stream).values():
        q = _coord(line, axis)
        if q is None or tuple(_coord(line, a) for a in others) != station:
            continue
        same_id = meta.get("id") is not None and line["point"].get("id") == meta.get("id")
        if same_id or abs(q - pos) <= 1e-9:
            own_line = line
            continue
        by_pos[round(q, 9)] = line
    points = [by_pos[p] for p in sorted(by_pos)]
    names = budget_names(axis)
    stats, _ = _statistics(points, axis) if points else ({}, [])
    own = None
    if own_line is not None:
        rows = {r.get("name"): r for r in own_line.get("statistics") or ()
                if isinstance(r, Mapping)}
        own = {k: _num((rows.get(n) or {}).get("value")) for k, n in names.items()}
        own = {k: v for k, v in own.items() if math.isfinite(v)}
    position = [_coord(p, axis) for p in points]
    return derive(targets, pos, position, stats, names, own)


def _confidence(lines) -> float:
    for ln in lines:
        c = ln.get("confidence")
        if ln.get("kind") == "point" and isinstance(c, int | float) and 0 < c < 1:
            return float(c)
    return 0.95
