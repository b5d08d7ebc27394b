"""Where a command's outputs go: checks of ``--summary FILE`` and ``--record DIR`` made before
anything starts, and the short human lines shown on a terminal in place of summary JSON.

A check that fails raises :class:`OutputRefused` carrying the exit code
(:mod:`eddyvigil.monitor.exitcodes`) and one line for the user, so no command meets a
missing folder or an existing file halfway through a run.

``--summary-mode``: ``new`` (default) refuses an existing file, ``append`` adds to it,
``overwrite`` replaces it. ``--append`` (add to an existing recording) implies ``append`` for
the summary file too, as it always did.
"""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

from eddyvigil.monitor.exitcodes import ExitCode

__all__ = [
    "OutputRefused",
    "SUMMARY_MODES",
    "summary_mode",
    "check_summary_file",
    "open_summary_file",
    "check_record_dir",
    "TerminalSummary",
]

SUMMARY_MODES = ("new", "append", "overwrite")


class OutputRefused(Exception):
    """An output path that cannot be used; ``code`` is the exit code, ``str()`` the reason."""

    def __init__(self, code: int, message: str):
        super().__init__(message)
        self.code = int(code)


def summary_mode(mode: str | None, append: bool) -> str:
    """The mode in force: the one given, else ``append`` with ``--append``, else ``new``."""
    return mode if mode is not None else ("append" if append else "new")


def _existing_ancestor(path: Path) -> Path:
    p = path.absolute()
    while not p.exists() and p != p.parent:
        p = p.parent
    return p


def check_summary_file(path, mode: str) -> None:
    """Raise :class:`OutputRefused` unless a summary can be written to ``path`` in ``mode``."""
    p = Path(path)
    if mode not in SUMMARY_MODES:
        raise OutputRefused(ExitCode.USAGE, f"--summary-mode must be one of {SUMMARY_MODES}")
    if p.is_dir():
        raise OutputRefused(ExitCode.CANNOT_WRITE,
                            f"--summary {p} is a folder; give a file name inside it")
    folder = p.absolute().parent
    if not folder.exists():
        raise OutputRefused(ExitCode.CANNOT_WRITE,
                            f"--summary {p}: the folder {folder} does not exist; create it first")
    if not folder.is_dir():
        raise OutputRefused(ExitCode.CANNOT_WRITE, f"--summary {p}: {folder} is not a folder")
    if p.exists() and mode == "new":
        raise OutputRefused(
            ExitCode.OUTPUT_EXISTS,
            f"--summary {p} already exists; choose a new file, or add --summary-mode append "
            "(add to it) or --summary-mode overwrite (replace it)",
        )
    if not os.access(folder, os.W_OK) or (p.exists() and not os.access(p, os.W_OK)):
        raise OutputRefused(ExitCode.CANNOT_WRITE, f"--summary {p}: no permission to write there")


def open_summary_file(path, mode: str):
    """Open a checked summary file (text, line-flushed by the writer); ``OutputRefused`` on
    an operating-system error (a race with another program, a full or read-only disk)."""
    try:
        return open(path, "a" if mode == "append" else "w", encoding="utf-8")  # noqa: SIM115
    except OSError as exc:
        raise OutputRefused(ExitCode.CANNOT_WRITE,
                            f"--summary {path}: cannot write: {exc.strerror}") from None


def check_record_dir(path, append: bool) -> None:
    """Raise :class:`OutputRefused` unless ``--record path`` can be used (created if missing)."""
    from eddyvigil.monitor.recorder import holds_recording

    p = Path(path)
    if p.exists() and not p.is_dir():
        raise OutputRefused(ExitCode.CANNOT_WRITE,
                            f"--record {p} is a file; --record needs a folder (new or empty)")
    base = _existing_ancestor(p)
    if not base.is_dir():
        raise OutputRefused(ExitCode.CANNOT_WRITE,
                            f"--record {p}: cannot make a folder below {base}, which is a file")
    if not os.access(base, os.W_OK | os.X_OK):
        raise OutputRefused(ExitCode.CANNOT_WRITE,
                            f"--record {p}: no permission to write in {base}")
    if not append and holds_recording(p):
        raise OutputRefused(ExitCode.OUTPUT_EXISTS,
                            f"--record {p} already holds a recording; choose a new folder or "
                            "add --append to add to it")


