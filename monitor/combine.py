"""Merge the statistics of one point measured more than once; save and load a point's state.

``eddyvigil combine INPUT...`` takes saved point states (``.npz`` files written by
:func:`save_state` or by ``combine --save``) and recording directories (made by ``watch
--record``; every point of a recording is rebuilt through the same decode -> accumulate path as
``replay``), groups the points by their id, merges each group exactly
(:meth:`eddyvigil.stats.point.PointStatistics.merge`: values as if one record, errors for
independent records joined without a lag pair across the joins) and writes one JSON line per
point: ``{"v": 1, "kind": "combined", "point": {...}, "parts": N, "sources": [...], ...}``
followed by the fields of a summary point line's statistics part (DESIGN §4). ``--save DIR``
writes each merged point's state, which a later ``combine`` can extend.

Points of randomly sampled (laser-Doppler) data merge too, as independent records
(:meth:`eddyvigil.stats.weighted_point.WeightedPointStatistics.merge`; ``--sequential`` is
refused for them), and their lines carry ``weighting`` and ``random_sampling`` (DESIGN §10).

A summary line cannot be an input: it holds values and error bars, not the sums they came
from, and error bars do not merge exactly.

State file format (open, versioned): a NumPy ``.npz`` archive (a zip of ``.npy`` arrays, read
with ``numpy.load(path, allow_pickle=False)``) holding the arrays of
:func:`eddyvigil.stats.pointstate.to_state` under their names and one more entry, ``meta.json``,
a string with the JSON settings (``format``, ``version``, columns, rate, targets, counters,
checkpoint streaks, and here ``point``, the point message of DESIGN §2 when known).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import zipfile
from pathlib import Path

import numpy as np

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail
from eddyvigil.monitor.watch import SETTINGS_FILE

__all__ = ["add_arguments", "run", "save_state", "load_state", "combine_points", "EPILOG"]

EPILOG = epilog("combine") + """
examples:
  eddyvigil combine run1/ run2/ run3/ --summary repeats.jsonl --save states/
  eddyvigil combine states/point-A.npz run4/ --point A
"""

META = "meta.json"


class CombineError(Exception):
    """An input that cannot be used; the message is meant for the user."""


def save_state(path, ps, point: dict | None = None) -> Path:
    """Write a point's state to ``path`` (an ``.npz`` archive; replaced atomically)."""
    from eddyvigil.stats.pointstate import to_state

    meta, arrays = to_state(ps)
    meta["point"] = None if point is None else dict(point)
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    with open(tmp, "wb") as f:
        np.savez(f, **arrays, **{META: np.array(json.dumps(meta))})
    os.replace(tmp, path)
    return path


def load_state(path):
    """``(PointStatistics, point)`` from a file written by :func:`save_state`."""
    from eddyvigil.stats.pointstate import StateError, from_state

    try:
        with np.load(path, allow_pickle=False) as z:
            if META not in z.files:
                raise CombineError(f"{path}: not an eddyvigil point state (no {META})")
            meta = json.loads(str(z[META]))
            arrays = {k: z[k] for k in z.files if k != META}
    except (OSError, ValueError, zipfile.BadZipFile) as exc:
        raise CombineError(f"{path}: cannot read a point state ({exc})") from None
    try:
        ps = from_state(meta, arrays)
    except StateError as exc:
        raise CombineError(f"{path}: {exc}") from None
    return ps, meta.get("point")


def points_of_recording(directory, targets=None) -> list[tuple[dict, object]]:
    """``[(point, PointStatistics)]`` of every point of a recording, as ``replay`` builds them.

    The frames go through :class:`~eddyvigil.monitor.pipeline.Pipeline` exactly as in a replay
    (targets from the recording's settings unless ``targets`` is given); each point's
    statistics are kept when the pipeline finishes it.
    """
    from eddyvigil.monitor.pipeline import Pipeline
    from eddyvigil.monitor.recorder import holds_recording
    from eddyvigil.monitor.replay import load_settings, replay_into
    from eddyvigil.stats.targets import Targets

    directory = Path(directory)
    if not holds_recording(directory):
        raise FileNotFoundError(f"{directory} holds no recording (made by watch --record)")
    settings = load_settings(directory)
    if targets is None:
        if "targets" in settings:
            source = str(directory / SETTINGS_FILE)
            targets = Targets.from_dict(settings["targets"], source=source)
        else:
            targets = Targets.defaults()
    kept: list[tuple[dict, object]] = []

    class _Keeping(Pipeline):
        # keeps each point's statistics when the pipeline finishes the point
        def _finish_point(self, st, complete):
            point_run = st.current  # monitor.point_run.PointRun
            statistics = point_run.statistics if point_run is not None else None
            if statistics is not None and statistics.n:
                kept.append((dict(point_run.meta), statistics))
            super()._finish_point(st, complete)

    kwargs = {}
    if "max_message_bytes" in settings:
        kwargs["max_message_bytes"] = int(settings["max_message_bytes"])
    pipeline = _Keeping(targets, summary=[], **kwargs)
    replay_into(pipeline, directory)
    pipeline.close()
    return kept


