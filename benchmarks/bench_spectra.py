"""Cost of spectra + dissipation on the monitor's ingest path, side by side in one run.

    python benchmarks/bench_spectra.py [--seconds 60] [--repeat 3] [--rows 16384]

The frames ``watch`` receives (3 float32 columns at 20 kHz, ``--rows`` per message, points of
``--seconds``) are encoded once, then fed through ``Pipeline.handle_frames`` (decode, every
statistic, the summary line at each point end, snapshots on the real clock) twice per round:

  - with the spectra switched off (the pipeline's PointSpectra replaced by nothing);
  - with the spectra as the monitor runs them (Welch on every 50 %-overlapped segment,
    eps/scales/peaks at each point end and for the dashboard's live view), stride 1;
  - the same transforming only every 4th / 16th segment (``stride``);
  - the same samples sent as float64 (the spectra's float64 FFT), against float64 "off".

Prints samples per CPU second of each per round (interleaved), the median extra cost over
"off" in %,
and the time of one ``dissipation()`` evaluation. No assertions.
"""

from __future__ import annotations

import argparse
import functools
import io
import os
import statistics
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from eddyvigil.monitor import wire  # noqa: E402
from eddyvigil.monitor.pipeline import Pipeline  # noqa: E402
from eddyvigil.simulator.signals import PopeGenerator, generate  # noqa: E402
from eddyvigil.stats import point_spectra  # noqa: E402
from eddyvigil.stats.dissipation import dissipation  # noqa: E402

_PointSpectra = point_spectra.PointSpectra

RATE = 20_000.0


def frames_of(x: np.ndarray, rows: int, points: int) -> list[list[bytes]]:
    out, seq = [], 0
    per_point = x.shape[0] // points
    for p in range(points):
        out.append(
            wire.encode_point(
                "bench", "s1", seq, {"id": f"P{p}", "x": 0.0, "y": 0.01 * p, "z": 0.0}
            )
        )
        seq += 1
        for i in range(p * per_point, (p + 1) * per_point - rows + 1, rows):
            out.append(
                wire.encode_samples(
                    "bench", "s1", seq, x[i : i + rows], ("u", "v", "w"), rate_hz=RATE, t0=i / RATE
                )
            )
            seq += 1
    out.append(wire.encode_end("bench", "s1", seq))
    return out


def run(frames, stride: int | None) -> float:
    """Seconds to feed ``frames``; ``stride`` None switches the spectra off."""
    if stride is None:
        factory = lambda *a, **k: None  # noqa: E731
    elif stride == 1:
        factory = _PointSpectra
    else:
        factory = functools.partial(_PointSpectra, stride=stride)
    # monitor.point_run builds each point's spectra through this module attribute
    point_spectra.PointSpectra = factory
    try:
        p = Pipeline(summary=io.StringIO())
        # CPU time of this process (the path is single-threaded): on a machine shared with
        # other jobs, wall-clock rounds differed by 5x, CPU time far less
        t = time.process_time()
        for f in frames:
            p.handle_frames(f)
            p.snapshot  # noqa: B018 - what a reader does
        p.close()
        return time.process_time() - t
    finally:
        point_spectra.PointSpectra = _PointSpectra


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0, help="point length (s of data)")
    ap.add_argument("--points", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--rows", type=int, default=16384)
    a = ap.parse_args()
    n = int(a.seconds * RATE) * a.points
    gen = PopeGenerator([5.0, 0.0, 0.0], 1.5, 4.0, 1.5e-5, RATE, 1)
    x = generate(gen, n).astype("<f4")
    frames = frames_of(x, a.rows, a.points)
    # the same samples sent as float64: the spectra then take the float64 FFT
    frames64 = frames_of(x.astype("<f8"), a.rows, a.points)
    samples = sum(1 for f in frames) and x.shape[0]
    variants = (None, 1, 4, 16, "f8")
    off64 = "off f8"

    def feed(v):
        if v == "f8":
            return run(frames64, 1)
        if v == off64:
            return run(frames64, None)
        return run(frames, v)

    for v in variants:
        run(frames[:40], v if v != "f8" else 1)  # compile and warm every path once
    run(frames64[:40], 1)
    order = (*variants, off64)
    times = {v: [] for v in order}
    for r in range(a.repeat):
        for v in order:  # side by side, interleaved
            times[v].append(feed(v))
        row = ", ".join(
            f"{'off' if v is None else v if isinstance(v, str) else f'stride {v}'} "
            f"{samples / times[v][-1] / 1e6:6.2f}"
            for v in order
        )
        print(f"round {r + 1} (M samples/s): {row}")
    base = statistics.median(times[None])
    for v in variants[1:]:
        ref = times[off64] if v == "f8" else times[None]
        extra = statistics.median(t / b for t, b in zip(times[v], ref, strict=True))
        what = "float64 frames, stride 1" if v == "f8" else f"float32 frames, stride {v:2d}"
        print(
            f"spectra + eps, {what}: median extra cost {100 * (extra - 1):6.1f} % "
            "of the ingest path without spectra "
            f"(off: {samples / base / 1e6:.1f} M samples/s)"
        )
    print(
        f"({a.points} points of {a.seconds:g} s, 3 float32 columns at 20 kHz, "
        f"{a.rows} rows/message)"
    )
    from eddyvigil.stats.spectra import SpectrumAccumulator

    spec = SpectrumAccumulator(("u", "v", "w"), RATE).update(x[: int(a.seconds * RATE)]).snapshot()
    dissipation(spec, 5.0)
    t = time.perf_counter()
    for _ in range(5):
        dissipation(spec, 5.0)
    print(
        f"one dissipation() evaluation (segment {spec.segment}, 3 columns): "
        f"{(time.perf_counter() - t) / 5 * 1e3:.0f} ms"
    )


if __name__ == "__main__":
    main()
