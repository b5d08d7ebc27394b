"""Ingest figures: the full pipeline against a bare receiver, replay speed, memory over time.

    python benchmarks/bench_ingest.py [--messages 400] [--repeat 3] [--long-seconds 20]

1. A publisher process pushes 3-component float32 samples, 16384 rows per message, over tcp
   loopback (PUSH/PULL: back-pressure, nothing lost) into
   a. a bare pyzmq PULL that only counts messages (``recv_multipart(copy=False)``),
   b. the full monitor path of ``watch --no-dashboard``: Subscriber -> Pipeline.handle_frames
      (decode, every statistic, summaries), and
   c. the same with ``--record``: ... -> Recorder,
   run back to back ``--repeat`` times; each round's ratios b/a and c/a are printed and their
   median (this machine's timing varies by +-20 % between runs, and the publisher shares
   its two cores with the receiver).
2. The recording of 1c replayed at max speed through a fresh Pipeline (samples/s, best run).
3. RSS of the full path (no recorder, RCVHWM 64 so that ZeroMQ's queue does not dominate)
   over a long max-speed stream (``--long-seconds``), sampled once a second: start, end, peak.
4. ``--per-message`` (only this): the cost per message at 1024, 4096 and 16384 rows, in
   process and over loopback, with every block alone (the path before monitor.coalesce)
   beside joined blocks (see :func:`per_message`).
Prints figures only; no assertions.
"""

from __future__ import annotations

import argparse
import io
import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

# one BLAS thread, as the eddyvigil command sets (monitor/cli.py), before numpy loads BLAS
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402
import psutil  # noqa: E402
import zmq  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from eddyvigil.monitor import wire  # noqa: E402

ROWS = 16384


def publish(endpoint: str, messages: int, seconds: float, rows: int = ROWS) -> None:
    """Child process: PUSH ``messages`` (or for ``seconds`` if > 0) samples messages, then end."""
    rng = np.random.default_rng(1)
    block = (np.array([8.0, 0.4, 0.0]) + rng.standard_normal((rows, 3))).astype("<f4")
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PUSH)
    sock.setsockopt(zmq.LINGER, 0)
    sock.setsockopt(zmq.IMMEDIATE, 1)
    sock.connect(endpoint)
    seq = 0
    sock.send_multipart(wire.encode_point("bench", "b1", seq, {"id": "B1"}))
    seq += 1
    deadline = time.monotonic() + seconds if seconds > 0 else None
    i = 0
    while (deadline is None and i < messages) or (
        deadline is not None and time.monotonic() < deadline
    ):
        frames = wire.encode_samples(
            "bench", "b1", seq, block, ("u", "v", "w"), rate_hz=20000.0, t0=i * rows / 20000.0
        )
        sock.send_multipart(frames, copy=False)
        seq += 1
        i += 1
    sock.send_multipart(wire.encode_end("bench", "b1", seq))
    # a slow receiver may have thousands of messages queued (its RCVHWM and this SNDHWM):
    # linger until the end message is delivered, or a cut-off tail leaves it waiting forever
    sock.close(linger=120_000)
    ctx.term()


def start_publisher(endpoint: str, messages: int, seconds: float = 0.0,
                    rows: int = ROWS) -> subprocess.Popen:
    return subprocess.Popen(
        [
            sys.executable,
            __file__,
            "--publish",
            endpoint,
            "--messages",
            str(messages),
            "--seconds",
            str(seconds),
            "--rows",
            str(rows),
        ]
    )


def free_endpoint() -> str:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return f"tcp://127.0.0.1:{s.getsockname()[1]}"


def cpu_seconds(pids) -> list[float]:
    """User + system CPU seconds so far of each process (all its threads, ZeroMQ's too)."""
    out = []
    for pid in pids:
        t = psutil.Process(pid).cpu_times()
        out.append(t.user + t.system)
    return out


