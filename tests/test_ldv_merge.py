"""Merging and saving points of randomly sampled (laser-Doppler) data.

References: numpy's weighted average (np.average) for the weighted moments of the union;
the slotted pair sums and arrival gaps of two independent records are those of one
accumulator fed both records with a pause longer than the slots' lag range between them
(common practice: independent records form no pair and no gap across them).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from test_weighted import poisson_ou

from eddyvigil.monitor import cli
from eddyvigil.monitor.combine import load_state, save_state
from eddyvigil.monitor.exitcodes import ExitCode
from eddyvigil.monitor.reprocess import merge_repeats
from eddyvigil.stats.monomials import layout
from eddyvigil.stats.weighted_point import WeightedPointStatistics


def _record(seed, seconds, weighting="transit", offset=0.0):
    u, t = poisson_ou(np.random.default_rng(seed), 1000.0, seconds, 10.0, 2.0, 0.01, biased=True)
    return u[:, None], t + offset, 1e-4 / np.abs(u)


def _fed(x, t, w, weighting="transit", parts=6):
    ps = WeightedPointStatistics(("u",), weighting)
    for i in np.array_split(np.arange(x.shape[0]), parts):
        ps.update(x[i], times=t[i], weights=w[i])
    return ps


def test_merge_equals_one_accumulator_over_the_concatenation_where_exact():
    xa, ta, wa = _record(1, 3.0)
    xb, tb, wb = _record(2, 2.0, offset=10.0)  # a pause of 7 s >> the 128 slots' 0.125 s
    a, b = _fed(xa, ta, wa), _fed(xb, tb, wb)
    merged = a.merge(b)
    x, t, w = np.concatenate([xa, xb]), np.concatenate([ta, tb]), np.concatenate([wa, wb])
    # weighted moments: numpy's weighted average of the union
    mean = np.average(x[:, 0], weights=w)
    assert merged.wmom.mean[0] == pytest.approx(mean, rel=1e-13)
    for p, sums in ((2, merged.wmom.s2), (3, merged.wmom.s3), (4, merged.wmom.s4)):
        assert sums[0] == pytest.approx(np.sum(w * (x[:, 0] - mean) ** p), rel=1e-9, abs=1e-9)
    assert merged.n == x.shape[0]
    assert merged.duration_s == pytest.approx(a.duration_s + b.duration_s)
    # slotted pair sums: one accumulator over both records (the pause forms no pair)
    one = _fed(x, t, w, parts=11)
    assert merged.slots.dtau == one.slots.dtau
    ref = one.slots.ref
    moved = merged.slots.sums.copy()
    d = merged.slots.ref - ref  # both about the same reference before comparing
    s0, s1, s2 = moved[..., 0], moved[..., 1], moved[..., 2]
    s3 = moved[..., 3] + d * (s1 + s2) + d * d * s0
    np.testing.assert_allclose(s0, one.slots.sums[..., 0], rtol=1e-12)
    np.testing.assert_allclose(s3, one.slots.sums[..., 3], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(merged.slots.rho(np.array([mean])), one.slots.rho(np.array([mean])),
                               rtol=1e-9, atol=1e-12)  # fmt: skip
    # arrival gaps: the union's gaps, without the one across the pause
    gaps = np.concatenate([np.diff(ta), np.diff(tb)])
    assert merged.arrivals.n_gaps == gaps.size
    assert merged.arrivals.total_s == pytest.approx(gaps.sum(), rel=1e-12)
    assert merged.arrivals.counts.sum() == gaps.size
    # time blocks: every block of both records, sums moved to one reference
    tb_ = merged.tblocks
    assert tb_.Wb[: tb_.used].sum() == pytest.approx(w.sum(), rel=1e-12)
    lay = layout(1)
    u_idx = lay.monomial_index((0,))
    first = tb_.Sb[: tb_.used, u_idx].sum()
    assert first == pytest.approx(np.sum(w * (x[:, 0] - tb_.ref[0])), rel=1e-9, abs=1e-12)
    # the merged errors rest on blocks of both records: U's interval holds both values
    e = merged.snapshot().estimate("U")
    assert e.value == pytest.approx(mean, rel=1e-12) and np.isfinite(e.stderr)
    with pytest.raises(ValueError, match="takes no more samples"):
        merged.update(xa[:5], times=ta[:5] + 100.0, weights=wa[:5])


def test_merges_refused_with_a_reason():
    xa, ta, wa = _record(3, 1.0)
    a = _fed(xa, ta, wa)
    with pytest.raises(ValueError, match="weighted differently"):
        a.merge(_fed(xa, ta, wa, weighting="none"))
    with pytest.raises(ValueError, match="independent records only"):
        a.merge(a.copy(), independent=False)
    # about twice the data rate: another slot width, said rather than merged wrongly
    u, t = poisson_ou(np.random.default_rng(4), 2000.0, 1.0, 10.0, 2.0, 0.01)
    fast = _fed(u[:, None], t, np.ones_like(u))
    with pytest.raises(ValueError, match="different data rates"):
        a.merge(fast)


def test_state_round_trip_is_bit_for_bit_and_continues_the_same(tmp_path):
    x, t, w = _record(5, 3.0)
    ps = _fed(x[:2000], t[:2000], w[:2000])
    back, point = load_state(save_state(tmp_path / "p.npz", ps, {"id": "M1"}))
    assert point == {"id": "M1"} and type(back) is WeightedPointStatistics and back == ps
    for p in (ps, back):  # the rest of the record, after the load
        p.update(x[2000:], times=t[2000:], weights=w[2000:])
    assert back == ps
    assert back.snapshot().summary_fields() == ps.snapshot().summary_fields()
    assert back.random_sampling_fields() == ps.random_sampling_fields()
    merged = ps.merge(_fed(*_record(6, 2.0)))
    again, _ = load_state(save_state(tmp_path / "m.npz", merged))
    assert again == merged and again.merged
    empty = WeightedPointStatistics(("u", "v"), "arrival")
    assert load_state(save_state(tmp_path / "e.npz", empty))[0] == empty


def test_combine_and_merge_repeats_accept_laser_doppler_points(tmp_path, capsys):
    a, b = _fed(*_record(7, 2.0)), _fed(*_record(8, 2.0))
    save_state(tmp_path / "a.npz", a, {"id": "M1"})
    save_state(tmp_path / "b.npz", b, {"id": "M1"})
    out = tmp_path / "c.jsonl"
    code = cli.main(["combine", str(tmp_path / "a.npz"), str(tmp_path / "b.npz"),
                     "--summary", str(out), "--save", str(tmp_path / "s")])  # fmt: skip
    assert code == ExitCode.OK
    line = json.loads(out.read_text())
    merged = a.merge(b)
    u = {s["name"]: s for s in line["statistics"]}["U"]
    assert line["parts"] == 2 and line["weighting"] == "transit"
    assert u["value"] == merged.snapshot().estimate("U").value
    assert line["random_sampling"] == json.loads(json.dumps(merged.random_sampling_fields()))[
        "random_sampling"
    ]
    assert load_state(tmp_path / "s" / "point-M1.npz")[0] == merged
    # --sequential makes no sense for random arrivals: refused with its exit code
    capsys.readouterr()
    code = cli.main(["combine", str(tmp_path / "a.npz"), str(tmp_path / "b.npz"), "--sequential"])
    assert code == ExitCode.CANNOT_COMBINE
    assert "independent records only" in capsys.readouterr().err
    # reprocess --merge-repeats: the same merge, the line's random-sampling fields redone
    part = {"rejected": {}, "complete": True, "session": "s", "messages": 1, "gaps": 0,
            "lost_messages": 0, "weighting": "transit", "random_sampling": {}}  # fmt: skip
    results = [{"recording": r, "states": [("lda-1", {"id": "M1"}, ps, dict(part))]}
               for r, ps in (("r1", a), ("r2", b))]  # fmt: skip
    (rep,) = merge_repeats(results)
    assert rep["parts"] == 2 and rep["random_sampling"] == merged.random_sampling_fields()[
        "random_sampling"
    ]


def test_a_point_with_no_sample_merges_as_nothing():
    # merging with an empty point leaves the values as they were (common practice)
    a = _fed(*_record(9, 1.0))
    empty = WeightedPointStatistics(("u",), "transit")
    for merged in (a.merge(empty), empty.merge(a)):
        assert merged.n == a.n and merged.merged
        assert merged.snapshot().estimate("U").value == a.snapshot().estimate("U").value
        assert merged.slots.pairs().tolist() == a.slots.pairs().tolist()
