"""A 128 x 128-vector, 2-component field: the accumulator on one core and ``watch`` over loopback.

Prints side by side, in one run of interleaved rounds (absolute rates are unreliable on a
shared machine; the ratios within a round are what to read), snapshots per second of:

- ``FieldStatistics.update``: means, stresses and k per vector with the blocking state that
  gives each an error bar, and the checkpoints (targets, streaks), blocks of ``--block``
  snapshots as a PIV stream sends them (the goal: at least 1000 snapshots/s);
- the ingest kernel alone (checkpoint evaluations switched off);
- ``watch``'s path over tcp loopback: a publisher process PUSHes the wire messages (a point
  with a grid, samples with ``probes``, end) as fast as the monitor takes them; the monitor is
  the Subscriber (PULL, bind) -> Pipeline of ``watch --no-dashboard`` (decode, checks, the
  same accumulator, live field views for readers), timed from the first samples message to the
  end (the goal: at least 0.5 of the accumulator's rate);
- a numpy baseline doing only running sums of u, v, uu, vv, uv per vector (no error bars);
- and one ``snapshot()`` (the full analysis) in seconds.

Each rate is given per second of wall clock and per CPU second of the process (``cpu``: the
rate one core would give if the process had it alone; on a shared machine the wall-clock
rate is lower by the share of the core the process got).

Run: ``OPENBLAS_NUM_THREADS=1 NUMBA_NUM_THREADS=1 python benchmarks/bench_field.py
[--nx 128] [--ny 128] [--snapshots 4000] [--block 50] [--rounds 3]``.
"""

from __future__ import annotations

import argparse
import io
import os
import subprocess
import sys
import threading
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # as the eddyvigil command sets
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402
from bench_ingest import free_endpoint  # noqa: E402

from eddyvigil.stats.field import FieldStatistics  # noqa: E402

#: Distinct blocks the publisher cycles through (the data need not be new, only valid).
PUBLISHED_BLOCKS = 8


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


def _snapshots(n: int, P: int, seed: int = 5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return (rng.standard_normal((n, P, 2)) + [6.0, 0.1]).astype("<f4")


def publish(endpoint: str, nx: int, ny: int, snapshots: int, block: int) -> None:
    """The publisher process: one point of a field on a PUSH socket, as fast as it is taken."""
    import zmq

    from eddyvigil.monitor import wire

    P = nx * ny
    data = _snapshots(PUBLISHED_BLOCKS * block, P, seed=7)
    blocks = [data[k * block:(k + 1) * block] for k in range(PUBLISHED_BLOCKS)]
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PUSH)
    sock.setsockopt(zmq.LINGER, 10_000)
    sock.connect(endpoint)
    grid = {"x0": 0.0, "dx": 0.001, "nx": nx, "y0": 0.0, "dy": 0.001, "ny": ny}
    sock.send_multipart(wire.encode_point("field", "bench", 0, {"id": "F1"},
                                          extra={"grid": grid}))
    seq, done = 0, 0
    while done < snapshots:
        seq += 1
        b = blocks[seq % PUBLISHED_BLOCKS][: snapshots - done]
        sock.send_multipart(wire.encode_samples("field", "bench", seq, b, ("u", "v"),
                                                rate_hz=15.0, t0=done / 15.0), copy=False)
        done += b.shape[0]
    sock.send_multipart(wire.encode_end("field", "bench", seq + 1))
    sock.close()
    ctx.term()