def bare_receiver(messages: int, rows: int = ROWS) -> tuple[float, list[float]]:
    """Samples/s of a PULL that only counts (first samples message to end), and the CPU
    seconds per message of [publisher, receiver] over the same span."""
    ep = free_endpoint()
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PULL)
    sock.setsockopt(zmq.LINGER, 0)
    sock.bind(ep)
    pub = start_publisher(ep, messages, rows=rows)
    samples, t_first = 0, None
    try:
        for _ in range(messages + 2):
            if not sock.poll(60_000):
                break
            frames = sock.recv_multipart(copy=False)
            if len(frames) == 3:
                if t_first is None:
                    t_first = time.perf_counter()
                    cpu0 = cpu_seconds([pub.pid, os.getpid()])
                samples += len(frames[2]) // 12
            elif b'"end"' in frames[1].bytes:
                break
        elapsed = time.perf_counter() - t_first
        cpu1 = cpu_seconds([pub.pid, os.getpid()])
        cpu = [(b - a) / messages for a, b in zip(cpu0, cpu1, strict=True)]
    finally:
        sock.close(linger=0)
        ctx.term()
        pub.wait(timeout=60)
    return samples / elapsed, cpu


def full_path(
    messages: int,
    rec_dir: Path | None,
    seconds: float = 0.0,
    rss: list | None = None,
    rcvhwm: int | None = None,
    rows: int = ROWS,
    coalesce_s: float | None = None,
):
    """Samples/s of Subscriber -> Pipeline (all statistics) -> Recorder; returns (rate, samples,
    CPU seconds per message of [publisher, monitor])."""
    from eddyvigil.monitor.pipeline import Pipeline
    from eddyvigil.monitor.recorder import Recorder
    from eddyvigil.monitor.subscriber import Subscriber

    ep = free_endpoint()
    kw = {} if rcvhwm is None else {"rcvhwm": rcvhwm}
    sub = Subscriber(ep, bind=True, socket="pull", **kw)
    recorder = Recorder(rec_dir) if rec_dir is not None else None
    opts = {} if coalesce_s is None else {"coalesce_s": coalesce_s}
    pipeline = Pipeline(summary=io.StringIO(), recorder=recorder, **opts)
    state = {"t_first": None, "t_last": None, "cpu": None}
    proc = psutil.Process()

    def on_frames(frames, received_at):
        if state["t_first"] is None and len(frames) == 3:
            state["t_first"] = time.perf_counter()
            state["cpu0"] = cpu_seconds([pub.pid, os.getpid()])
        pipeline.handle_frames(frames, received_at)
        if pipeline.all_ended:
            state["t_last"] = time.perf_counter()
            state["cpu"] = cpu_seconds([pub.pid, os.getpid()])
            sub.stop()

    def on_tick():
        if rss is not None:
            rss.append(proc.memory_info().rss)

    timer = threading.Timer(max(180.0, seconds + 120.0), sub.stop)  # a safety net only
    timer.start()
    pub = start_publisher(ep, messages, seconds, rows=rows)
    try:
        sub.run(on_frames, on_tick=on_tick, tick_interval_s=1.0)
    finally:
        timer.cancel()
        sub.close()
        try:
            pub.wait(timeout=60)
        except subprocess.TimeoutExpired:
            pub.kill()
            pub.wait()
    samples = pipeline.run_line()["samples"]
    pipeline.close()
    if recorder is not None:
        recorder.close()
    if state["cpu"] is None:
        raise RuntimeError(f"the stream did not end within the safety timeout ({samples} "
                           f"samples arrived)")
    n_msg = max(1, samples // rows)
    cpu = [(b - a) / n_msg for a, b in zip(state["cpu0"], state["cpu"], strict=True)]
    return samples / (state["t_last"] - state["t_first"]), samples, cpu


def replay_rate(rec_dir: Path) -> tuple[float, int]:
    from eddyvigil.monitor.pipeline import Pipeline
    from eddyvigil.monitor.replay import replay_into

    pipeline = Pipeline(summary=io.StringIO())
    t = time.perf_counter()
    replay_into(pipeline, rec_dir, None)
    elapsed = time.perf_counter() - t
    samples = pipeline.run_line()["samples"]
    pipeline.close()
    return samples / elapsed, samples


def prepared_messages(rows: int, samples: float) -> list:
    """A point message, ``samples`` rows in samples messages of ``rows`` rows (as received:
    bytes), and an end message."""
    rng = np.random.default_rng(2)
    block = (np.array([8.0, 0.4, 0.0]) + rng.standard_normal((rows, 3))).astype("<f4")
    msgs = [wire.encode_point("bench", "b1", 0, {"id": "B1"})]
    for i in range(int(samples // rows)):
        frames = wire.encode_samples("bench", "b1", i + 1, block, ("u", "v", "w"),
                                     rate_hz=20000.0, t0=i * rows / 20000.0)
        msgs.append([bytes(memoryview(f).cast("B")) for f in frames])
    msgs.append(wire.encode_end("bench", "b1", len(msgs)))
    return msgs


def in_process(msgs: list, coalesce_s: float) -> float:
    """CPU seconds (this thread) per samples message of ``Pipeline.handle_frames``, from the
    point message to the written line."""
    from eddyvigil.monitor.pipeline import Pipeline

    pipeline = Pipeline(summary=io.StringIO(), coalesce_s=coalesce_s)
    t = time.thread_time()
    for frames in msgs:
        pipeline.handle_frames(frames, 0.0)
    pipeline.close()
    return (time.thread_time() - t) / (len(msgs) - 2)


def per_message(repeat: int, samples: float, sizes=(1024, 4096, 16384)) -> None:
    """Figure 4: the fixed cost per message.

    a. In process, prepared messages through ``Pipeline.handle_frames``: every block alone
       (``coalesce_s=0``, the path before monitor.coalesce) against joined blocks (the
       default), ``repeat`` interleaved rounds; CPU per message, and its fixed part: the CPU
       per message less rows x the CPU per row, both from a straight line fitted to the
       every-block-alone costs at the three sizes (one path at every size).
    b. Over tcp loopback (PUSH/PULL): the bare receiver, ``watch`` with every block alone and
       ``watch`` as it is, side by side in each of ``repeat`` rounds; medians.
    """
    from eddyvigil.monitor.coalesce import COALESCE_S

    print(f"per-message cost, {samples / 1e6:g} M samples per run, {repeat} interleaved "
          f"rounds, medians (load average {os.getloadavg()[0]:.1f})")
    prepared = {rows: prepared_messages(rows, samples) for rows in sizes}
    cost: dict = {}
    for i in range(repeat):
        for rows, msgs in prepared.items():
            arms = (0.0, COALESCE_S) if i % 2 == 0 else (COALESCE_S, 0.0)
            for c in arms:
                cost.setdefault((rows, c), []).append(in_process(msgs, c))
    # every block alone is one path at every size: CPU per message = fixed + rows x per_row
    alone_fit = [float(np.median(cost[(rows, 0.0)])) for rows in sizes]
    per_row, fixed = np.polyfit(np.array(sizes, float), alone_fit, 1)
    print(f"  a. in process (Pipeline.handle_frames), CPU per message; every block alone fits "
          f"{fixed * 1e6:.0f} us + {per_row * 1e9:.0f} ns per row (least squares over the sizes)")
    print("   rows   every block alone   joined blocks   fixed part alone   fixed part joined")
    for rows in sizes:
        alone = float(np.median(cost[(rows, 0.0)]))
        joined = float(np.median(cost[(rows, COALESCE_S)]))
        print(f"  {rows:5d}   {alone * 1e6:14.0f} us   {joined * 1e6:10.0f} us   "
              f"{(alone - rows * per_row) * 1e6:13.0f} us   "
              f"{(joined - rows * per_row) * 1e6:14.0f} us", flush=True)
    print("  b. PUSH/PULL over tcp loopback")
    print("   rows   bare Ms/s   alone Ms/s (ratio)   watch Ms/s (ratio)   CPU/msg bare   "
          "alone   watch")
    for rows in sizes:
        messages = int(samples // rows)
        res = []
        for _ in range(repeat):
            bare, cpu_bare = bare_receiver(messages, rows)
            alone, _, cpu_alone = full_path(messages, None, rows=rows, coalesce_s=0.0)
            plain, _, cpu_plain = full_path(messages, None, rows=rows)
            res.append((bare, alone, plain, cpu_bare[1], cpu_alone[1], cpu_plain[1]))
        b, a, w, cb, ca, cw = (float(np.median([r[k] for r in res])) for k in range(6))
        ra = float(np.median([r[1] / r[0] for r in res]))
        rw = float(np.median([r[2] / r[0] for r in res]))
        print(f"  {rows:5d}   {b / 1e6:9.1f}   {a / 1e6:10.1f} ({ra:4.2f})   "
              f"{w / 1e6:10.1f} ({rw:4.2f})   {cb * 1e6:9.0f} us   {ca * 1e6:4.0f} us   "
              f"{cw * 1e6:4.0f} us", flush=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--messages", type=int, default=400, help="messages for figures 1 and 2")
    ap.add_argument("--repeat", type=int, default=3, help="rounds of figure 1 (default 3)")
    ap.add_argument("--long-seconds", type=float, default=20.0, help="duration of figure 3")
    ap.add_argument("--publish", help=argparse.SUPPRESS)
    ap.add_argument("--seconds", type=float, default=0.0, help=argparse.SUPPRESS)
    ap.add_argument("--rows", type=int, default=ROWS, help=argparse.SUPPRESS)
    ap.add_argument("--per-message", action="store_true",
                    help="only figure 4: the cost per message at 1024, 4096, 16384 rows, "
                         "in process and against a bare receiver")
    ap.add_argument("--samples", type=float, default=6.5e6,
                    help="samples per run of figure 4 (default 6.5e6)")
    args = ap.parse_args()
    if args.publish:
        publish(args.publish, args.messages, args.seconds, args.rows)
        return
    if args.per_message:
        full_path(5, None)  # kernels loaded
        per_message(args.repeat, args.samples)
        return

    # warm up: load the numba-compiled kernels once so that no figure includes compilation
    full_path(5, None)
    rounds, cpus = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(args.repeat):
            bare, cpu_bare = bare_receiver(args.messages)
            plain, n_plain, cpu_plain = full_path(args.messages, None)
            rec = Path(tmp) / f"rec{i}"
            recorded, n_rec, cpu_rec = full_path(args.messages, rec)
            rounds.append((bare, plain, recorded))
            cpus.append((cpu_bare, cpu_plain, cpu_rec))
        size = sum(f.stat().st_size for f in rec.glob("frames-*"))
        replay, n_replay = max(replay_rate(rec) for _ in range(args.repeat))
    print(
        f"messages of {ROWS} rows x 3 float32 over tcp loopback, PUSH/PULL, {args.messages} "
        f"messages per run; {n_plain} and {n_rec} samples arrived of "
        f"{args.messages * ROWS} sent (last round)"
    )
    print("  round   bare receiver   watch path (ratio)   watch --record (ratio)   Msamples/s")
    for i, (bare, plain, recorded) in enumerate(rounds):
        print(
            f"  {i + 1:5d}   {bare / 1e6:13.1f}   {plain / 1e6:10.1f} ({plain / bare:4.2f})"
            f"   {recorded / 1e6:14.1f} ({recorded / bare:4.2f})"
        )
    med_plain = float(np.median([p / b for b, p, _ in rounds]))
    med_rec = float(np.median([r / b for b, _, r in rounds]))
    print(f"  median ratio to the bare receiver: watch {med_plain:.2f}, --record {med_rec:.2f}")
    print("  CPU per message, publisher process + receiving process (all threads), median:")
    for k, label in enumerate(("bare receiver", "watch path", "watch --record")):
        pub_us = 1e6 * float(np.median([c[k][0] for c in cpus]))
        rcv_us = 1e6 * float(np.median([c[k][1] for c in cpus]))
        print(f"    {label:<15} publisher {pub_us:6.0f} us   receiver {rcv_us:6.0f} us")
    print(f"  recording size: {size / 2**20:.1f} MiB")
    print(
        f"replay at max speed through a fresh pipeline: {replay / 1e6:.2f} Msamples/s "
        f"({n_replay} samples)"
    )
    rss: list[int] = []
    # a small receive queue, so that the figure shows the pipeline's memory, not ZeroMQ's queue
    rate, n_long, _ = full_path(0, None, seconds=args.long_seconds, rss=rss, rcvhwm=64)
    if rss:
        print(
            f"long max-speed stream, {args.long_seconds:g} s, {n_long / 1e6:.0f} Msamples at "
            f"{rate / 1e6:.2f} Msamples/s: RSS after 1 s {rss[0] / 2**20:.0f} MiB, "
            f"after {len(rss) // 2} s {rss[len(rss) // 2] / 2**20:.0f} MiB, "
            f"end {rss[-1] / 2**20:.0f} MiB, peak {max(rss) / 2**20:.0f} MiB"
        )
    best_plain = max(p for _, p, _ in rounds)
    print(
        f"(a sample is one row of 3 components; a probe at 20 kHz delivers 20000 samples/s, "
        f"so the watch path keeps up with {best_plain / 20000.0:.0f} such probes)"
    )


if __name__ == "__main__":
    main()
