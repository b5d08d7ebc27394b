"""Share the facility time left among the points still to measure (a TOML plan).

The points still to measure are the points of ``--points`` (a TOML file of ``[[points]]``
tables with ``id`` and a position, e.g. ``y``) that the summary does not hold converged, or,
without that file, the summary's points that did not converge. The time each needs to meet its
targets comes from its own record when it has one (``h^2 T / t^2`` of its slowest targeted
statistic; the time already spent counts), else from the measured points on either side along
the traverse axis (linear interpolation in position, the nearest value beyond the ends). The
time is then shared so the worst ratio of half-width to target is as small as possible
(:func:`eddyvigil.stats.planner.share_time`); README "Planning the rest of a traverse" gives
the arithmetic. The plan is written as TOML (``-o``, default standard output).
"""

from __future__ import annotations

import math
import sys
import tomllib

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail

__all__ = ["add_arguments", "run", "make_plan", "plan_toml", "read_plan_seconds"]

EPILOG = epilog("plan")

#: least time given to a point, in its integral times (an error bar needs many of them)
FLOOR_INTEGRAL_TIMES = 500.0


def add_arguments(p) -> None:
    p.add_argument("summary", metavar="SUMMARY", help="summary file (JSON lines) of the run so far")
    p.add_argument("--hours", type=float, required=True, help="facility time left (hours)")
    p.add_argument("--points", metavar="FILE", help="TOML file of the traverse's [[points]]")
    p.add_argument("--stream", help="stream (default: the one with the most points)")
    p.add_argument("--axis", choices=("x", "y", "z"), default="y", help="traverse axis")
    p.add_argument("-o", "--output", metavar="FILE", help="write the plan here (TOML)")


def _need_s(line) -> tuple[float, float, float, float]:
    """(time to meet every target counted from the start of the point, its 95 % range low and
    high, largest T_int)."""
    from eddyvigil.monitor.campaign import point_need
    from eddyvigil.stats.planner import need_range

    need, blocks, tint = point_need(line)
    low, high = need_range(need, blocks)
    return need, low, high, tint


def make_plan(lines, hours: float, wanted=None, stream=None, axis="y") -> dict:
    """The plan as a dict (see :func:`plan_toml`). ``wanted``: [{"id", axis: pos}, ...]."""
    import numpy as np

    from eddyvigil.monitor.budget_cmd import traverse
    from eddyvigil.stats.planner import predicted_ratio, share_time

    points, _ = traverse(lines, stream, axis)
    measured = {}
    for p in points:
        need, low, high, tint = _need_s(p)
        measured[p["point"].get("id")] = {"pos": float(p["point"][axis]), "need": need,
                                          "low": low, "high": high,
                                          "tint": tint, "done": float(p.get("duration_s") or 0),
                                          "converged": bool(p.get("converged"))}
    known = sorted((m["pos"], m["need"], m["tint"], m["low"], m["high"])
                   for m in measured.values() if math.isfinite(m["need"]))
    if wanted is None:
        wanted = [{"id": pid, axis: m["pos"]} for pid, m in measured.items()
                  if not m["converged"]]
    rows = []
    for w in wanted:
        pid, pos = w.get("id"), float(w[axis])
        m = measured.get(pid)
        if m is not None and m["converged"]:
            continue
        if m is not None and math.isfinite(m["need"]):
            rows.append({"id": pid, axis: pos, "need_s": m["need"], "done_s": m["done"],
                         "need_low_s": m["low"], "need_high_s": m["high"],
                         "tint_s": m["tint"], "source": "its own record"})
        elif known:
            xs = [k[0] for k in known]
            # the range spans both neighbours' ranges (the profile between them is unknown)
            right = min(int(np.searchsorted(xs, pos)), len(xs) - 1)
            left = max(right - 1, 0) if xs[right] > pos else right
            rows.append({"id": pid, axis: pos, "need_s": float(np.interp(pos, xs,
                                                                          [k[1] for k in known])),
                         "need_low_s": min(known[left][3], known[right][3]),
                         "need_high_s": max(known[left][4], known[right][4]),
                         "done_s": 0.0, "tint_s": float(np.nanmax([k[2] for k in known])),
                         "source": "interpolated from measured points"})
        else:
            raise ValueError("no measured point has a targeted statistic with an interval: "
                             "nothing to plan from")
    total = hours * 3600.0
    plan = {"hours": hours, "axis": axis, "stream": stream, "points": rows}
    if not rows:
        plan.update(enough=True, worst_ratio=0.0, seconds_to_meet_targets=0.0,
                    eta_range_s=[0.0, 0.0])
        return plan
    need = np.array([r["need_s"] for r in rows])
    done = np.array([r["done_s"] for r in rows])
    tint = np.array([r["tint_s"] if math.isfinite(r["tint_s"]) else 0.0 for r in rows])
    floor = np.maximum(FLOOR_INTEGRAL_TIMES * tint - done, 0.0)
    # a point already measured for done_s needs need - done more; the ratio depends on the total
    extra_needed = np.maximum(need - done, 0.0)
    plan["seconds_to_meet_targets"] = float(np.maximum(extra_needed, floor).sum())
    # campaign ETA: the time to meet every target, with the range of the needs
    plan["eta_range_s"] = [
        float(np.maximum(np.array([r[k] for r in rows]) - done, floor).sum())
        for k in ("need_low_s", "need_high_s")]
    try:
        # share the record lengths (done + extra) with floors of at least what is done
        totals, ratio = share_time(need, total + done.sum(), floor + done)
    except ValueError as e:
        plan.update(enough=False, worst_ratio=None, reason=str(e))
        return plan
    extra = totals - done  # >= 0: each total is at least the time already spent
    for r, e in zip(rows, extra, strict=True):
        r["seconds"] = float(e)
        r["predicted_ratio"] = float(predicted_ratio(r["need_s"], r["done_s"] + e))
    plan.update(enough=bool(ratio <= 1.0), worst_ratio=float(ratio))
    return plan