def watch_rate(nx: int, ny: int, snapshots: int, block: int) -> tuple[float, float]:
    """Snapshots/s through Subscriber -> Pipeline (``watch --no-dashboard``) over loopback:
    per second of wall clock, and per CPU second of the monitor process (all its threads)."""
    from eddyvigil.monitor.pipeline import Pipeline
    from eddyvigil.monitor.subscriber import Subscriber

    ep = free_endpoint()
    sub = Subscriber(ep, bind=True, socket="pull")
    pipeline = Pipeline(summary=io.StringIO())
    state = {"t_first": None, "t_last": None}

    def on_frames(frames, received_at):
        if state["t_first"] is None and len(frames) == 3:
            state["t_first"], state["cpu_first"] = time.perf_counter(), time.process_time()
        pipeline.handle_frames(frames, received_at)
        if pipeline.all_ended:
            state["t_last"], state["cpu_last"] = time.perf_counter(), time.process_time()
            sub.stop()

    timer = threading.Timer(600.0, sub.stop)  # a safety net only
    timer.start()
    pub = subprocess.Popen([sys.executable, __file__, "--publish", ep, "--nx", str(nx),
                            "--ny", str(ny), "--snapshots", str(snapshots),
                            "--block", str(block)])
    try:
        sub.run(on_frames)
    finally:
        timer.cancel()
        sub.close()
        pub.wait(timeout=120)
    samples = pipeline.run_line()["samples"]
    pipeline.close()
    if state["t_last"] is None or samples != snapshots:
        raise RuntimeError(f"the monitor took {samples} of {snapshots} snapshots")
    # the first samples message is received at t_first: the rest were timed
    timed = snapshots - block
    return (timed / (state["t_last"] - state["t_first"]),
            timed / (state["cpu_last"] - state["cpu_first"]))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--nx", type=int, default=128)
    ap.add_argument("--ny", type=int, default=128)
    ap.add_argument("--snapshots", type=int, default=4000)
    ap.add_argument("--block", type=int, default=50)
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--publish", metavar="ENDPOINT", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.publish:
        publish(args.publish, args.nx, args.ny, args.snapshots, args.block)
        return
    P = args.nx * args.ny
    n = args.snapshots
    x = _snapshots(n, P)
    blocks = [x[k : k + args.block] for k in range(0, n, args.block)]
    FieldStatistics(("u", "v"), 4, 15.0).update(x[:600, :4])  # compile before timing

    print(f"field {args.nx} x {args.ny} vectors, 2 components, {n} snapshots, "
          f"blocks of {args.block}; snapshots/s per round")
    print(f"{'round':>5s} {'update':>8s} {'cpu':>6s} {'ingest':>8s} {'cpu':>6s} {'watch':>8s} "
          f"{'cpu':>6s} {'numpy':>8s} {'watch/update':>12s} {'(cpu)':>6s} {'snapshot() s':>12s}")
    rows = []
    for r in range(args.rounds):
        f = FieldStatistics(("u", "v"), P, 15.0)
        t0, c0 = time.perf_counter(), time.process_time()
        for b in blocks:
            f.update(b)
        upd, upd_cpu = n / (time.perf_counter() - t0), n / (time.process_time() - c0)
        g = FieldStatistics(("u", "v"), P, 15.0)
        g.next_check = 2**62  # the ingest kernel alone: no checkpoint evaluations
        t0, c0 = time.perf_counter(), time.process_time()
        for b in blocks:
            g.update(b)
        ing, ing_cpu = n / (time.perf_counter() - t0), n / (time.process_time() - c0)
        del g
        w, w_cpu = watch_rate(args.nx, args.ny, n, args.block)
        t0 = time.perf_counter()
        _numpy_sums(x, blocks)
        nps = n / (time.perf_counter() - t0)
        t0 = time.perf_counter()
        f.snapshot()
        snap_s = time.perf_counter() - t0
        rows.append((upd, upd_cpu, w, w_cpu))
        print(f"{r + 1:5d} {upd:8.0f} {upd_cpu:6.0f} {ing:8.0f} {ing_cpu:6.0f} {w:8.0f} "
              f"{w_cpu:6.0f} {nps:8.0f} {w / upd:12.2f} {w_cpu / upd_cpu:6.2f} "
              f"{snap_s:12.3f}", flush=True)
    a = np.array(rows)
    print(f"range: update {a[:, 0].min():.0f}-{a[:, 0].max():.0f} "
          f"(cpu {a[:, 1].min():.0f}-{a[:, 1].max():.0f}), watch {a[:, 2].min():.0f}-"
          f"{a[:, 2].max():.0f} (cpu {a[:, 3].min():.0f}-{a[:, 3].max():.0f}), watch/update "
          f"{(a[:, 2] / a[:, 0]).min():.2f}-{(a[:, 2] / a[:, 0]).max():.2f} (cpu "
          f"{(a[:, 3] / a[:, 1]).min():.2f}-{(a[:, 3] / a[:, 1]).max():.2f})")
    state = sum(a.nbytes for a in vars(f).values() if isinstance(a, np.ndarray)) / 2**20
    print(f"state: {state:.0f} MiB for {f.levels} levels")


if __name__ == "__main__":
    main()
