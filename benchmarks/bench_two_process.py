"""Would a second process help? The watch path against a receiving/statistics split.

    python benchmarks/bench_two_process.py [--messages 400] [--repeat 3]

A design measured and not adopted. In paired rounds, the same publisher (bench_ingest.py's:
3-component float32, 16384 rows per message, PUSH over tcp loopback) feeds
  a. a bare pyzmq PULL that only counts,
  b. the monitor's path in one process (Subscriber -> Pipeline, as ``watch --no-dashboard``),
  c. a receiver process (PULL, one copy of each payload into a slot of a shared-memory ring,
     the small frames and the slot number through a pipe) and a statistics process that hands
     the frames, payload viewed in place in the ring, to the same ``Pipeline.handle_frames``;
     a slot goes back to the receiver once the pipeline is done with it (back-pressure).
Prints samples/s and each round's ratio to the bare receiver; no assertions.
"""

from __future__ import annotations

import argparse
import io
import multiprocessing as mp
import os
import struct
import sys
import time
from multiprocessing import shared_memory
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # as the eddyvigil command sets

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

import numpy as np  # noqa: E402
import zmq  # noqa: E402
from bench_ingest import ROWS, bare_receiver, free_endpoint, full_path, start_publisher  # noqa: E402

SLOT_BYTES = ROWS * 3 * 4
SLOTS = 16
_HEAD = struct.Struct("<iiI")  # slot (-1: none, frames inline), payload bytes, topic length


def receiver(endpoint: str, shm_name: str, to_stats, from_stats) -> None:
    """Child process: receive, copy each samples payload into a free slot, pass it on."""
    shm = shared_memory.SharedMemory(name=shm_name)
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PULL)
    sock.setsockopt(zmq.LINGER, 0)
    sock.bind(endpoint)
    to_stats.send_bytes(b"ready")
    free = list(range(SLOTS))
    try:
        while True:
            frames = sock.recv_multipart(copy=False)
            topic, header = frames[0].bytes, frames[1].bytes
            if len(frames) == 3 and len(frames[2].buffer) <= SLOT_BYTES:
                while not free or from_stats.poll(0):
                    free.append(from_stats.recv_bytes()[0])
                slot = free.pop()
                payload = frames[2].buffer
                shm.buf[slot * SLOT_BYTES : slot * SLOT_BYTES + len(payload)] = payload
                to_stats.send_bytes(_HEAD.pack(slot, len(payload), len(topic)) + topic + header)
            else:
                to_stats.send_bytes(_HEAD.pack(-1, 0, len(topic)) + topic + header)
                if b'"end"' in header:
                    break
    finally:
        sock.close(linger=0)
        ctx.term()
        shm.close()


def two_process(messages: int) -> float:
    """Samples/s of the split design (first samples message to ``end``)."""
    from eddyvigil.monitor.pipeline import Pipeline

    shm = shared_memory.SharedMemory(create=True, size=SLOT_BYTES * SLOTS)
    ring = shm.buf
    to_stats_r, to_stats_w = mp.Pipe(duplex=False)
    back_r, back_w = mp.Pipe(duplex=False)
    endpoint = free_endpoint()
    child = mp.get_context("spawn").Process(
        target=receiver, args=(endpoint, shm.name, to_stats_w, back_r)
    )
    child.start()
    pipeline = Pipeline(summary=io.StringIO())
    try:
        assert to_stats_r.recv_bytes() == b"ready"
        pub = start_publisher(endpoint, messages)
        t_first = None
        while not pipeline.all_ended:
            msg = to_stats_r.recv_bytes()
            slot, nbytes, tlen = _HEAD.unpack_from(msg)
            topic = msg[_HEAD.size : _HEAD.size + tlen]
            header = msg[_HEAD.size + tlen :]
            if slot < 0:
                pipeline.handle_frames([topic, header], time.time())
                continue
            if t_first is None:
                t_first = time.perf_counter()
            with ring[slot * SLOT_BYTES : slot * SLOT_BYTES + nbytes] as payload:
                pipeline.handle_frames([topic, header, payload], time.time())
            back_w.send_bytes(bytes([slot]))
        elapsed = time.perf_counter() - t_first
        pub.wait(timeout=60)
    finally:
        child.join(timeout=30)
        samples = pipeline.run_line()["samples"]
        pipeline.close()
        del ring
        shm.close()
        shm.unlink()
    return samples / elapsed


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--messages", type=int, default=400)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    full_path(5, None)  # load the kernels in this process
    two_process(5)
    rounds = []
    for _ in range(args.repeat):
        bare, _ = bare_receiver(args.messages)
        one, _, _ = full_path(args.messages, None)
        two = two_process(args.messages)
        rounds.append((bare, one, two))
    print(f"{args.messages} messages of {ROWS} rows x 3 float32 per run, PUSH/PULL over loopback")
    print("  round   bare receiver   one process (ratio)   two processes (ratio)   Msamples/s")
    for i, (bare, one, two) in enumerate(rounds):
        print(
            f"  {i + 1:5d}   {bare / 1e6:13.1f}   {one / 1e6:11.1f} ({one / bare:4.2f})"
            f"   {two / 1e6:13.1f} ({two / bare:4.2f})"
        )
    one_med = float(np.median([o / b for b, o, _ in rounds]))
    two_med = float(np.median([t / b for b, _, t in rounds]))
    print(f"  median ratio to the bare receiver: one process {one_med:.2f}, two {two_med:.2f}")


if __name__ == "__main__":
    main()
