"""A 128 x 128-vector, 2-component field through the field accumulator, on one core.

Prints side by side, in one run, snapshots per second of:

- ``FieldStatistics.update`` (means, stresses and k per vector, with the blocking state that
  gives every one of them an error bar), blocks of ``--block`` snapshots as a PIV stream sends
  them (the goal is at least 1000 snapshots/s);
- a numpy baseline doing only running sums of u, v, uu, vv, uv per vector (no error bars at
  all): the floor that any accumulator of these values pays;
- the ingest kernel alone (checkpoint evaluations switched off), to show what the geometric
  checkpoints cost over a short run (their number grows only with log N);
- one ``snapshot()`` (the full analysis: level choice, intervals, verdicts, ETAs) in seconds.

Run: ``OPENBLAS_NUM_THREADS=1 NUMBA_NUM_THREADS=1 python benchmarks/bench_field.py
[--nx 128] [--ny 128] [--snapshots 4000] [--block 50]``; best of 3.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from eddyvigil.stats.field import FieldStatistics


def _numpy_sums(x, blocks):
    s = np.zeros((x.shape[1], 5))
    for b in blocks:
        u, v = b[..., 0], b[..., 1]
        s[:, 0] += u.sum(0)
        s[:, 1] += v.sum(0)
        s[:, 2] += (u * u).sum(0)
        s[:, 3] += (v * v).sum(0)
        s[:, 4] += (u * v).sum(0)
    return s


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nx", type=int, default=128)
    ap.add_argument("--ny", type=int, default=128)
    ap.add_argument("--snapshots", type=int, default=4000)
    ap.add_argument("--block", type=int, default=50)
    args = ap.parse_args()
    P = args.nx * args.ny
    rng = np.random.default_rng(5)
    x = (rng.standard_normal((args.snapshots, P, 2)) + [6.0, 0.1]).astype("<f4")
    blocks = [x[k : k + args.block] for k in range(0, args.snapshots, args.block)]
    FieldStatistics(("u", "v"), 4, 15.0).update(x[:300, :4])  # compile before timing

    best_f, best_np, best_snap, best_k = np.inf, np.inf, np.inf, np.inf
    for _ in range(3):
        f = FieldStatistics(("u", "v"), P, 15.0)
        t0 = time.perf_counter()
        for b in blocks:
            f.update(b)
        best_f = min(best_f, time.perf_counter() - t0)
        g = FieldStatistics(("u", "v"), P, 15.0)
        g.next_check = 2**62  # the ingest kernel alone: no checkpoint evaluations
        t0 = time.perf_counter()
        for b in blocks:
            g.update(b)
        best_k = min(best_k, time.perf_counter() - t0)
        t0 = time.perf_counter()
        _numpy_sums(x, blocks)
        best_np = min(best_np, time.perf_counter() - t0)
        t0 = time.perf_counter()
        f.snapshot()
        best_snap = min(best_snap, time.perf_counter() - t0)
    n = args.snapshots
    print(f"field {args.nx} x {args.ny} vectors, 2 components, {n} snapshots, "
          f"blocks of {args.block}")
    print(f"{'FieldStatistics.update':<34s} {n / best_f:10.0f} snapshots/s")
    print(f"{'  of which ingest kernel alone':<34s} {n / best_k:10.0f} snapshots/s"
          f"   (checkpoints: {best_f - best_k:.2f} s in all)")
    print(f"{'numpy running sums (no errors)':<34s} {n / best_np:10.0f} snapshots/s"
          f"   ratio {best_np / best_f:.2f}")
    print(f"{'snapshot() (full analysis)':<34s} {best_snap:10.3f} s")
    state = sum(a.nbytes for a in vars(f).values() if isinstance(a, np.ndarray)) / 2**20
    print(f"state: {state:.0f} MiB for {f.levels} levels")


if __name__ == "__main__":
    main()
