"""The one table of exit codes shared by every ``eddyvigil`` command.

Each command lists the codes it can return in its ``--help`` (:func:`epilog`), prints one
line ``eddyvigil COMMAND: message`` on standard error for every refusal (:func:`fail`) and
never shows a Python traceback for a mistake a user can make on the command line. A new
command reuses these codes and adds its name to :data:`COMMAND_CODES`.

>>> int(ExitCode.ADDRESS_IN_USE)
6
>>> print(epilog("export").splitlines()[0])
exit codes:
"""

from __future__ import annotations

import sys
import textwrap
from enum import IntEnum

__all__ = ["ExitCode", "MEANINGS", "COMMAND_CODES", "epilog", "fail", "table_markdown"]


class ExitCode(IntEnum):
    OK = 0
    ERROR = 1
    USAGE = 2
    ENDPOINT = 3
    INPUT_FILE = 4
    OUTPUT_EXISTS = 5
    ADDRESS_IN_USE = 6
    NO_RECORDING = 7
    CANNOT_WRITE = 8
    CANNOT_COMBINE = 9
    STOPPED = 130


#: What each code means, in words a user reads in ``--help`` and the README.
MEANINGS = {
    ExitCode.OK: "finished normally",
    ExitCode.ERROR: "unexpected error (a bug: please report it with the message)",
    ExitCode.USAGE: "bad command line (unknown option, bad value, optional package missing)",
    ExitCode.ENDPOINT: "bad endpoint (malformed, port outside 1-65535, unknown host, "
    "cannot connect or bind)",
    ExitCode.INPUT_FILE: "an input file is unreadable or malformed (targets, scenario, "
    "CURVE key)",
    ExitCode.OUTPUT_EXISTS: "an output already exists: a recording in --record DIR or the "
    "--summary FILE (say --append / --summary-mode to add to it)",
    ExitCode.ADDRESS_IN_USE: "address already in use (a bound socket or the dashboard port)",
    ExitCode.NO_RECORDING: "DIR is missing or holds no recording",
    ExitCode.CANNOT_WRITE: "cannot write an output there (missing folder, a file where a "
    "folder should be, no permission)",
    ExitCode.CANNOT_COMBINE: "a saved point state is unreadable or of another format version, "
    "or the parts of one point cannot be merged (different columns, rate or base block)",
    ExitCode.STOPPED: "stopped by Ctrl-C / SIGTERM before the work was done",
}

#: The codes each command can return (its --help lists exactly these).
COMMAND_CODES = {
    "watch": (0, 1, 2, 3, 4, 5, 6, 8),
    "replay": (0, 1, 2, 3, 4, 5, 6, 7, 8),
    "export": (0, 1, 2, 7, 8),
    "simulate": (0, 1, 2, 3, 4, 6, 8, 130),
    "demo": (0, 1, 2, 4, 5, 6, 8),
    "combine": (0, 1, 2, 4, 7, 8, 9),
    "budget": (0, 1, 2, 4),
    "report": (0, 1, 2, 4, 8),
    "plan": (0, 1, 2, 4, 8),
    "reprocess": (0, 1, 2, 3, 4, 5, 7, 8, 9, 130),
    "keys": (0, 1, 2, 5, 8),
}

#: Remarks shown under a command's list where a code needs its context.
NOTES = {
    "watch": "Ctrl-C / SIGTERM ends watch normally (0): summaries are written first.",
    "replay": "Ctrl-C / SIGTERM ends replay normally (0); open points are finished "
    '"complete": false.',
    "simulate": "130: stopped before the traverse ended (its end message is still sent).",
    "demo": "Ctrl-C / SIGTERM ends the demo normally (0); a child's refusal is passed on.",
    "reprocess": "3: the --dask scheduler cannot be reached; 2 also when --dask is asked for "
    "and dask is not installed.",
    "keys": "5: a key file of that name exists in DIR (keys are never overwritten).",
}


def epilog(command: str) -> str:
    """The ``exit codes:`` block of ``command``'s ``--help``."""
    lines = ["exit codes:"]
    for code in COMMAND_CODES[command]:
        lines += textwrap.wrap(MEANINGS[ExitCode(code)], width=88,
                               initial_indent=f"  {code:<4d}", subsequent_indent=" " * 6)
    if command in NOTES:
        lines += textwrap.wrap(NOTES[command], width=88, initial_indent="  ",
                               subsequent_indent="  ")
    return "\n".join(lines) + "\n"


def table_markdown() -> str:
    """The README's table: code, meaning, the commands that use it."""
    rows = ["| code | meaning | commands |", "|---|---|---|"]
    for code in ExitCode:
        users = [c for c, codes in COMMAND_CODES.items() if int(code) in codes]
        rows.append(f"| {int(code)} | {MEANINGS[code]} | {', '.join(users)} |")
    return "\n".join(rows)


def fail(command: str, code: int, message: str) -> int:
    """Print ``eddyvigil COMMAND: message`` on standard error; return ``code``."""
    print(f"eddyvigil {command}: {message}", file=sys.stderr, flush=True)
    return int(code)