def plan_toml(plan: dict) -> str:
    """The plan in TOML: totals, then one ``[[points]]`` table per point in traverse order."""
    out = ["# eddyvigil plan: time per point so the worst half-width/target ratio is smallest",
           f"hours = {plan['hours']!r}",
           f"enough = {'true' if plan['enough'] else 'false'}",
           f"seconds_to_meet_targets = {plan['seconds_to_meet_targets']:.1f}",
           "seconds_to_meet_targets_range = ["
           + ", ".join(f"{v:.1f}" for v in plan["eta_range_s"]) + "]"]
    if plan.get("worst_ratio") is not None:
        out.append(f"worst_ratio = {plan['worst_ratio']:.4f}")
    if plan.get("reason"):
        out.append(f"reason = {_q(plan['reason'])}")
    axis = plan["axis"]
    for r in plan["points"]:
        out += ["", "[[points]]", f"id = {_q(r['id'])}", f"{axis} = {r[axis]!r}"]
        if "seconds" in r:
            out += [f"seconds = {r['seconds']:.1f}",
                    f"predicted_ratio = {r['predicted_ratio']:.4f}"]
        out += [f"seconds_to_target = {r['need_s']:.1f}",
                f"already_measured_s = {r['done_s']:.1f}", f"source = {_q(r['source'])}"]
    return "\n".join(out) + "\n"


def _duration(seconds: float) -> str:
    """``42 s``, ``12.5 min`` or ``3.20 h``."""
    if seconds < 120:
        return f"{seconds:.0f} s"
    return f"{seconds / 60:.1f} min" if seconds < 7200 else f"{seconds / 3600:.2f} h"


def read_plan_seconds(path) -> dict[str, float]:
    """Point id -> record length (s) of a plan file: ``already_measured_s + seconds`` (a
    simulation starts each point anew). Raises OSError, or ValueError with the reason."""
    with open(path, "rb") as f:
        try:
            d = tomllib.load(f)
        except tomllib.TOMLDecodeError as e:
            raise ValueError(f"not valid TOML ({e})") from None
    out = {}
    for i, p in enumerate(d.get("points") or ()):
        if not isinstance(p, dict) or "id" not in p:
            raise ValueError(f"[[points]] #{i + 1} has no id")
        total = p.get("seconds", 0.0) + p.get("already_measured_s", 0.0)
        if not isinstance(total, int | float) or not math.isfinite(total) or total <= 0:
            raise ValueError(f"[[points]] #{i + 1}: seconds must be numbers adding up to > 0")
        out[str(p["id"])] = float(total)
    return out


def _q(s) -> str:
    return '"' + str(s).replace("\\", "\\\\").replace('"', '\\"') + '"'


def _read_points(path, axis):
    from eddyvigil.monitor.campaign import read_points

    out = read_points(path)
    for i, p in enumerate(out):
        if axis not in p:
            raise ValueError(f"[[points]] #{i + 1} needs a number '{axis}'")
    return [{"id": p["id"], axis: p[axis]} for p in out]


def run(args) -> int:
    from eddyvigil.monitor.budget_cmd import read_point_lines

    if not (math.isfinite(args.hours) and args.hours > 0):
        return fail("plan", ExitCode.USAGE, "--hours must be a positive number")
    lines, counts = read_point_lines("plan", args.summary)
    if lines is None:
        return counts
    stream = args.stream if args.stream is not None else counts.most_common(1)[0][0]
    wanted = None
    if args.points:
        try:
            wanted = _read_points(args.points, args.axis)
        except OSError as e:
            return fail("plan", ExitCode.INPUT_FILE, f"cannot read {args.points}: {e.strerror}")
        except (ValueError, tomllib.TOMLDecodeError) as e:
            return fail("plan", ExitCode.INPUT_FILE, f"{args.points}: {e}")
    try:
        plan = make_plan(lines, args.hours, wanted, stream, args.axis)
    except ValueError as e:
        return fail("plan", ExitCode.INPUT_FILE, str(e))
    text = plan_toml(plan)
    if args.output:
        try:
            with open(args.output, "w", encoding="utf-8") as f:
                f.write(text)
        except OSError as e:
            return fail("plan", ExitCode.CANNOT_WRITE, f"cannot write {args.output}: {e.strerror}")
    else:
        sys.stdout.write(text)
    if plan["enough"]:
        lo, hi = plan["eta_range_s"]
        print(f"plan: {len(plan['points'])} point(s); worst ratio {plan['worst_ratio']:.2f} "
              f"(targets need {_duration(plan['seconds_to_meet_targets'])}, 95 % range "
              f"{_duration(lo)} to {_duration(hi)})", file=sys.stderr)
    else:
        reach = plan.get("worst_ratio")
        print(f"plan: {args.hours} h is not enough: the targets need "
              f"{_duration(plan['seconds_to_meet_targets'])}; "
              + (f"reachable: half-widths {reach:.2f} x target" if reach else plan.get("reason")),
              file=sys.stderr)
    return int(ExitCode.OK)
