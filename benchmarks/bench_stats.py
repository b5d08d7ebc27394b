"""Throughput of the statistics core, measured side by side in one run.

Prints samples/s and ratios for, on the same 3-component float32 blocks of 16384 rows:

1. ``PointStatistics.update``: moments to order 4 + blocking errors for every statistic
   (including the geometric checkpoints of the stopping rule, and a final snapshot);
2. its parts alone (``MomentAccumulator``: the moments; ``BlockingAccumulator``: the one
   sweep that also feeds the error estimates), and the update without checkpoints;
3. two numpy baselines doing the same moments per block, then the same pairwise combine:
   "per combo" (a product per co-moment, as first written) and "BLAS" (degree-2 products
   once, degree 3 and 4 sums as matrix products: the fastest numpy we know);
4. recomputing the moments from the whole history with numpy at every block (what a
   notebook does), on a shorter run because it grows as N^2;

plus the cold and warm start cost of the kernels (first update in a fresh process, without
and with numba's on-disk cache) and the accumulator memory after short and long runs.
Every contender runs once per round, back to back, for ``--repeat`` rounds: rates are the best
round, ratios the median of the per-round ratios (this machine's speed drifts by +-20 % from
minute to minute, so only ratios taken within a round are fair). BLAS is limited to one
thread, so all of it is one core.

    python benchmarks/bench_stats.py [--blocks 400] [--repeat 3]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # one core, before numpy loads BLAS

import numpy as np  # noqa: E402

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from eddyvigil.stats import BlockingAccumulator, MomentAccumulator, PointStatistics  # noqa: E402
from eddyvigil.stats.monomials import layout  # noqa: E402
from eddyvigil.stats.point import DEFAULT_BASE_BLOCK  # noqa: E402

ROWS = 16384


def numpy_block_moments(x, lay):
    mean = x.mean(axis=0, dtype=np.float64)
    d = x.astype(np.float64) - mean
    out = []
    for p in (2, 3, 4):
        out.append(np.array([np.prod(d[:, list(c)], axis=1).sum() for c in lay.combos[p]]))
    return mean, out


def numpy_blas_moments(x, lay):
    """The same sums with the degree-2 products formed once and degree 3 and 4 as matrix
    products (P2^T d and P2^T P2 hold every combo, some twice)."""
    mean = x.mean(axis=0, dtype=np.float64)
    d = x.astype(np.float64) - mean
    P2 = np.empty((x.shape[0], len(lay.combos[2])))
    for q, (a, b) in enumerate(lay.combos[2]):
        np.multiply(d[:, a], d[:, b], out=P2[:, q])
    S3 = P2.T @ d
    S4 = P2.T @ P2
    s3 = np.array([S3[lay.index[c[:2]], c[2]] for c in lay.combos[3]])
    s4 = np.array([S4[lay.index[c[:2]], lay.index[c[2:]]] for c in lay.combos[4]])
    return mean, [P2.sum(axis=0), s3, s4]


def run_numpy(blocks, moments=numpy_block_moments):
    lay = layout(3)
    acc = MomentAccumulator(3)
    for b in blocks:
        mean, (s2, s3, s4) = moments(b, lay)
        acc._combine(b.shape[0], mean, s2, s3, s4)  # same combine, numpy moments
    return acc


def run_history(blocks):
    lay = layout(3)
    hist = []
    for b in blocks:
        hist.append(b)
        numpy_block_moments(np.concatenate(hist), lay)


def timed(fn, *args, repeat=1):
    best = float("inf")
    for _ in range(repeat):
        t = time.perf_counter()
        fn(*args)
        best = min(best, time.perf_counter() - t)
    return best


def start_cost(cache_dir):
    code = (
        "import time, numpy as np; t=time.perf_counter(); from eddyvigil.stats import PointStatistics;"
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
    ap.add_argument("--repeat", type=int, default=3, help="best of this many runs (default 3)")
    args = ap.parse_args()
    r = args.repeat
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

    def no_checkpoints():
        ps = PointStatistics(("u", "v", "w"), 20000.0)
        ps.checkpoints.due = lambda n: False  # the stopping rule's evaluations left out
        for b in blocks:
            ps.update(b)

    def moments_only():
        acc = MomentAccumulator(3)
        for b in blocks:
            acc.update(b)

    def blocking_only():
        acc = BlockingAccumulator(3, base=DEFAULT_BASE_BLOCK)
        for b in blocks:
            acc.update(b)

    # rounds: every contender once per round, back to back, so that the machine's drift in
    # speed (+-20 % between minutes here) touches all of them alike; ratios are per round
    contenders = {
        "ours": (ours,),
        "nochk": (no_checkpoints,),
        "mom": (moments_only,),
        "blk": (blocking_only,),
        "np": (run_numpy, blocks),
        "blas": (run_numpy, blocks, numpy_blas_moments),
    }
    rounds = [{k: timed(*fn) for k, fn in contenders.items()} for _ in range(r)]
    best = {k: min(rd[k] for rd in rounds) for k in contenders}
    t_ours, t_nochk, t_mom, t_blk = best["ours"], best["nochk"], best["mom"], best["blk"]
    t_np, t_blas = best["np"], best["blas"]

    def ratio(slow, fast):
        each = sorted(rd[slow] / rd[fast] for rd in rounds)
        return f"{float(np.median(each)):6.1f} x  (rounds {each[0]:.1f}-{each[-1]:.1f})"

    hb = blocks[: args.history_blocks]
    t_hist = timed(run_history, hb)
    rate = n / t_ours

    def line(label, seconds):
        print(f"{label:<58}{n / seconds / 1e6:8.1f} M samples/s")

    print(f"samples: {n:,} in blocks of {ROWS} rows x 3 components, float32; one core")
    line("PointStatistics.update (moments + errors + checkpoints):", t_ours)
    line("  the same without the checkpoint evaluations:", t_nochk)
    line("  MomentAccumulator alone (moments only):", t_mom)
    line("  BlockingAccumulator alone (the one sweep + levels):", t_blk)
    line("numpy per-block moments, per combo (same combine):", t_np)
    line("numpy per-block moments, BLAS (same combine):", t_blas)
    hist_rate = len(hb) * ROWS / t_hist
    print(f"numpy recompute from history ({len(hb)} blocks):   {hist_rate / 1e6:8.1f} M samples/s")
    print("ratios, median over the rounds (the numpy baselines compute the moments only):")
    print(f"  update / numpy per combo:         {ratio('np', 'ours')}")
    print(f"  update / numpy BLAS:              {ratio('blas', 'ours')}")
    print(f"  moments alone / numpy per combo:  {ratio('np', 'mom')}  like for like")
    print(f"  moments alone / numpy BLAS:       {ratio('blas', 'mom')}  like for like")
    print(f"  update / recompute-from-history ({len(hb)} blocks only): {rate / hist_rate:6.1f} x")
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
