"""The control signals of a rake or field (DESIGN §6) through a real control socket.

References: the verdict of each signal is the field accumulator's own, at its checkpoints
(stats/field.py, tested against numpy and coverage in tests/test_field.py); the error of a
mean of N independent samples is sigma / sqrt(N) (common practice), which fixes which probes
can meet an absolute target of 0.1 in the record fed here: sigma = 1 needs about 400 samples,
sigma = 20 about 160 000 (more than are sent), so with ``field_fraction = 0.5`` the rake
converges on its quiet half only; a burst of sigma = 60 on the quiet half then inflates their
error bars past the target (withdrawn). A PUB socket drops until the subscription arrives, so
the subscriber is confirmed first (common practice with ZeroMQ PUB/SUB).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import subscribed_socket, tcp_endpoint

from eddyvigil.monitor import wire
from eddyvigil.monitor.control import ControlPublisher
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.stats.field import FieldStatistics
from eddyvigil.stats.targets import Targets, TargetsError

pytestmark = pytest.mark.integration  # real sockets

RAKE = [{"id": f"R{i}", "x": 0.0, "y": 0.01 * i, "z": 0.0} for i in range(4)]
SIGMA = np.array([1.0, 1.0, 20.0, 20.0])
TARGETS = {"targets": {"U": {"absolute": 0.1}, "V": {"absolute": 0.1}}}


def _snapshots(seed: int) -> np.ndarray:
    """24 000 quiet snapshots, 24 000 with the quiet half bursting, (n, 4, 2)."""
    rng = np.random.default_rng(seed)
    quiet = rng.standard_normal((24_000, 4, 2)) * SIGMA[:, None] + [8.0, 0.2]
    burst = rng.standard_normal((24_000, 4, 2)) * np.array([60.0, 60.0, 20.0, 20.0])[:, None]
    return np.concatenate([quiet, burst + [8.0, 0.2]])


def _feed(pipe: Pipeline, x: np.ndarray, rows: int) -> None:
    seq = 0
    pipe.handle_frames(wire.encode_point("rake", "s", seq, {"id": "A"}, extra={"probes": RAKE}))
    for start in range(0, x.shape[0], rows):
        seq += 1
        frames = wire.encode_samples("rake", "s", seq, x[start:start + rows], ("u", "v"),
                                     rate_hz=1000.0, t0=start / 1000.0)
        assert pipe.handle_frames(frames) is None
    pipe.handle_frames(wire.encode_end("rake", "s", seq + 1))


def test_field_fraction_is_read_from_the_targets_file_settings():
    assert Targets.defaults().field_fraction == 1.0
    t = Targets.from_dict({**TARGETS, "field_fraction": 0.5})
    assert t.field_fraction == 0.5 and Targets.from_dict(t.to_dict()) == t
    for bad in (0, 1.5, float("nan"), "all", True):
        with pytest.raises(TargetsError, match="field_fraction"):
            Targets.from_dict({"field_fraction": bad})


def test_a_rake_signals_converged_and_withdrawn_on_the_control_socket():
    x = _snapshots(1740)
    targets = Targets.from_dict({**TARGETS, "field_fraction": 0.5})
    # the reference: the accumulator's own verdict changes at its checkpoints
    ref = FieldStatistics(("u", "v"), 4, 1000.0, targets=targets, fraction=0.5).update(x)
    assert [c for _, _, c in ref.transitions][:2] == [True, False]

    control = ControlPublisher(tcp_endpoint())
    ctx, sub = subscribed_socket(control)
    try:
        pipe = Pipeline(targets, summary=None, on_converged=control)
        _feed(pipe, x, rows=500)
        pipe.close()
        got = []
        while sub.poll(1000):
            topic, body = sub.recv_multipart()
            got.append(json.loads(body))
    finally:
        sub.close(linger=0)
        ctx.term()
        control.close()

    want = [("converged" if c else "withdrawn", at_s) for _, at_s, c in ref.transitions]
    assert [(m["kind"], m["at_s"]) for m in got] == want
    first, second = got[0], got[1]
    assert first["stream"] == "rake" and first["point"] == {"id": "A"}
    assert first["verdict"]["kind"] == "move-on"
    field = first["summary"]["field"]
    assert field["converged_fraction"] >= 0.5 and field["probes"] == 4
    assert first["summary"]["signalled_at_s"] == first["at_s"]
    assert second["converged_at_s"] == first["at_s"]
    assert second["summary"]["field"]["converged_fraction"] < 0.5
    assert second["verdict"]["kind"] == "keep-acquiring"


def test_field_signals_do_not_depend_on_how_the_snapshots_are_split():
    x = _snapshots(1741)
    targets = Targets.from_dict({**TARGETS, "field_fraction": 0.5})
    runs = []
    for rows in (500, 1733):
        seen = []
        pipe = Pipeline(targets, summary=None,
                        on_converged=lambda s, p, at, line: seen.append(("c", at)),
                        on_withdrawn=lambda s, p, at, line: seen.append(("w", at)))
        _feed(pipe, x, rows)
        pipe.close()
        runs.append(seen)
    assert runs[0] == runs[1] and runs[0][:2] and runs[0][0][0] == "c"


def test_a_stationary_rake_converges_once_and_is_not_withdrawn():
    """The simulator's rake (stationary OU per probe, known truth): once every probe meets
    the default targets, the intervals only shrink (as 1/sqrt(T), common practice), so the
    field is signalled converged once and never withdrawn over 60 s of record."""
    from eddyvigil.simulator.fields import FieldGenerator, field_scenario

    sc = field_scenario("rake")
    gen = FieldGenerator(sc, 11)
    f = FieldStatistics(("u", "v"), sc.P, sc.rate_hz)
    for _ in range(240):
        f.update(gen.block(500))
    assert [c for _, _, c in f.transitions] == [True]
    assert f.snapshot().converged_fraction == 1.0
