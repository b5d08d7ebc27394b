"""Summary JSON Lines of DESIGN §4: one ``point`` line per finished point, one ``run`` line.

Every line is written whole and flushed at once, so a reader tailing the file (or a run that
is killed) never sees half a line. Non-finite numbers become ``null``: JSON has no NaN.
The field lists below are the contract; :func:`missing_fields` checks a line against them.
"""

from __future__ import annotations

import io
import json
import math
import os
from collections.abc import Iterable, Mapping
from typing import IO, Any

__all__ = [
    "BUDGET_FIELDS",
    "POINT_FIELDS",
    "POINT_SIGNAL_FIELDS",
    "RUN_FIELDS",
    "STATISTIC_FIELDS",
    "SummaryWriter",
    "dumps_line",
    "json_safe",
    "missing_fields",
]

SUMMARY_VERSION = 1

#: Fields every ``point`` line carries (DESIGN §4); extra fields may follow.
POINT_FIELDS = (
    "v",
    "kind",
    "complete",
    "stream",
    "session",
    "point",
    "samples",
    "duration_s",
    "messages",
    "gaps",
    "lost_messages",
    "rejected",
    "confidence",
    "converged",
    "converged_at_s",
    "statistics",
)
#: Fields the monitor adds to every ``point`` line beyond DESIGN §4: the point's verdict
#: (``stats.verdict.Verdict.to_json``, the same value the dashboard, the terminal status and
#: the control socket show) and the acquisition times of the last ``converged`` and
#: ``withdrawn`` control signals (null when none was sent).
POINT_SIGNAL_FIELDS = ("verdict", "signalled_at_s", "withdrawn_at_s")
#: Fields of one entry of ``statistics``.
STATISTIC_FIELDS = (
    "name",
    "value",
    "stderr",
    "ci_low",
    "ci_high",
    "target",
    "converged",
    "eta_s",
)
#: Fields of a ``budget`` line (DESIGN §11; a term is null where the traverse cannot give it).
BUDGET_FIELDS = ("v", "kind", "stream", "axis", "points", "position", "production",
                 "turbulent_transport", "dissipation", "advection", "residual", "assumptions")
#: Fields of the closing ``run`` line.
RUN_FIELDS = ("v", "kind", "samples", "messages", "lost", "rejected", "points", "streams")


def json_safe(obj: Any) -> Any:
    """A copy of ``obj`` with non-finite floats as None and numpy scalars as Python numbers.

    >>> json_safe({"a": float("nan"), "b": [1.5, float("inf")], "c": (1, 2)})
    {'a': None, 'b': [1.5, None], 'c': [1, 2]}
    """
    if isinstance(obj, bool) or obj is None or isinstance(obj, str):
        return obj
    if isinstance(obj, int):
        return int(obj)
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, Mapping):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    # numpy scalars and 0-d arrays
    item = getattr(obj, "item", None)
    if callable(item):
        return json_safe(item())
    return str(obj)


def dumps_line(obj: Mapping) -> str:
    """One JSON line (no trailing newline), strict JSON (``allow_nan=False``)."""
    return json.dumps(json_safe(obj), allow_nan=False, separators=(", ", ": "))


def missing_fields(line: Mapping) -> list[str]:
    """Contract fields absent from a summary line (an empty list means it is well formed).

    >>> missing_fields({"v": 1, "kind": "run"})
    ['samples', 'messages', 'lost', 'rejected', 'points', 'streams']
    """
    kind = line.get("kind")
    if kind == "point":
        missing = [f for f in POINT_FIELDS if f not in line]
        for i, entry in enumerate(line.get("statistics") or ()):
            missing += [f"statistics[{i}].{f}" for f in STATISTIC_FIELDS if f not in entry]
        return missing
    if kind == "run":
        return [f for f in RUN_FIELDS if f not in line]
    if kind == "budget":  # DESIGN §11
        return [f for f in BUDGET_FIELDS if f not in line]
    return ["kind"]


class SummaryWriter:
    """Writes summary lines to one or more sinks (paths or open text files).

    Parameters
    ----------
    sinks : path, text file, or an iterable of those
        A path is opened for writing (``append=True``: appending) and closed by :meth:`close`;
        an open file is written to and flushed but left open.
    append : bool
        Append to existing files instead of truncating them.
    """

    def __init__(self, sinks, *, append: bool = False):
        if sinks is None:
            sinks = ()
        elif isinstance(sinks, (str, os.PathLike, io.IOBase)) or hasattr(sinks, "write"):
            sinks = (sinks,)
        self._files: list[IO[str]] = []
        self._owned: list[IO[str]] = []
        for sink in sinks:
            if hasattr(sink, "write"):
                self._files.append(sink)
            else:
                f = open(sink, "a" if append else "w", encoding="utf-8")  # noqa: SIM115
                self._files.append(f)
                self._owned.append(f)
        self.lines_written = 0

    def write(self, line: Mapping) -> str:
        """Write and flush one line to every sink; returns the text written."""
        text = dumps_line(line)
        for f in self._files:
            f.write(text + "\n")
            f.flush()
        self.lines_written += 1
        return text

    def file_paths(self) -> list[str]:
        """Paths of the sinks that are files on disk (rakes/fields write beside the first)."""
        names = [getattr(f, "name", None) for f in self._files]
        return [n for n in names if isinstance(n, str) and os.path.isfile(n)]

    def write_all(self, lines: Iterable[Mapping]) -> None:
        for line in lines:
            self.write(line)

    def close(self) -> None:
        """Close the files this writer opened (idempotent)."""
        for f in self._owned:
            f.close()
        self._owned.clear()
        self._files.clear()