def _key(point: dict | None) -> str:
    pid = None if point is None else point.get("id")
    return "null" if pid is None else str(pid)


def combine_points(parts, sequential: bool = False) -> dict[str, tuple[dict | None, object, int]]:
    """Merge ``parts`` (``[(point, PointStatistics)]``) by point id, in the order given.

    Returns ``{id: (point, merged PointStatistics, number of parts)}``. ``sequential``: the
    parts are pieces of one record in time order (a lag pair links each join).
    """
    out: dict[str, tuple[dict | None, object, int]] = {}
    for point, ps in parts:
        k = _key(point)
        if k not in out:
            out[k] = (point, ps.copy(), 1)
            continue
        first, acc, count = out[k]
        try:
            merged = acc.merge(ps, independent=not sequential)
        except ValueError as exc:
            raise CombineError(f"point {k}: {exc}") from None
        out[k] = (first, merged, count + 1)
    return out


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "inputs",
        nargs="+",
        metavar="INPUT",
        help="saved point states (.npz) and recording directories (watch --record)",
    )
    p.add_argument("--point", metavar="ID", help="combine only the point with this id")
    p.add_argument(
        "--summary", metavar="FILE", help="write the combined lines to FILE (default: stdout)"
    )
    p.add_argument(
        "--save", metavar="DIR", help="write each combined point's state to DIR/point-ID.npz"
    )
    p.add_argument("--targets", metavar="FILE", help="targets file for the inputs' verdicts (TOML)")
    p.add_argument(
        "--sequential",
        action="store_true",
        help="the inputs are consecutive pieces of one record, not independent repeats",
    )


def _fail(code: int, message: str) -> int:
    return fail("combine", code, message)


def run(args: argparse.Namespace) -> int:
    from eddyvigil.monitor.summary import dumps_line
    from eddyvigil.stats.targets import Targets, TargetsError

    targets = None
    if args.targets:
        try:
            targets = Targets.from_toml(args.targets)
        except TargetsError as exc:
            return _fail(ExitCode.INPUT_FILE, str(exc))
    parts: list[tuple[dict | None, object]] = []
    sources: dict[str, list[str]] = {}
    try:
        for text in args.inputs:
            path = Path(text)
            if path.is_dir():
                found = points_of_recording(path, targets)
            elif path.is_file():
                found = [load_state(path)[::-1]]
            else:
                return _fail(ExitCode.USAGE, f"{path}: no such file or directory")
            for point, ps in found:
                if args.point is not None and _key(point) != args.point:
                    continue
                parts.append((point, ps))
                sources.setdefault(_key(point), []).append(str(path))
        combined = combine_points(parts, sequential=args.sequential)
    except FileNotFoundError as exc:
        return _fail(ExitCode.NO_RECORDING, str(exc))
    except TargetsError as exc:
        return _fail(ExitCode.INPUT_FILE, str(exc))
    except CombineError as exc:
        return _fail(ExitCode.CANNOT_COMBINE, str(exc))
    if not combined:
        return _fail(ExitCode.USAGE, "no point found in the inputs")
    lines = []
    for k, (point, ps, count) in combined.items():
        line = {
            "v": 1,
            "kind": "combined",
            "point": point if point is not None else {"id": None},
            "parts": count,
            "sources": sources[k],
            "independent": not args.sequential,
            "columns": list(ps.columns),
            "rate_hz": ps.rate_hz,
        }
        line.update(ps.snapshot().summary_fields())
        if hasattr(ps, "random_sampling_fields"):  # laser-Doppler points (DESIGN §10)
            line.update(ps.random_sampling_fields())
        line["statistics"] = line.pop("statistics")
        lines.append(dumps_line(line))
        if args.save:
            try:
                Path(args.save).mkdir(parents=True, exist_ok=True)
                save_state(Path(args.save) / f"point-{k}.npz", ps, point)
            except OSError as exc:
                return _fail(ExitCode.CANNOT_WRITE, f"cannot save to {args.save}: {exc.strerror}")
    text = "\n".join(lines) + "\n"
    if args.summary:
        try:
            Path(args.summary).write_text(text, encoding="utf-8")
        except OSError as exc:
            return _fail(ExitCode.CANNOT_WRITE, f"cannot write {args.summary}: {exc.strerror}")
    else:
        sys.stdout.write(text)
    return ExitCode.OK
