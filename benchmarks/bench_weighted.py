"""Cost of weighted (random-sampling) moments against unweighted ones, measured side by side.

    python benchmarks/bench_weighted.py [--rows 1000000] [--block 4096] [--components 3]
                                        [--repeat 5]

On the same blocks (float64, ``--components`` components, ``--rows`` in ``--block`` rows), in
alternating rounds:
  a. ``MomentAccumulator.update`` (unweighted moments to order 4, the uniform path),
  b. ``WeightedMoments.update`` (weighted moments to order 4, Pébay merge with weights),
  c. ``WeightedMoments`` + ``TimeBlocks`` (what the weighted errors add),
  d. ``PointStatistics.update`` (uniform point, everything) and
  e. ``WeightedPointStatistics.update`` (random-sampling point, everything incl. slotting).
Prints rows/s of each and the ratios b/a, c/a, e/d (medians over rounds). No assertions.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from eddyvigil.stats.moments import MomentAccumulator  # noqa: E402
from eddyvigil.stats.point import PointStatistics  # noqa: E402
from eddyvigil.stats.weighted import TimeBlocks, WeightedMoments  # noqa: E402
from eddyvigil.stats.weighted_point import WeightedPointStatistics  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--block", type=int, default=4096)
    ap.add_argument("--components", type=int, default=3)
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args()
    m = args.components
    rng = np.random.default_rng(1)
    x = rng.normal(10.0, 1.0, size=(args.rows, m))
    t = np.cumsum(rng.exponential(1e-3, args.rows))
    w = 1e-4 / np.linalg.norm(x, axis=1)
    cuts = list(range(0, args.rows, args.block))
    cols = ("u", "v", "w")[:m]

    def run_a():
        acc = MomentAccumulator(m)
        for s in cuts:
            acc.update(x[s : s + args.block])

    def run_b():
        acc = WeightedMoments(m)
        for s in cuts:
            acc.update(x[s : s + args.block], w[s : s + args.block])

    def run_c():
        acc, tb = WeightedMoments(m), TimeBlocks(m)
        for s in cuts:
            sl = slice(s, s + args.block)
            acc.update(x[sl], w[sl])
            tb.update(x[sl], w[sl], t[sl])

    def run_d():
        ps = PointStatistics(cols, rate_hz=1000.0)
        for s in cuts:
            ps.update(x[s : s + args.block])

    def run_e():
        ps = WeightedPointStatistics(cols, "transit")
        for s in cuts:
            sl = slice(s, s + args.block)
            ps.update(x[sl], times=t[sl], weights=w[sl])

    runs = {"a": run_a, "b": run_b, "c": run_c, "d": run_d, "e": run_e}
    for f in runs.values():  # compile and warm
        f()
    times = {k: [] for k in runs}
    for _ in range(args.repeat):
        for k, f in runs.items():
            t0 = time.perf_counter()
            f()
            times[k].append(time.perf_counter() - t0)
    med = {k: statistics.median(v) for k, v in times.items()}
    names = {
        "a": "MomentAccumulator.update (unweighted)",
        "b": "WeightedMoments.update",
        "c": "WeightedMoments + TimeBlocks",
        "d": "PointStatistics.update (uniform)",
        "e": "WeightedPointStatistics.update",
    }
    print(f"{args.rows} rows x {m} components, blocks of {args.block}, median of {args.repeat}")
    for k, name in names.items():
        print(f"  {k}. {name:42s} {args.rows / med[k] / 1e6:8.2f} M rows/s")
    print(f"  weighted / unweighted moments (b/a): {med['b'] / med['a']:.2f}")
    print(f"  with time blocks (c/a):              {med['c'] / med['a']:.2f}")
    print(f"  weighted / uniform point (e/d):      {med['e'] / med['d']:.2f}")


if __name__ == "__main__":
    main()
