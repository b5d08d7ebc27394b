"""Summary output on a terminal: short sentences, no JSON; a file or pipe gets the JSON lines.

The point/run lines are the pipeline's own (DESIGN §4); the samples are white noise whose
sample count is known exactly, so the sentence can be checked against it.
"""

from __future__ import annotations

import io
import json

import numpy as np

from eddyvigil.monitor.outputs import TerminalSummary
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.watch import terminal_summary_sink
from eddyvigil.stats.targets import Targets


class _Tty(io.StringIO):
    def isatty(self):
        return True


def _run_into(sink):
    pipe = Pipeline(Targets.defaults(), summary=sink)
    pipe.begin_point("probe-a", {"id": "P7"})
    rng = np.random.default_rng(3)
    for _ in range(4):
        pipe.feed("probe-a", 5.0 + rng.standard_normal((2500, 3)), rate_hz=1000.0)
    pipe.end("probe-a")
    pipe.close()


def test_a_terminal_gets_one_sentence_per_line_and_no_json(monkeypatch, capsys):
    tty = _Tty()
    monkeypatch.setattr("sys.stdout", tty)
    sink = terminal_summary_sink("watch", quiet=False)
    assert isinstance(sink, TerminalSummary)
    _run_into(sink)
    lines = tty.getvalue().splitlines()
    assert len(lines) == 2 and not any(line.lstrip().startswith("{") for line in lines)
    assert lines[0].startswith("point P7 on probe-a: 10k samples in 10.0 s")
    assert lines[1].startswith("run: 10k samples, 1 point(s) of 1 stream(s)")
    assert "summary is not kept" in capsys.readouterr().err


def test_a_pipe_gets_the_json_lines(monkeypatch):
    pipe_out = io.StringIO()  # isatty() is False, as for a file or a pipe
    monkeypatch.setattr("sys.stdout", pipe_out)
    sink = terminal_summary_sink("watch", quiet=True)
    assert sink is pipe_out
    _run_into(sink)
    kinds = [json.loads(t)["kind"] for t in pipe_out.getvalue().splitlines()]
    assert kinds == ["point", "budget", "run"]  # DESIGN §11: a budget line after each point
