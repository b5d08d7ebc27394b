"""Recording throughput: the recorder and the reader+decoder against raw file I/O, in one run.

Records M messages of 16384 rows x 3 components of float32 (the shape a hot-wire or ADV stream
sends), then prints:

- recorder write throughput (``Recorder.write`` ... ``close()``, fsync included) against writing
  the same frame bytes with plain ``file.write`` + fsync, and the time spent inside ``write()``
  calls alone (what the receiving loop pays; CRCs and disk writes run on the writer thread);
- read + decode throughput (``read_recording`` + ``wire.decode``, samples/s) against reading the
  same files with plain ``file.read`` in 4 MiB chunks.

Both sides of each ratio run back to back on the same data, so the page cache favours neither
(the files just written are cached for both readers). Run: ``python benchmarks/bench_recording.py
[--messages M] [--repeat R]``; the best of R runs is reported.
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import time
from pathlib import Path

import numpy as np

from eddyvigil.monitor import wire
from eddyvigil.monitor.recorder import Recorder, read_recording, recording_files

ROWS, COLS = 16384, 3


def _messages(m: int) -> list[list]:
    rng = np.random.default_rng(2024)
    block = rng.normal(8.0, 1.0, size=(ROWS, COLS)).astype("<f4")
    return [
        wire.encode_samples("probe-a", "bench", i, block, "uvw", rate_hz=20_000.0, t0=i * 0.8192)
        for i in range(m)
    ]


def _recorder_write(msgs, directory: Path) -> tuple[float, float]:
    """(total seconds up to a closed, fsynced recording; seconds spent inside write() calls)."""
    t = time.perf_counter()
    rec = Recorder(directory)
    now = time.time()
    in_write = 0.0
    for i, frames in enumerate(msgs):
        t_call = time.perf_counter()
        rec.write(frames, now + i * 1e-3)
        in_write += time.perf_counter() - t_call
    rec.close()
    return time.perf_counter() - t, in_write


def _raw_write(msgs, path: Path) -> float:
    t = time.perf_counter()
    with open(path, "wb") as f:
        for frames in msgs:
            for fr in frames:
                f.write(fr)
        f.flush()
        os.fsync(f.fileno())
    return time.perf_counter() - t


def _read_decode(directory: Path) -> tuple[float, int]:
    t = time.perf_counter()
    samples = 0
    for rec in read_recording(directory):
        msg = wire.decode(rec.frames)
        samples += msg.data.size
    return time.perf_counter() - t, samples


def _raw_read(paths) -> tuple[float, int]:
    t = time.perf_counter()
    nbytes = 0
    for p in paths:
        with open(p, "rb", buffering=0) as f:
            while chunk := f.read(4 * 2**20):
                nbytes += len(chunk)
    return time.perf_counter() - t, nbytes


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--messages", type=int, default=300)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args(argv)
    msgs = _messages(args.messages)
    payload = args.messages * ROWS * COLS * 4
    n_samples = args.messages * ROWS * COLS
    best = {"rec_w": 1e9, "rec_call": 1e9, "raw_w": 1e9, "rec_r": 1e9, "raw_r": 1e9}
    tmp = Path(tempfile.mkdtemp(prefix="eddyvigil-bench-"))
    try:
        for r in range(args.repeat):
            d = tmp / f"rec{r}"
            raw = tmp / f"raw{r}.bin"
            best["raw_w"] = min(best["raw_w"], _raw_write(msgs, raw))
            t_total, t_calls = _recorder_write(msgs, d)
            best["rec_w"] = min(best["rec_w"], t_total)
            best["rec_call"] = min(best["rec_call"], t_calls)
            t_raw, nbytes = _raw_read(recording_files(d))
            best["raw_r"] = min(best["raw_r"], t_raw)
            t_dec, samples = _read_decode(d)
            assert samples == n_samples
            best["rec_r"] = min(best["rec_r"], t_dec)
            raw.unlink()
            shutil.rmtree(d)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    mb = payload / 2**20
    fig = {
        "recorder_write_MB_s": mb / best["rec_w"],
        "raw_write_MB_s": mb / best["raw_w"],
        "write_call_samples_s": n_samples / best["rec_call"],
        "read_decode_samples_s": n_samples / best["rec_r"],
        "raw_read_samples_s": (nbytes / 4) / best["raw_r"],
    }
    print(f"recording benchmark: {args.messages} messages x {ROWS} rows x {COLS} float32")
    print(
        f"  write: recorder {fig['recorder_write_MB_s']:8.0f} MB/s   raw file "
        f"{fig['raw_write_MB_s']:8.0f} MB/s   ratio recorder/raw "
        f"{fig['recorder_write_MB_s'] / fig['raw_write_MB_s']:.2f}"
    )
    print(
        f"  write() calls alone (the receiving loop's cost): "
        f"{fig['write_call_samples_s'] / 1e6:.0f} Msamples/s"
    )
    print(
        f"  read:  read+decode {fig['read_decode_samples_s'] / 1e6:8.0f} Msamples/s   raw read "
        f"{fig['raw_read_samples_s'] / 1e6:8.0f} Msamples/s   ratio "
        f"{fig['read_decode_samples_s'] / fig['raw_read_samples_s']:.2f}"
    )
    return fig


if __name__ == "__main__":
    main()
