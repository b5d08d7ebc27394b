"""Write the raw samples (and summaries) of a recording to npz, HDF5 or CSV.

Every accepted record is decoded with the same wire decoder as live data; rejected records are
skipped (and counted). Samples are grouped per stream and per measurement point: a ``point``
message starts a new point; samples that arrive before any point message of their stream go to
the point ``none`` (or to the point their own header names). A point id seen twice on a stream
gets a suffix (``P03~2``). Uniformly sampled data gain a float64 ``t`` column
(``t0 + i / rate_hz``, s since session start) so that every export carries times.

Layouts (``STREAM`` and ``POINT`` reduced to letters, digits and ``._-``):

- npz: arrays ``STREAM/POINT/COLUMN``; ``STREAM/POINT/meta`` holds a JSON string (point object,
  rate, units, sessions, samples, messages); ``summary`` holds the summary JSON Lines, if any.
- h5: groups ``/STREAM/POINT`` with one dataset per column; group attributes from the point
  object and the same metadata; dataset ``/summary`` with the JSON Lines. Needs h5py.
- csv: a folder with ``STREAM/POINT.csv`` (header line of column names), ``index.json``
  describing every file, and ``summary.jsonl`` copied when present.
"""

from __future__ import annotations

import argparse
import json
import re
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from eddyvigil.monitor import wire
from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail
from eddyvigil.monitor.recorder import read_recording, recording_files

__all__ = ["add_arguments", "run", "PointData", "collect", "write_npz", "write_h5", "write_csv"]

SUMMARY_NAME = "summary.jsonl"
NO_POINT = "none"
FORMATS = ("npz", "h5", "csv")

EPILOG = epilog("export") + """
output defaults: DIR.npz, DIR.h5 or the folder DIR-csv, beside the recording.
examples:
  eddyvigil export runs/tunnel-a --to npz
  eddyvigil export runs/tunnel-a --to csv --out /tmp/tunnel-a-csv
"""


@dataclass
class PointData:
    """Samples of one stream at one measurement point, in arrival order."""

    stream: str
    point_id: str
    point: dict | None
    columns: list[str] = field(default_factory=list)
    blocks: list[dict] = field(default_factory=list)  # column -> 1-D array, per message
    rows: int = 0
    messages: int = 0
    sessions: list[str] = field(default_factory=list)
    rate_hz: float | None = None
    units: str = "m/s"
    wide: bool = False  # any <f8 message: export float64

    def add(self, msg: wire.SamplesMessage) -> None:
        block = {c: msg.data[:, i] for i, c in enumerate(msg.columns)}
        if "t" not in block and msg.rate_hz is not None:
            block["t"] = msg.t0 + np.arange(msg.n, dtype=np.float64) / msg.rate_hz
        for c in block:
            if c not in self.columns:
                self.columns.append(c)
        self.blocks.append(block)
        self.rows += msg.n
        self.messages += 1
        if msg.session not in self.sessions:
            self.sessions.append(msg.session)
        if self.rate_hz is None:
            self.rate_hz = msg.rate_hz
        self.units = msg.units
        self.wide = self.wide or msg.dtype == "<f8"

    def arrays(self) -> dict[str, np.ndarray]:
        """One array per column; a column missing from some messages is NaN there."""
        out = {}
        for c in self.columns:
            dtype = np.float64 if (c == "t" or self.wide) else np.float32
            parts = [
                b[c].astype(dtype, copy=False) if c in b else np.full(_rows(b), np.nan, dtype)
                for b in self.blocks
            ]
            out[c] = np.concatenate(parts) if parts else np.empty(0, dtype)
        return out

    def meta(self) -> dict:
        return {
            "stream": self.stream,
            "point_id": self.point_id,
            "point": self.point,
            "columns": self.columns,
            "samples": self.rows,
            "messages": self.messages,
            "sessions": self.sessions,
            "rate_hz": self.rate_hz,
            "units": self.units,
        }