def _count(n) -> str:
    n = float(n or 0)
    for unit, div in (("G", 1e9), ("M", 1e6), ("k", 1e3)):
        if abs(n) >= div:
            return f"{n / div:.3g}{unit}"
    return f"{n:.0f}"


class TerminalSummary:
    """A sink for :class:`~eddyvigil.monitor.summary.SummaryWriter` that shows each summary
    line as one short sentence (used when standard output is a terminal and no file keeps
    the summary; piped standard output still gets the JSON lines)."""

    def __init__(self, stream=None):
        self._stream = stream if stream is not None else sys.stdout

    def write(self, text: str) -> None:
        text = text.strip()
        if not text:
            return
        try:
            line = json.loads(text)
        except ValueError:
            return
        sentence = self.describe(line)
        if sentence:
            self._stream.write(sentence + "\n")

    def flush(self) -> None:
        self._stream.flush()

    @staticmethod
    def _budget(line: dict) -> str:
        """The budget line as a sentence: its largest production with SE, and the traverse's
        campaign ETA if known ("" when it has neither: no budget yet, no traverse known).

        >>> TerminalSummary._budget({"stream": "a", "axis": "y", "points": ["P1", "P2", "P3"],
        ...     "production": {"value": [0.1, 1.5, None], "stderr": [0.01, 0.2, None]}})
        'budget of a along y, 3 points: largest production 1.5 ± 0.2 m²/s³ at P2'
        """
        from eddyvigil.monitor.campaign import campaign_text

        campaign = campaign_text(line.get("campaign"))
        if line.get("reason") and not campaign:
            return ""  # no term yet and no traverse to tell of: nothing to say
        head = f"budget of {line.get('stream')} along {line.get('axis')}, " \
               f"{len(line.get('points') or [])} points: "
        prod = line.get("production") or {}
        rows = [(abs(v), v, se, pid) for v, se, pid in
                zip(prod.get("value") or [], prod.get("stderr") or [], line.get("points") or [],
                    strict=False) if isinstance(v, int | float)]
        tail = f"; {campaign}" if campaign else ""
        if not rows:
            return head + "no production yet" + tail
        _, v, se, pid = max(rows, key=lambda r: r[0])
        err = f" ± {se:.2g}" if isinstance(se, int | float) else " (no interval)"
        return head + f"largest production {v:.3g}{err} m²/s³ at {pid}" + tail

    @staticmethod
    def describe(line: dict) -> str:
        """One sentence for a ``point`` or ``run`` summary line.

        >>> TerminalSummary.describe({"kind": "run", "samples": 1200000, "points": 3,
        ...     "streams": ["probe-a"], "lost": 0, "rejected": {"non_finite": 2}})
        'run: 1.2M samples, 3 point(s) of 1 stream(s) (probe-a), 0 messages lost, 2 rejected'
        """
        if line.get("kind") == "budget":  # DESIGN §11
            return TerminalSummary._budget(line)
        if line.get("kind") == "run":
            rejected = sum((line.get("rejected") or {}).values())
            streams = line.get("streams") or []
            names = ", ".join(map(str, streams)) if isinstance(streams, list) else str(streams)
            return (f"run: {_count(line.get('samples'))} samples, {line.get('points')} point(s) "
                    f"of {len(streams) if isinstance(streams, list) else streams} stream(s)"
                    f"{f' ({names})' if names and isinstance(streams, list) else ''}, "
                    f"{line.get('lost')} messages lost, {rejected} rejected")
        point = (line.get("point") or {}).get("id")
        verdict = (f"converged after {line['converged_at_s']:.1f} s"
                   if line.get("converged") and line.get("converged_at_s") is not None
                   else "converged" if line.get("converged") else "not converged")
        ended = "" if line.get("complete") else " (cut short)"
        rejected = sum((line.get("rejected") or {}).values())
        rs = line.get("random_sampling") or {}  # laser-Doppler notes (DESIGN §10), said plainly
        notes = "".join(f"; {n}" for n in rs.get("notes") or [])
        weighting = f" ({line['weighting']} weighting)" if line.get("weighting") else ""
        return (f"point {point if point is not None else '-'} on {line.get('stream')}: "
                f"{_count(line.get('samples'))} samples in "
                f"{float(line.get('duration_s') or 0):.1f} s{weighting}, "
                f"{verdict}{ended}; {line.get('lost_messages', 0)} lost, {rejected} rejected"
                f"{notes}")
