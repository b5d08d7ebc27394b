"""Cost of the signal-quality checks on the monitor's ingest path, measured side by side.

    python benchmarks/bench_quality.py [--messages 200] [--rows 16384] [--repeat 5]

The `watch` path without its socket: pre-encoded samples messages (3 float32 components,
``--rows`` per message, a few spikes) through ``Pipeline.handle_frames`` (decode, quality,
every statistic, summaries) of three pipelines fed side by side, message by message (the
order rotating), so that the machine's load falls on all three alike:
  a. with the quality checks (policy flag),
  b. with the quality checks (policy exclude),
  c. with the checks replaced by a pass-through (what the path cost before them),
and, on the same blocks, ``SignalQuality.update`` alone against ``PointStatistics.update``
alone (block by block, alternating). Times are the thread's CPU time. Prints samples/s of
each and the cost of the checks as a share of the path's CPU time, (t_a - t_c) / t_c, per
round and its median. No assertions.
"""

from __future__ import annotations

import argparse
import io
import os
import statistics
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from eddyvigil.monitor import wire  # noqa: E402
from eddyvigil.monitor.pipeline import Pipeline  # noqa: E402
from eddyvigil.stats import quality  # noqa: E402
from eddyvigil.stats.point import PointStatistics  # noqa: E402


#: CPU time of this thread (the pipeline and its kernels run here): what the checks cost,
#: without the time other processes on a loaded machine take from us.
_clock = time.thread_time


class PassThrough:
    """Stands in for SignalQuality: no checks, nothing held, nothing suspect."""

    def __init__(self, columns, policy="flag", spikes=True):
        self.columns, self.policy, self.n, self.marks = tuple(columns), policy, 0, []

    def update(self, block):
        self.n += block.shape[0]
        return block

    def flush(self):
        return np.empty((0, len(self.columns)))

    def suspect_reasons(self):
        return {}

    def summary(self):
        return {"policy": self.policy}


def make_messages(count: int, rows: int) -> tuple[list, np.ndarray]:
    rng = np.random.default_rng(1)
    # AR(1) components (integral time 20 rows) about a mean, with a spike per 20000 rows
    e = rng.standard_normal((count * rows, 3))
    rho = np.exp(-1 / 20)
    x = np.empty_like(e)
    x[0] = e[0]
    for i in range(1, x.shape[0]):  # plain loop once: a few seconds at most
        x[i] = rho * x[i - 1] + np.sqrt(1 - rho**2) * e[i]
    x += np.array([8.0, 0.4, 0.0])
    spikes = rng.choice(x.shape[0], x.shape[0] // 20000, replace=False)
    x[spikes, rng.integers(0, 3, spikes.size)] += 6.0
    data = x.astype("<f4")
    msgs = [wire.encode_point("bench", "s1", 0, {"id": "B1"})]
    for k in range(count):
        block = np.ascontiguousarray(data[k * rows : (k + 1) * rows])
        frames = wire.encode_samples(
            "bench", "s1", k + 1, block, ("u", "v", "w"), rate_hz=20000.0, t0=k * rows / 2e4
        )
        msgs.append([bytes(memoryview(f)) for f in frames])
    msgs.append(wire.encode_end("bench", "s1", count + 1))
    return msgs, data


def path_times(msgs) -> dict[str, float]:
    """Seconds of handle_frames (and close) per pipeline, fed side by side."""
    original = quality.SignalQuality
    pipes = {}
    for name, policy in (("none", "flag"), ("flag", "flag"), ("exclude", "exclude")):
        pipes[name] = Pipeline(summary=io.StringIO(), quality=policy)
    spent = dict.fromkeys(pipes, 0.0)
    order = list(pipes)
    try:
        for k, frames in enumerate(msgs + [None]):
            for name in order[k % 3 :] + order[: k % 3]:
                quality.SignalQuality = PassThrough if name == "none" else original
                p = pipes[name]
                t = _clock()
                if frames is None:
                    p.close()
                else:
                    p.handle_frames(frames, 0.0)
                spent[name] += _clock() - t
    finally:
        quality.SignalQuality = original
    return spent


def core_times(data: np.ndarray, rows: int) -> tuple[float, float]:
    ps = PointStatistics(("u", "v", "w"), 20000.0)
    q = quality.SignalQuality(("u", "v", "w"))
    a = b = 0.0
    for i in range(0, data.shape[0], rows):
        t = _clock()
        ps.update(data[i : i + rows])
        a += _clock() - t
        t = _clock()
        q.update(data[i : i + rows])
        b += _clock() - t
    t = _clock()
    q.flush()
    return a, b + _clock() - t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--messages", type=int, default=200)
    ap.add_argument("--rows", type=int, default=16384)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    msgs, data = make_messages(args.messages, args.rows)
    samples = data.shape[0]  # rows of three components, as README's speed table counts
    path_times(msgs[:4])  # compile / load every kernel once
    core_times(data[: 4 * args.rows], args.rows)
    shares, shares_x = [], []
    print(f"{samples / 1e6:.2f} M samples (rows of 3) per run, {args.rows} rows per message")
    for r in range(args.repeat):
        spent = path_times(msgs)
        t_c, t_a, t_b = spent["none"], spent["flag"], spent["exclude"]
        shares.append((t_a - t_c) / t_c)
        shares_x.append((t_b - t_c) / t_c)
        print(
            f"round {r}: without checks {samples / t_c / 1e6:6.2f} M/s | flag "
            f"{samples / t_a / 1e6:6.2f} M/s ({100 * shares[-1]:+.0f} % time) | exclude "
            f"{samples / t_b / 1e6:6.2f} M/s ({100 * shares_x[-1]:+.0f} % time)"
        )
    a, b = core_times(data, args.rows)
    print(
        f"median cost of the checks: flag {100 * statistics.median(shares):+.0f} %, exclude "
        f"{100 * statistics.median(shares_x):+.0f} % of the path's time without them "
        f"(rounds: flag {100 * min(shares):+.0f} to {100 * max(shares):+.0f} %, exclude "
        f"{100 * min(shares_x):+.0f} to {100 * max(shares_x):+.0f} %)"
    )
    print(
        f"cores alone: PointStatistics.update {samples / a / 1e6:.2f} M/s, "
        f"SignalQuality.update {samples / b / 1e6:.2f} M/s (ratio of times {b / a:.2f})"
    )


if __name__ == "__main__":
    main()
