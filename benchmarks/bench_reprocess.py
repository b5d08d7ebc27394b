"""``eddyvigil reprocess``: one process against a 2-worker Dask LocalCluster, in one run.

Writes a campaign of R recordings (each P points of N 3-component float32 samples, blocks of
16384 rows as a hot-wire stream sends them) to a temporary folder, then prints side by side:

- one process, the recordings one after the other (:func:`reprocess` without Dask);
- ``--dask local`` with W single-threaded worker processes, cluster start-up timed apart
  from the work (a long-lived cluster pays it once), and the work alone;
- the per-recording cost of one process, from which a cluster's time is estimated as
  start-up + ceil(R / workers) x per-recording cost (the recordings are independent, so the
  work divides; the limit is the slowest worker's share and the shared file system).

Both runs write identical summaries (checked here too). Run:
``OPENBLAS_NUM_THREADS=1 python benchmarks/bench_reprocess.py [--recordings R] [--points P]
[--samples N] [--workers W]``. The numba kernels are compiled (or loaded from cache) by a
warm-up replay before anything is timed, in this process and in every worker.
"""

from __future__ import annotations

import argparse
import math
import os
import tempfile
import time
from pathlib import Path

import numpy as np

from eddyvigil.monitor import wire
from eddyvigil.monitor.recorder import Recorder
from eddyvigil.monitor.reprocess import WORKER_ENV, reprocess, reprocess_one

ROWS = 16384


def _write_campaign(base: Path, recordings: int, points: int, samples: int) -> list[str]:
    rng = np.random.default_rng(17)
    dirs = []
    for r in range(recordings):
        d = base / f"run{r:03d}"
        seq, t = 0, 0.0
        with Recorder(d) as rec:
            for p in range(points):
                rec.write(wire.encode_point("rake", f"s{r}", seq, {"id": f"P{p}"}), t)
                seq += 1
                for k in range(0, samples, ROWS):
                    n = min(ROWS, samples - k)
                    x = (rng.standard_normal((n, 3)) + [8.0, 0.2, 0.0]).astype("<f4")
                    frames = wire.encode_samples("rake", f"s{r}", seq, x, ("u", "v", "w"),
                                                 rate_hz=20_000.0, t0=k / 20_000.0)
                    rec.write([bytes(memoryview(f).cast("B")) for f in frames], t)
                    seq += 1
                    t += n / 20_000.0
            rec.write(wire.encode_end("rake", f"s{r}", seq), t)
        dirs.append(str(d))
    return dirs


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--recordings", type=int, default=8)
    ap.add_argument("--points", type=int, default=2)
    ap.add_argument("--samples", type=int, default=2_000_000)
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args()
    for k, v in WORKER_ENV.items():
        os.environ.setdefault(k, v)
    from dask.distributed import Client, LocalCluster

    with tempfile.TemporaryDirectory() as tmp:
        dirs = _write_campaign(Path(tmp), args.recordings, args.points, args.samples)
        size = sum(f.stat().st_size for d in dirs for f in Path(d).iterdir()) / 2**20
        print(f"campaign: {args.recordings} recordings x {args.points} points x "
              f"{args.samples} samples ({size:.0f} MiB), {os.cpu_count()} CPUs")
        reprocess_one(dirs[0])  # compile / load the kernels before timing

        t0 = time.perf_counter()
        one = reprocess(dirs)
        t_one = time.perf_counter() - t0
        per = t_one / args.recordings

        t0 = time.perf_counter()
        cluster = LocalCluster(n_workers=args.workers, threads_per_worker=1, processes=True,
                               dashboard_address=None, env=dict(WORKER_ENV))
        client = Client(cluster)
        client.run(reprocess_one, dirs[0])  # every worker compiles / loads its kernels
        t_start = time.perf_counter() - t0
        try:
            t0 = time.perf_counter()
            many = client.gather(client.map(reprocess_one, dirs, pure=False))
            t_dask = time.perf_counter() - t0
        finally:
            client.close()
            cluster.close()
        assert [r["lines"] for r in many] == [r["lines"] for r in one], "summaries differ"

    print(f"{'one process':<34s} {t_one:8.2f} s   ({per:.3f} s per recording)")
    print(f"{f'dask local, {args.workers} workers (work)':<34s} {t_dask:8.2f} s   "
          f"speed-up {t_one / t_dask:.2f}x")
    print(f"{'dask local start-up + warm-up':<34s} {t_start:8.2f} s   (paid once per cluster)")
    print("estimate on a cluster of W single-core workers: start-up + ceil(R/W) x "
          f"{per:.3f} s; e.g. R=500, W=64: {math.ceil(500 / 64) * per:.1f} s of work")


if __name__ == "__main__":
    main()
