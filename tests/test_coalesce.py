"""Joined blocks (monitor.coalesce): the grouping rule, and what it must not change.

References: population moments by numpy (DESIGN §4, divide by N; common practice); the
counts are what the test itself sent; "the grouping depends on the rows alone, not on the
pace" is checked by feeding the same messages at two paces of the clock (common practice for
a replay = live guarantee).
"""

from __future__ import annotations

import io
import json

import numpy as np
from conftest import StreamWriter

from eddyvigil.monitor.coalesce import COALESCE_MAX_ROWS, Coalescer, target_rows
from eddyvigil.monitor.pipeline import Pipeline


class FakeClock:
    def __init__(self):
        self.t = 0.0

    def __call__(self):
        return self.t


def _blocks(seed: int, sizes, dtype="<f4"):
    rng = np.random.default_rng(seed)
    return [(np.array([8.0, 0.5, -0.2]) + rng.standard_normal((n, 3))).astype(dtype)
            for n in sizes]


def _lines(buf: io.StringIO) -> list[dict]:
    return [json.loads(line) for line in buf.getvalue().splitlines()]


def test_target_rows_spans_the_stated_time_and_is_capped():
    # 0.5 s at 20 kHz is 10000 rows (arithmetic), capped at COALESCE_MAX_ROWS
    assert target_rows(20_000.0, 0.5) == 10_000
    assert target_rows(1e6, 0.5) == COALESCE_MAX_ROWS
    assert target_rows(20_000.0, 0.0) == 1  # every block alone
    assert target_rows(3.0, 0.5) == 2  # ceil(1.5)


def test_groups_keep_every_row_in_order_and_a_long_block_goes_on_uncopied():
    c = Coalescer(100)
    parts = _blocks(1, [30, 30, 50, 120, 10])
    out = []
    for b in parts:
        out.extend(c.add(b))
    out.extend(c.flush())
    assert [g.shape[0] for g in out] == [110, 120, 10]  # 30+30+50 >= 100, then 120 alone
    assert out[1] is parts[3]  # nothing pending: no copy
    np.testing.assert_array_equal(np.concatenate(out), np.concatenate(parts))
    assert c.rows == 0 and c.flush() == ()


def test_a_dtype_change_closes_the_group_without_converting():
    c = Coalescer(100)
    a, b = _blocks(2, [40], "<f4")[0], _blocks(3, [40], "<f8")[0]
    assert c.add(a) == ()
    groups = c.add(b)
    assert len(groups) == 1 and groups[0] is a and groups[0].dtype == np.float32
    assert c.rows == 40
    (rest,) = c.flush()
    assert rest is b and rest.dtype == np.float64


def _run(frames_list, *, clock_step: float, interval: float, coalesce_s: float = 0.5):
    buf = io.StringIO()
    clock = FakeClock()
    p = Pipeline(summary=buf, clock=clock, snapshot_interval_s=interval, coalesce_s=coalesce_s)
    for frames in frames_list:
        clock.t += clock_step
        p.handle_frames(frames)
        p.snapshot.streams  # a reader looks, as the dashboard does
    p.close()
    return _lines(buf)


def test_summaries_do_not_depend_on_pace_and_keep_every_sample():
    w = StreamWriter(rate_hz=20_000.0)
    sizes = [1024] * 37 + [16384, 100, 3000] + [512] * 11
    data = _blocks(4, sizes)
    msgs = [w.point("A")] + [w.samples(b) for b in data] + [w.end()]
    slow = _run(msgs, clock_step=1.0, interval=0.0)  # a reader after every message
    fast = _run(msgs, clock_step=1e-4, interval=10.0)  # replay at full speed
    assert slow == fast  # bit for bit, whatever the pace (the rows alone decide the groups)
    point = slow[0]
    x = np.concatenate(data).astype(np.float64)
    assert point["samples"] == x.shape[0]  # the rows pending at the end were fed too
    stats = {s["name"]: s for s in point["statistics"]}
    np.testing.assert_allclose(stats["U"]["value"], x[:, 0].mean(), rtol=1e-6)
    np.testing.assert_allclose(stats["uv"]["value"], np.cov(x[:, :2].T, bias=True)[0, 1],
                               rtol=1e-4)


def test_joined_and_single_blocks_agree_to_rounding():
    w = StreamWriter(rate_hz=20_000.0)
    data = _blocks(5, [1024] * 60)
    msgs = [w.point("A")] + [w.samples(b) for b in data] + [w.end()]
    joined = _run(msgs, clock_step=0.01, interval=0.25)[0]
    single = _run(msgs, clock_step=0.01, interval=0.25, coalesce_s=0.0)[0]
    assert joined["samples"] == single["samples"] == 60 * 1024
    a = {s["name"]: s["value"] for s in joined["statistics"]}
    b = {s["name"]: s["value"] for s in single["statistics"]}
    for name in ("U", "V", "W", "uu", "vv", "uv"):
        np.testing.assert_allclose(a[name], b[name], rtol=1e-9, err_msg=name)


def test_rows_wait_until_the_group_is_complete():
    w = StreamWriter(rate_hz=20_000.0)
    p = Pipeline(summary=io.StringIO(), clock=FakeClock())
    p.handle_frames(w.point("A"))
    first, second = _blocks(6, [6000, 6000])
    p.handle_frames(w.samples(first))
    run = p._streams["probe-a"].current
    assert run.statistics.n == 0 and run.rows_received == 6000  # 6000 < 10000 rows
    p.handle_frames(w.samples(second))
    assert run.statistics.n == 12_000 and run.rows_received == 12_000
    p.close()
