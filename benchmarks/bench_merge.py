"""Merging saved points against rebuilding them from samples, in one run.

For R repeats of one 3-component point (N samples each, float32 blocks of 16384 rows as a
hot-wire stream sends them), prints side by side:

- building each repeat from its samples (``PointStatistics.update``), the cost a replay pays;
- merging the R built points (``PointStatistics.merge``: re-centring to a common reference,
  independent join, one checkpoint evaluation), the cost ``eddyvigil combine`` adds;
- ``save_state`` + ``load_state`` of one point, and the state file's size against the samples'.

Run: ``OPENBLAS_NUM_THREADS=1 python benchmarks/bench_merge.py [--repeats R] [--samples N]
[--repeat K]``; the best of K runs is reported.
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from eddyvigil.monitor.combine import load_state, save_state
from eddyvigil.stats import PointStatistics

ROWS = 16384


def _build(x: np.ndarray) -> PointStatistics:
    ps = PointStatistics(("u", "v", "w"), rate_hz=20_000.0)
    for k in range(0, x.shape[0], ROWS):
        ps.update(x[k : k + ROWS])
    return ps


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=4)
    ap.add_argument("--samples", type=int, default=2**20)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    rng = np.random.default_rng(7)
    data = [
        rng.normal([8.0, 0.3, 0.0], [0.8, 0.5, 0.5], size=(args.samples, 3)).astype(np.float32)
        for _ in range(args.repeats)
    ]
    _build(data[0][: 4 * ROWS]).merge(_build(data[1][: 4 * ROWS]))  # compile outside timing
    best = {"build": np.inf, "merge": np.inf, "save+load": np.inf}
    size = 0
    for _ in range(args.repeat):
        t = time.perf_counter()
        points = [_build(x) for x in data]
        best["build"] = min(best["build"], time.perf_counter() - t)
        t = time.perf_counter()
        merged = points[0]
        for p in points[1:]:
            merged = merged.merge(p)
        best["merge"] = min(best["merge"], time.perf_counter() - t)
        with tempfile.TemporaryDirectory() as d:
            path = Path(d) / "p.npz"
            t = time.perf_counter()
            save_state(path, points[0], {"id": "A"})
            load_state(path)
            best["save+load"] = min(best["save+load"], time.perf_counter() - t)
            size = os.path.getsize(path)
    total = args.repeats * args.samples
    print(f"{args.repeats} repeats x {args.samples} samples x 3 components (best of {args.repeat})")
    rate = total / best["build"] / 1e6
    print(f"  build from samples:      {best['build'] * 1e3:9.1f} ms ({rate:.1f} M samples/s)")
    print(
        f"  merge the built points:  {best['merge'] * 1e3:9.1f} ms "
        f"({best['build'] / best['merge']:.0f}x less than building)"
    )
    print(f"  save + load one state:   {best['save+load'] * 1e3:9.1f} ms")
    print(
        f"  state file:              {size / 1024:9.1f} KiB "
        f"(samples of one repeat as float32: {args.samples * 12 / 1024:.0f} KiB)"
    )


if __name__ == "__main__":
    main()