def _rows(block: dict) -> int:
    return len(next(iter(block.values())))


@dataclass
class Collection:
    """What :func:`collect` found in a recording."""

    points: list[PointData]
    records: int = 0
    rejected_records: int = 0
    undecodable: int = 0
    problems: list = field(default_factory=list)
    summary_lines: list[str] = field(default_factory=list)


def collect(directory, max_message_bytes: int = wire.DEFAULT_MAX_MESSAGE_BYTES) -> Collection:
    """Decode a recording and group its samples per stream and point."""
    col = Collection(points=[])
    current: dict[str, PointData] = {}
    seen_ids: dict[tuple[str, str], int] = {}

    def start(stream: str, point: dict | None) -> PointData:
        pid = str(point["id"]) if point else NO_POINT
        k = seen_ids.get((stream, pid), 0) + 1
        seen_ids[(stream, pid)] = k
        pd = PointData(stream, pid if k == 1 else f"{pid}~{k}", point)
        col.points.append(pd)
        current[stream] = pd
        return pd

    for rec in read_recording(directory, col.problems):
        col.records += 1
        if rec.rejected_reason is not None:
            col.rejected_records += 1
            continue
        msg = wire.decode(rec.frames, max_message_bytes)
        if isinstance(msg, wire.Rejection):
            col.undecodable += 1
        elif isinstance(msg, wire.PointMessage):
            start(msg.stream, msg.point)
        elif isinstance(msg, wire.SamplesMessage):
            pd = current.get(msg.stream) or start(msg.stream, msg.point)
            pd.add(msg)
    col.points = [p for p in col.points if p.rows]
    summary = Path(directory) / SUMMARY_NAME
    if summary.is_file():
        text = summary.read_text(encoding="utf-8", errors="replace")
        col.summary_lines = [line for line in text.splitlines() if line.strip()]
    return col


_UNSAFE = re.compile(r"[^A-Za-z0-9._~-]")


def _safe(name: str) -> str:
    s = _UNSAFE.sub("_", name)
    return s if s.strip(".") else "_" + s


def write_npz(col: Collection, out: Path) -> None:
    """All groups into one ``.npz`` (uncompressed: turbulence samples hardly compress)."""
    arrays = {}
    for pd in col.points:
        prefix = f"{_safe(pd.stream)}/{_safe(pd.point_id)}"
        for c, a in pd.arrays().items():
            arrays[f"{prefix}/{_safe(c)}"] = a
        arrays[f"{prefix}/meta"] = np.array(json.dumps(pd.meta()))
    if col.summary_lines:
        arrays["summary"] = np.array(col.summary_lines)
    with open(out, "wb") as f:
        np.savez(f, **arrays)


def _h5_attr(value):
    if value is None:
        return "null"
    if isinstance(value, bool | int | float | str):
        return value
    return json.dumps(value)


def write_h5(col: Collection, out: Path, h5py) -> None:
    """Groups ``/STREAM/POINT``, a dataset per column, attributes from the point object."""
    with h5py.File(out, "w") as f:
        for pd in col.points:
            g = f.require_group(_safe(pd.stream)).create_group(_safe(pd.point_id))
            for c, a in pd.arrays().items():
                g.create_dataset(_safe(c), data=a)
            for k, v in (pd.point or {}).items():
                g.attrs[str(k)] = _h5_attr(v)
            for k, v in pd.meta().items():
                if k != "point":
                    g.attrs["export_" + k] = _h5_attr(v)
        if col.summary_lines:
            f.create_dataset("summary", data=col.summary_lines, dtype=h5py.string_dtype())


