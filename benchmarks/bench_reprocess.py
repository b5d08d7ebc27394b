"""``eddyvigil reprocess``: one process against a Dask LocalCluster, in interleaved rounds.

Writes a campaign of R recordings, each of P points of S seconds of 3-component float32 samples
at 20 kHz (a hot-wire traverse: by default 8 recordings x 2 points x 30 s, 1.2 M samples and
14 MiB per recording), sent in messages of ``--rows`` rows, to a temporary folder; then, in
``--repeat`` rounds whose order alternates (so drifting machine load favours neither):

- one process, the recordings one after the other (:func:`reprocess` without Dask);
- a LocalCluster (:func:`~eddyvigil.monitor.reprocess.local_cluster`: W single-threaded worker
  processes) started once before the rounds, its start-up and kernel loading timed apart (a
  long-lived cluster pays them once); each worker reads its recordings from their path, and
  only the summary lines travel back.

Every round checks that both give the same summary lines, bit for bit. Printed: each round's
times and speed-up, their range and median, and the per-recording cost of one process, from
which a cluster's time is estimated as start-up + ceil(R / W) x per-recording cost (the
recordings are independent, so the work divides; the limits are the slowest worker's share
and the shared file system, which must deliver a recording's bytes within that cost). Besides
wall time, the CPU seconds of one process against those of the busiest worker (robust to
other programs' load). The workers are moved to sessions of their own (``os.setsid``), as
separately started worker programs are: with Linux's autogroup scheduling a busy machine
shares its CPUs between sessions, and workers left in the benchmark's session would share
one session's part (``--shared-session`` measures that). Run:
``OPENBLAS_NUM_THREADS=1 python benchmarks/bench_reprocess.py [--recordings R] [--points P]
[--seconds S] [--rows N] [--workers W] [--repeat K] [--shared-session]``.
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
from eddyvigil.monitor.reprocess import WORKER_ENV, local_cluster, reprocess, reprocess_one

RATE_HZ = 20_000.0


def _write_campaign(base: Path, recordings: int, points: int, samples: int,
                    rows: int) -> list[str]:
    rng = np.random.default_rng(17)
    dirs = []
    for r in range(recordings):
        d = base / f"run{r:03d}"
        seq, t = 0, 0.0
        with Recorder(d) as rec:
            for p in range(points):
                rec.write(wire.encode_point("probe", f"s{r}", seq, {"id": f"P{p}"}), t)
                seq += 1
                for k in range(0, samples, rows):
                    n = min(rows, samples - k)
                    x = (rng.standard_normal((n, 3)) + [8.0, 0.2, 0.0]).astype("<f4")
                    frames = wire.encode_samples("probe", f"s{r}", seq, x, ("u", "v", "w"),
                                                 rate_hz=RATE_HZ, t0=k / RATE_HZ)
                    rec.write([bytes(memoryview(f).cast("B")) for f in frames], t)
                    seq += 1
                    t += n / RATE_HZ
            rec.write(wire.encode_end("probe", f"s{r}", seq), t)
        dirs.append(str(d))
    return dirs


def _cpu_seconds() -> float:
    return time.process_time()  # this process, all threads


def _one_process(dirs):
    t0, c0 = time.perf_counter(), _cpu_seconds()
    out = reprocess(dirs)
    return time.perf_counter() - t0, _cpu_seconds() - c0, [r["lines"] for r in out]


def _on_cluster(client, dirs):
    c0 = client.run(_cpu_seconds)
    t0 = time.perf_counter()
    out = client.gather(client.map(reprocess_one, dirs, pure=False))
    wall = time.perf_counter() - t0
    c1 = client.run(_cpu_seconds)
    busiest = max(c1[w] - c0[w] for w in c0)  # the worker with the most CPU seconds
    return wall, busiest, [r["lines"] for r in out]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--recordings", type=int, default=8)
    ap.add_argument("--points", type=int, default=2)
    ap.add_argument("--seconds", type=float, default=30.0, help="of each point, at 20 kHz")
    ap.add_argument("--rows", type=int, default=4096, help="rows per samples message")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3, help="interleaved rounds")
    ap.add_argument("--shared-session", action="store_true",
                    help="leave the workers in this program's session (see below)")
    args = ap.parse_args()
    for k, v in WORKER_ENV.items():
        os.environ.setdefault(k, v)
    from dask.distributed import Client

    from eddyvigil.stats.warmup import prepare_kernels

    samples = int(args.seconds * RATE_HZ)
    with tempfile.TemporaryDirectory() as tmp:
        dirs = _write_campaign(Path(tmp), args.recordings, args.points, samples, args.rows)
        size = sum(f.stat().st_size for d in dirs for f in Path(d).iterdir()) / 2**20
        print(f"campaign: {args.recordings} recordings x {args.points} points x "
              f"{args.seconds:g} s at 20 kHz x 3 float32 ({samples} samples per point, "
              f"{args.rows}-row messages; {size:.0f} MiB, {size / args.recordings:.1f} MiB per "
              f"recording); {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.1f}")
        reprocess_one(dirs[0])  # compile / load the kernels here before timing

        t0 = time.perf_counter()
        cluster = local_cluster(args.workers)
        client = Client(cluster)
        t_cluster = time.perf_counter() - t0
        t0 = time.perf_counter()
        client.run(prepare_kernels)  # every worker loads (or compiles) its kernels
        t_warm = time.perf_counter() - t0
        if not args.shared_session:
            client.run(os.setsid)  # each worker a session (an autogroup) of its own
        rounds = []
        try:
            for i in range(args.repeat):
                if i % 2 == 0:
                    t_one, c_one, one = _one_process(dirs)
                    t_dask, c_dask, many = _on_cluster(client, dirs)
                else:
                    t_dask, c_dask, many = _on_cluster(client, dirs)
                    t_one, c_one, one = _one_process(dirs)
                assert many == one, "summaries differ"
                rounds.append((t_one, t_dask, c_one, c_dask))
                print(f"  round {i + 1}: one process {t_one:6.2f} s ({c_one:5.2f} CPU s)   "
                      f"{args.workers} workers {t_dask:6.2f} s (busiest {c_dask:5.2f} CPU s)   "
                      f"speed-up {t_one / t_dask:4.2f}x wall, {c_one / c_dask:4.2f}x CPU",
                      flush=True)
        finally:
            client.close()
            cluster.close()

    speedups = [r[0] / r[1] for r in rounds]
    cpu_speedups = [r[2] / r[3] for r in rounds]
    t_one = float(np.median([r[0] for r in rounds]))
    per = t_one / args.recordings
    print(f"speed-up of {args.workers} workers over one process, wall time: {min(speedups):.2f}-"
          f"{max(speedups):.2f}x (median {float(np.median(speedups)):.2f}x over "
          f"{len(rounds)} rounds); by CPU seconds (one process / busiest worker): "
          f"{min(cpu_speedups):.2f}-{max(cpu_speedups):.2f}x; summaries identical in every round")
    print("workers " + ("in this program's session" if args.shared_session else
                        "each in a session of its own (os.setsid), as separately started "
                        "programs are: Linux shares a busy CPU between sessions (autogroups), "
                        "so workers left in one session share one session's part"))
    print(f"one process: {per:.3f} s per recording (median), "
          f"{args.points * samples / per / 1e6:.1f} M samples/s; cluster start-up "
          f"{t_cluster:.1f} s + kernel loading {t_warm:.1f} s, paid once per cluster")
    mib_s = size / args.recordings / per
    print(f"estimate on a cluster of W single-core workers: start-up + ceil(R/W) x {per:.3f} s "
          f"(the file system must deliver {mib_s:.0f} MiB/s per worker); e.g. R=500, W=64: "
          f"{math.ceil(500 / 64) * per:.1f} s of work against {500 * per:.0f} s in one process")


if __name__ == "__main__":
    main()
