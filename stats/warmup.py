"""Load (or, on the first run after installing, compile) every numba kernel of the core.

numba compiles a kernel the first time it is called and keeps the machine code on disk
(``cache=True``), so a fresh install spends about 20 s compiling on its first block (1-2 s
loading later). A monitor that met that pause with a socket already open would drop messages
(SUB) or stall the publisher (PUSH/PULL), so it calls :func:`prepare_kernels` first.
"""

from __future__ import annotations

import time

import numpy as np

__all__ = ["prepare_kernels"]


def prepare_kernels() -> float:
    """Run every kernel once on a small synthetic block; returns the seconds it took.

    Covers float32 and float64 input (the two wire dtypes compile separately), 1-3
    components, uniform and random sampling, checkpoints and snapshots.
    """
    from eddyvigil.stats.point import PointStatistics
    from eddyvigil.stats.quality import SignalQuality
    from eddyvigil.stats.weighted_point import WeightedPointStatistics

    start = time.perf_counter()
    rng = np.random.default_rng(0)
    for dtype in (np.float32, np.float64):
        for columns in (("u", "v", "w"), ("u", "v"), ("u",)):
            block = (1.0 + rng.standard_normal((9000, len(columns)))).astype(dtype)
            for rate_hz in (1000.0, None):
                stats = PointStatistics(columns, rate_hz)
                for part in np.array_split(block, 3):
                    stats.update(part, duration_s=None if rate_hz else part.shape[0] / 1000.0)
                stats.snapshot()
            if dtype is np.float64:  # random sampling's weighted kernels (all float64 inside)
                weighted = WeightedPointStatistics(columns, "transit")
                t = np.arange(block.shape[0]) * 1e-3
                weighted.update(block, times=t, weights=np.ones(block.shape[0])).snapshot()
            if len(columns) == 3:  # the signal-quality kernels: one window, per input dtype
                quality = SignalQuality(columns, "exclude")
                quality.update(block[:4200])
                quality.flush()
    from eddyvigil.stats.spectral_kernels import accumulate_power  # Welch sums: one signature

    accumulate_power(np.zeros((1, 1, 2), dtype=np.complex128), np.zeros((2, 1)))
    return time.perf_counter() - start
