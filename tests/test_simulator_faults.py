"""Faults land where their truth says, whatever the block sizes; malformed messages are
rejected by the wire decoder with the reason their truth names."""

from __future__ import annotations

import numpy as np
import pytest

from eddyvigil.monitor import wire
from eddyvigil.simulator.faults import (
    MALFORMED_KINDS,
    MessageFaults,
    SampleFaults,
    malformed_frames,
    validate_faults,
)
from eddyvigil.simulator.signals import OUGenerator

STRESS = np.diag([0.04, 0.02, 0.02])
N = 40_000
FS = 2000.0


def _clean(seed=3):
    return OUGenerator([1.0, 0.0, 0.0], STRESS, 0.01, FS, seed=seed).next_block(N)


def _apply(spec, x, blocks, seed=9):
    f = SampleFaults(spec, FS, N, np.sqrt(np.diag(STRESS)), seed)
    cuts = np.r_[
        0, np.sort(np.random.default_rng(1).choice(np.arange(1, N), blocks - 1, replace=False)), N
    ]
    out = np.concatenate([f.apply(x[a:b], a) for a, b in zip(cuts[:-1], cuts[1:], strict=True)])
    return f, out


@pytest.mark.parametrize(
    "spec",
    [
        {"spikes": {"rate_per_s": 5.0}, "dropouts": {"rate_per_s": 2.0, "duration_s": 0.05}},
        {"clipping": {"high": [1.2, 0.2, 1.0], "low": -0.25}, "quantisation": {"step": 0.01}},
        {"drift": {"rate": [0.01, 0.0, -0.002]}},
    ],
)
def test_faults_do_not_depend_on_block_sizes(spec):
    x = _clean()
    _, one = _apply(spec, x, 1)
    _, many = _apply(spec, x, 57)
    assert np.array_equal(one, many)


def test_spikes_and_dropouts_where_the_truth_says():
    x = _clean()
    spec = {
        "spikes": {"rate_per_s": 5.0, "amplitude_sigma": 8.0},
        "dropouts": {"rate_per_s": 2.0, "duration_s": 0.05},
    }
    f, y = _apply(spec, x, 13)
    truth = f.truth()
    assert len(truth["spikes"]) > 50 and len(truth["dropouts"]) > 20
    held = np.zeros(N, dtype=bool)
    for d in truth["dropouts"]:
        a, b = d["first_row"], d["stop_row"]
        assert b - a == 100  # 0.05 s at 2 kHz
        # every component holds the value of the row before the event
        assert np.array_equal(y[a:b], np.broadcast_to(y[a - 1], (b - a, 3)))
        held[a:b] = True
    spiked = np.zeros((N, 3), dtype=bool)
    for s in truth["spikes"]:
        r, c = s["row"], s["component"]
        assert y[r, c] - x[r, c] == pytest.approx(s["added"], abs=1e-12)
        assert abs(s["added"]) == pytest.approx(8.0 * np.sqrt(STRESS[c, c]))
        spiked[r, c] = True
    # nothing else changed
    untouched = ~held[:, None] & ~spiked
    assert np.array_equal(y[untouched], x[untouched])


def test_clipping_and_quantisation():
    x = _clean()
    f, y = _apply(
        {
            "clipping": {"high": [1.2, 1.0, 1.0], "low": [0.8, -1.0, -1.0]},
            "quantisation": {"step": 0.01},
        },
        x,
        7,
    )
    rows = f.clipped_rows()
    expected = np.flatnonzero((x[:, 0] > 1.2) | (x[:, 0] < 0.8))
    assert np.array_equal(np.sort(rows), expected)
    assert f.truth()["clipped_rows"] == expected.size > 0
    assert y[:, 0].max() == pytest.approx(1.2) and y[:, 0].min() == pytest.approx(0.8)
    codes = y / 0.01
    np.testing.assert_allclose(codes, np.round(codes), atol=1e-9)
    # rounding to a step q: error uniform in [-q/2, q/2] (common practice: variance q^2/12)
    inside = np.setdiff1d(np.arange(N), rows)
    err = y[inside, 1] - x[inside, 1]
    assert np.max(np.abs(err)) <= 0.005 + 1e-12
    assert np.var(err) == pytest.approx(0.01**2 / 12, rel=0.05)


def test_drift_adds_the_recorded_ramp():
    x = _clean()
    f, y = _apply({"drift": {"rate": [0.01, 0.0, -0.002]}}, x, 5)
    t = np.arange(N) / FS
    np.testing.assert_allclose(y - x, np.outer(t, [0.01, 0.0, -0.002]), atol=1e-12)
    assert f.truth()["drift_rate"] == [0.01, 0.0, -0.002]


@pytest.mark.parametrize("kind", sorted(MALFORMED_KINDS))
def test_malformed_messages_are_rejected_for_the_recorded_reason(kind):
    data = _clean()[:50]
    frames = malformed_frames(kind, "probe-a", "s1", 17, data, ("u", "v", "w"), rate_hz=FS, t0=1.5)
    got = wire.decode(frames)
    assert isinstance(got, wire.Rejection)
    assert got.reason == MALFORMED_KINDS[kind]
    if kind != "bad_json":  # the seq of an unreadable header cannot be known
        assert got.seq == 17


def test_message_loss_rate_and_validation():
    mf = MessageFaults({"loss": {"probability": 0.1}, "restart": {"at_messages": [5]}}, seed=2)
    lost = sum(mf.lose() for _ in range(20_000))
    # binomial: mean 2000, sd 42.4
    assert abs(lost - 2000) < 5 * 42.5
    assert mf.restart_due(5) and not mf.restart_due(4)
    for bad, words in [
        ({"sparks": {}}, "unknown fault"),
        ({"spikes": {"rate": 1}}, "unknown key"),
        ({"loss": {"probability": 1.5}}, r"\[0, 1\)"),
        ({"malformed": {"kinds": ["gibberish"]}}, "malformed kind"),
        ({"quantisation": {"step": 0}}, "step"),
    ]:
        with pytest.raises(ValueError, match=words):
            validate_faults(bad)
