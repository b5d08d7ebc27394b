"""Rakes and fields in the pipeline: samples with ``probes`` feed a field accumulator.

The pipeline hands every samples message that carries ``probes`` (DESIGN §13), and every
samples message of a point that already is a rake or field, to :func:`feed`; the point's
statistics are then a :class:`~eddyvigil.stats.field.FieldStatistics` (``run.field``) instead
of a ``PointStatistics``. When the point finishes, :func:`finish` writes the per-vector arrays
to an ``.npz`` file beside the summary and returns the point line's ``field`` object:
``{"file", "format": "npz", "probes", "converged_fraction", ...}``.

Choices made where DESIGN leaves room:

- The point line of a rake/field keeps the scalar fields (``samples`` = snapshots,
  ``duration_s``, counts, ``converged`` = the field verdict, ``converged_at_s``) and an empty
  ``statistics`` list: per-vector values belong in the file, not in one JSON line.
- The file is ``<summary name>.fields/<stream>-<point index>-<point id>.npz`` and ``file`` is its
  path relative to the summary's folder. Without a summary file (standard output, in-process
  use) no file is written and ``file`` is null; the line still says the converged fraction.
- The file holds, per statistic (``U``, ``V``, ``uu``, ``vv``, ``uv``, ``k``...), arrays of
  length P: ``<name>``, ``<name>_stderr``, ``<name>_ci_low``, ``<name>_ci_high``,
  ``<name>_target``, ``<name>_converged``, ``<name>_eta_s``; and ``count`` (valid samples per
  vector), ``converged`` (every target of the vector met), and the layout: ``x``, ``y``, ``z``
  and ``id`` of a rake's probes, or ``grid`` (x0, dx, nx, y0, dy, ny) of a field.
- A samples message whose ``probes``, columns or rate differ from the point's first one, or
  that differs from the P the point message announced, is rejected (``layout_changed``);
  different ``units`` as for one probe (``units_changed``).
"""

from __future__ import annotations

import math
import re
import time
from pathlib import Path
from types import MappingProxyType

import numpy as np

__all__ = ["feed", "finish", "live_line", "live_view", "field_file_path", "VIEW_INTERVAL_S"]


def feed(pipeline, st, msg) -> str | None:
    """Add a samples message to the point's field statistics; returns a rejection reason."""
    from eddyvigil.stats.field import FieldStatistics

    run = st.current if st.current is not None else pipeline._start_point(st, None)
    if msg.probes is None or (run.statistics is not None):
        return "layout_changed"  # one probe's samples on a field, or a field on one probe
    announced = run.layout_probes
    if announced is not None and msg.probes != announced:
        return "layout_changed"
    columns = msg.velocity_columns
    if run.units is not None and msg.units != run.units:
        return "units_changed"
    if run.field is None:
        run.units = msg.units
        run.columns, run.rate_hz = columns, msg.rate_hz
        run.field = FieldStatistics(columns, msg.probes, msg.rate_hz, targets=pipeline.targets,
                                    fraction=pipeline.targets.field_fraction)
    elif columns != run.columns or msg.rate_hz != run.rate_hz or msg.probes != run.field.P:
        return "layout_changed"
    run.field.update(msg.velocity, msg.valid)
    st.samples += msg.n
    st.rate_hz = msg.rate_hz
    # the control signals, as decided at the field's checkpoints (stats.field transitions)
    for _, at_s, converged in run.field.transitions[run.field_signals:]:
        run.field_signals += 1
        if converged != run.signalled:
            pipeline._signal(st, run, converged=converged, at_s=at_s)
    return None


def field_file_path(summary_path, stream: str, index: int, point_id) -> Path:
    """Where a point's per-vector arrays go, beside the summary file."""
    summary_path = Path(summary_path)
    safe = re.sub(r"[^A-Za-z0-9._-]+", "_", f"{stream}-{index}-{point_id}")
    return summary_path.parent / (summary_path.name + ".fields") / f"{safe}.npz"


#: A live view of a field is redone at most this often (s), and never more often than 20x
#: the time its snapshot took (at most 5 % of the monitor's time for a very large field).
VIEW_INTERVAL_S = 1.0


def live_view(run, now: float) -> MappingProxyType:
    """What the dashboard sees of a running rake/field: ``{"snapshot", "grid", "probes",
    "final"}``, the field snapshot redone at most every VIEW_INTERVAL_S of the clock ``now``
    (a full field analysis is costly, the dashboard is not)."""
    if run.field_view is None or now >= run.field_view_due:
        start = time.perf_counter()
        _set_view(run, run.field.snapshot(), final=False)
        cost = time.perf_counter() - start
        run.field_view_due = now + max(VIEW_INTERVAL_S, 20.0 * cost)
    return run.field_view


def _set_view(run, snap, final: bool) -> None:
    run.field_view = MappingProxyType({"snapshot": snap, "grid": run.layout_grid,
                                       "probes": run.layout_rake, "final": final})


def live_line(run, stream: str, line: dict) -> dict:
    """A running rake/field point's line (a control signal's ``summary``): the scalar fields,
    the field verdict and the ``field`` object, no file written."""
    scalars, line["field"] = finish(run, stream, None, final=False)
    line.update(scalars)
    return line


def finish(run, stream: str, summary_path, final: bool = True) -> tuple[dict, dict]:
    """``(scalar fields, field object)`` of a finished rake/field point (``final``); writes
    its file when there is a summary file."""
    snap = run.field.snapshot()
    if final:  # the point ends: readers keep its last view
        _set_view(run, snap, final=True)
    scalars = {
        "samples": int(snap.snapshots),
        "duration_s": float(snap.duration_s),
        "converged": bool(snap.field_converged),
        "converged_at_s": snap.converged_at_s,
        "verdict": snap.verdict().to_json(),
    }
    obj = {
        "file": None,
        "format": "npz",
        "probes": int(snap.probes),
        "converged_fraction": float(snap.converged_fraction),
        "fraction_required": float(snap.fraction),
        "eta_slowest_decile_s": (None if not math.isfinite(snap.eta_slowest_decile_s)
                                 else float(snap.eta_slowest_decile_s)),
        "statistics": list(snap.names),
    }
    if summary_path is None:
        return scalars, obj
    path = field_file_path(summary_path, stream, run.index, run.meta.get("id"))
    arrays = snap.arrays()
    if run.layout_rake is not None:
        arrays["id"] = np.array([str(p["id"]) for p in run.layout_rake])
        for key in ("x", "y", "z"):
            arrays[key] = np.array([float(p.get(key, math.nan)) for p in run.layout_rake])
    if run.layout_grid is not None:
        g = run.layout_grid
        arrays["grid"] = np.array([g["x0"], g["dx"], g["nx"], g["y0"], g["dy"], g["ny"]], float)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(path.name + ".part")
        with open(tmp, "wb") as f:
            np.savez(f, **arrays)
        tmp.replace(path)
    except OSError as exc:
        obj["error"] = f"cannot write the per-vector file: {exc.strerror or exc}"
        return scalars, obj
    obj["file"] = str(path.relative_to(Path(summary_path).parent))
    return scalars, obj