def write_csv(col: Collection, out: Path) -> None:
    """A folder: ``STREAM/POINT.csv`` per group, ``index.json``, ``summary.jsonl``."""
    out.mkdir(parents=True, exist_ok=True)
    index = []
    for pd in col.points:
        arrays = pd.arrays()
        names = list(arrays)
        rel = Path(_safe(pd.stream)) / f"{_safe(pd.point_id)}.csv"
        (out / rel.parent).mkdir(exist_ok=True)
        table = np.column_stack([arrays[c].astype(np.float64) for c in names])
        # %.17g round-trips float64 (and so float32) exactly
        np.savetxt(
            out / rel, table, fmt="%.17g", delimiter=",", header=",".join(names), comments=""
        )
        index.append({"file": rel.as_posix(), **pd.meta()})
    (out / "index.json").write_text(json.dumps(index, indent=1) + "\n", encoding="utf-8")
    if col.summary_lines:
        (out / SUMMARY_NAME).write_text("\n".join(col.summary_lines) + "\n", encoding="utf-8")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("directory", metavar="DIR", help="a recording made with --record DIR")
    parser.add_argument("--to", required=True, choices=FORMATS, help="output format")
    parser.add_argument("--out", metavar="PATH", help="output file (npz, h5) or folder (csv)")
    parser.add_argument(
        "--max-message-mb",
        type=float,
        default=wire.DEFAULT_MAX_MESSAGE_BYTES / 2**20,
        help="size limit applied when decoding (MiB, default %(default)g)",
    )


def _default_out(directory: Path, fmt: str) -> Path:
    base = directory.resolve()
    return base.with_name(base.name + ("-csv" if fmt == "csv" else f".{fmt}"))


def run(args: argparse.Namespace) -> int:
    directory = Path(args.directory)
    if not directory.is_dir():
        return fail("export", ExitCode.NO_RECORDING, f"{directory}: no such folder")
    if not recording_files(directory):
        return fail("export", ExitCode.NO_RECORDING,
                    f"{directory} holds no recording (made by watch --record)")
    if not args.max_message_mb > 0:
        return fail("export", ExitCode.USAGE, "--max-message-mb must be positive")
    h5py = None
    if args.to == "h5":
        try:
            import h5py
        except ImportError:
            return fail(
                "export",
                ExitCode.USAGE,
                "--to h5 needs h5py (pip install 'eddyvigil[h5]'); "
                "--to npz or --to csv work without it",
            )
    out = Path(args.out) if args.out else _default_out(directory, args.to)
    folder = out.absolute() if args.to == "csv" else out.absolute().parent
    base = folder
    while not base.exists() and base != base.parent:
        base = base.parent
    if args.to != "csv" and not folder.is_dir():
        return fail("export", ExitCode.CANNOT_WRITE,
                    f"--out {out}: the folder {folder} does not exist; create it first")
    if not base.is_dir() or (args.to != "csv" and out.is_dir()):
        return fail("export", ExitCode.CANNOT_WRITE,
                    f"--out {out}: "
                    + ("a folder is in the way" if out.is_dir() else f"{base} is a file"))
    col = collect(directory, int(args.max_message_mb * 2**20))
    for p in col.problems:
        print(
            f"eddyvigil export: {p.file} at byte {p.offset}: {p.kind}, {p.detail}", file=sys.stderr
        )
    try:
        if args.to == "npz":
            write_npz(col, out)
        elif args.to == "h5":
            write_h5(col, out, h5py)
        else:
            write_csv(col, out)
    except OSError as exc:
        return fail("export", ExitCode.CANNOT_WRITE, f"cannot write {out}: {exc.strerror or exc}")
    samples = sum(p.rows for p in col.points)
    streams = len({p.stream for p in col.points})
    print(
        f"exported {samples} samples at {len(col.points)} points of {streams} stream(s) to {out}"
        f" ({col.records} records: {col.rejected_records} rejected at receipt skipped,"
        f" {col.undecodable} undecodable, {len(col.problems)} damage report(s),"
        f" {len(col.summary_lines)} summary line(s))"
    )
    return ExitCode.OK
