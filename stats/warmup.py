"""Load (or, on the first run after installing, compile) the numba kernels of the core.

numba compiles a kernel the first time it is called and keeps the machine code on disk
(``cache=True``), so a fresh install spends about 20 s compiling on its first block (1-2 s
loading later). The monitor does not wait for that with its socket closed: it opens the
socket at once and runs :class:`KernelWarmup` in a background thread, keeping every message
that arrives meanwhile in order (see ``monitor/subscriber.py``) until :attr:`KernelWarmup.ready`.

Order of work: the common case first (float32 samples, three components: about 80 % of the
compile), then ``ready``, then float64 (the other wire dtype). A float64 stream arriving
before that finishes waits for it inside numba (its compiler lock), exactly as it would
without a warm-up. Which kernels are compiled, and when, never changes a result: every
block enters the kernels as one array type per dtype (``kernels.kernel_view``), and the
machine code for that type is the same whenever it is made.
"""

from __future__ import annotations

import threading
import time

import numpy as np

__all__ = ["prepare_kernels", "exercise", "KernelWarmup"]

#: (dtype, columns) in the order they are prepared; the first is the one ``ready`` waits for.
PLAN = (
    (np.float32, ("u", "v", "w")),
    (np.float32, ("u", "v")),
    (np.float32, ("u",)),
    (np.float64, ("u", "v", "w")),
    (np.float64, ("u", "v")),
    (np.float64, ("u",)),
)


def exercise(dtype, columns) -> None:
    """Run every kernel a stream of ``dtype`` and ``columns`` needs once on a small block:
    uniform and random sampling, checkpoints and a snapshot."""
    from eddyvigil.stats.point import PointStatistics
    from eddyvigil.stats.quality import SignalQuality
    from eddyvigil.stats.spectra import SpectrumAccumulator

    rng = np.random.default_rng(0)
    block = (1.0 + rng.standard_normal((9000, len(columns)))).astype(dtype)
    for rate_hz in (1000.0, None):
        stats = PointStatistics(columns, rate_hz)
        for part in np.array_split(block, 3):
            stats.update(part, duration_s=None if rate_hz else part.shape[0] / 1000.0)
        stats.snapshot()
    if dtype is np.float64:  # random sampling's weighted kernels (all float64 inside)
        from eddyvigil.stats.weighted_point import WeightedPointStatistics

        weighted = WeightedPointStatistics(columns, "transit")
        t = np.arange(block.shape[0]) * 1e-3
        weighted.update(block, times=t, weights=np.ones(block.shape[0])).snapshot()
    if len(columns) == 3:  # the signal-quality kernels: one window, per input dtype
        quality = SignalQuality(columns, "exclude")
        quality.update(block[:4200])
        quality.flush()
    # the Welch kernels (window_pairs, accumulate_pairs, accumulate_pair_groups) for this dtype,
    # through the class
    SpectrumAccumulator(columns, 1000.0, segment=256).update(block[:1500]).snapshot()
    if dtype is np.float64 and len(columns) == 3:  # dissipation's flat-range search (float64)
        from eddyvigil.stats.dissipation import _flattest_band

        f = np.geomspace(1.0, 100.0, 12)
        _flattest_band(f, np.ones(12), np.full(12, 400.0), np.ones(12, dtype=bool))
    if len(columns) == 2:  # rakes and fields (field_kernels): masked and unmasked ingest
        from eddyvigil.stats.field import FieldStatistics

        snaps = block[:600].reshape(300, 2, 2)
        field = FieldStatistics(columns, 2, 1000.0)
        field.update(snaps[:150])
        field.update(snaps[150:], valid=np.arange(300)[150:, None] % 7 != np.array([3, 4]))
        field.snapshot()


def prepare_kernels() -> float:
    """Every kernel of :data:`PLAN`, in this thread; returns the seconds it took."""
    start = time.perf_counter()
    for dtype, columns in PLAN:
        exercise(dtype, columns)
    return time.perf_counter() - start


class KernelWarmup:
    """:func:`prepare_kernels` in a daemon thread, with events for who waits on it.

    ``imported``: the statistics modules are loaded (a pipeline can be built);
    ``ready``: the common case (:data:`PLAN`'s first entry) is compiled or loaded;
    ``done``: all of :data:`PLAN`. A failure still sets all three (the kernels then compile
    when first used, as without a warm-up) and is kept in ``error``.
    """

    def __init__(self):
        self.imported = threading.Event()
        self.ready = threading.Event()
        self.done = threading.Event()
        self.ready_after_s: float | None = None
        self.done_after_s: float | None = None
        self.error: str | None = None
        self._thread = threading.Thread(target=self._run, name="eddyvigil-warmup", daemon=True)

    def start(self) -> KernelWarmup:
        self._started = time.perf_counter()
        self._thread.start()
        return self

    def _run(self) -> None:
        try:
            import eddyvigil.stats.point  # noqa: F401  (numba, scipy: the slow imports)

            self.imported.set()
            for i, (dtype, columns) in enumerate(PLAN):
                exercise(dtype, columns)
                if i == 0:
                    self.ready_after_s = time.perf_counter() - self._started
                    self.ready.set()
            self.done_after_s = time.perf_counter() - self._started
        except Exception as exc:  # never leave a waiter hanging
            self.error = f"{type(exc).__name__}: {exc}"
        finally:
            self.imported.set()
            self.ready.set()
            self.done.set()

    def join(self, timeout: float | None = None) -> None:
        self._thread.join(timeout)
