"""Throughput of the statistics core, measured side by side in one run.

Prints samples/s and ratios for, on the same 3-component float32 blocks of 16384 rows:

1. ``PointStatistics.update``: moments to order 4 + blocking errors for every statistic
   (including the geometric checkpoints of the stopping rule);
2. its two parts alone (``MomentAccumulator``, ``BlockingAccumulator``);
3. a numpy baseline doing the same moments per block (two-pass central products, then the
   same pairwise combine in numpy);
4. recomputing the moments from the whole history with numpy at every block (what a
   notebook does), on a shorter run because it grows as N^2;

plus the cold and warm start cost of the kernels (first update in a fresh process, without
and with numba's on-disk cache) and the accumulator memory after short and long runs.

    python benchmarks/bench_stats.py [--blocks 400]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from stats import BlockingAccumulator, MomentAccumulator, PointStatistics  # noqa: E402
from stats.monomials import layout  # noqa: E402
from stats.point import DEFAULT_BASE_BLOCK  # noqa: E402

ROWS = 16384


def numpy_block_moments(x, lay):
    mean = x.mean(axis=0, dtype=np.float64)
    d = x.astype(np.float64) - mean
    out = []
    for p in (2, 3, 4):
        out.append(np.array([np.prod(d[:, list(c)], axis=1).sum() for c in lay.combos[p]]))
    return mean, out


def run_numpy(blocks):
    lay = layout(3)
    acc = MomentAccumulator(3)
    for b in blocks:
        mean, (s2, s3, s4) = numpy_block_moments(b, lay)
        acc._combine(b.shape[0], mean, s2, s3, s4)  # same combine, numpy moments
    return acc


def run_history(blocks):
    lay = layout(3)
    hist = []
    for b in blocks:
        hist.append(b)
        numpy_block_moments(np.concatenate(hist), lay)


def timed(fn, *args):
    t = time.perf_counter()
    fn(*args)
    return time.perf_counter() - t


def start_cost(cache_dir):
    code = (
        "import time, numpy as np; t=time.perf_counter(); from stats import PointStatistics;"
        "p=PointStatistics(('u','v','w'),20000.0); p.update(np.zeros((20000,3),np.float32)+"
        "np.random.default_rng(0).normal(size=(20000,3)).astype(np.float32)); p.snapshot();"
        "print(time.perf_counter()-t)"
    )
    env = dict(os.environ, NUMBA_CACHE_DIR=cache_dir)
    root = os.path.join(os.path.dirname(__file__), "..")
    out = subprocess.run(
        [sys.executable, "-c", code], env=env, cwd=root, capture_output=True, text=True, check=True
    )
    return float(out.stdout.strip())


def state_bytes(ps):
    total = 0
    for obj in (ps.moments, ps.blocking):
        total += sum(v.nbytes for v in vars(obj).values() if isinstance(v, np.ndarray))
    return total


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--blocks", type=int, default=400, help="blocks of 16384 rows (default 400)")
    ap.add_argument("--history-blocks", type=int, default=60)
    args = ap.parse_args()
    rng = np.random.default_rng(0)
    base = (10.0 + rng.normal(size=(ROWS * 8, 3))).astype(np.float32)
    blocks = [base[(i % 8) * ROWS : (i % 8 + 1) * ROWS] for i in range(args.blocks)]
    n = args.blocks * ROWS
    # warm (compile or load) every kernel first
    PointStatistics(("u", "v", "w"), 20000.0).update(blocks[0]).snapshot()
    MomentAccumulator(3).update(blocks[0]).update(blocks[1])
    BlockingAccumulator(3).update(blocks[0])

    def ours():
        ps = PointStatistics(("u", "v", "w"), 20000.0)
        for b in blocks:
            ps.update(b)
        ps.snapshot()
        return ps

    def moments_only():
        acc = MomentAccumulator(3)
        for b in blocks:
            acc.update(b)

    def blocking_only():
        acc = BlockingAccumulator(3, base=DEFAULT_BASE_BLOCK)
        for b in blocks:
            acc.update(b)

    t_ours = timed(ours)
    t_mom = timed(moments_only)
    t_blk = timed(blocking_only)
    t_np = timed(run_numpy, blocks)
    hb = blocks[: args.history_blocks]
    t_hist = timed(run_history, hb)
    rate = n / t_ours
    print(f"samples: {n:,} in blocks of {ROWS} rows x 3 components, float32; one core")
    print(
        "PointStatistics.update (moments + blocking errors + checkpoints): "
        f"{rate / 1e6:8.1f} M samples/s"
    )
    print(f"  MomentAccumulator alone:                   {n / t_mom / 1e6:8.1f} M samples/s")
    print(f"  BlockingAccumulator alone:                 {n / t_blk / 1e6:8.1f} M samples/s")
    print(f"numpy per-block moments (same combine):      {n / t_np / 1e6:8.1f} M samples/s")
    hist_rate = len(hb) * ROWS / t_hist
    print(f"numpy recompute from history ({len(hb)} blocks):   {hist_rate / 1e6:8.1f} M samples/s")
    print(
        f"ratio ours / numpy per-block moments: {t_np / t_ours:6.1f} x "
        f"(ours also computes all blocking errors)"
    )
    print(f"ratio ours / recompute-from-history ({len(hb)} blocks only): {rate / hist_rate:6.1f} x")
    with tempfile.TemporaryDirectory() as cache:
        cold = start_cost(cache)
        warm = start_cost(cache)
    print(
        f"start: first update+snapshot in a fresh process {cold:.2f} s cold (compiling), "
        f"{warm:.2f} s warm (numba cache)"
    )
    short = PointStatistics(("u", "v", "w"), 20000.0).update(blocks[0])
    long_ = ours()
    print(
        f"accumulator state: {state_bytes(short) / 1024:.0f} KiB after {ROWS:,} samples, "
        f"{state_bytes(long_) / 1024:.0f} KiB after {n:,} samples"
    )


if __name__ == "__main__":
    main()
