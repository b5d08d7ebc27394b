"""Closed-loop stopping on the verdict, for the coverage tests and benchmarks/bench_stopping.py.

Feeds a record block by block to a PointStatistics, stops at the first snapshot whose point is
converged, and reports for every targeted statistic whether the truth is outside the interval
then. Not part of the product.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from eddyvigil.stats import PointStatistics


@dataclass
class Stop:
    samples: int | None  # None: never converged within the record
    miss: dict  # name -> truth outside the interval at the stop (False when not stopped)
    withheld: dict  # name -> no interval shown at the stop / end
    history: list  # (samples, predicted total samples) at each checkpoint with an ETA
    snap: object

    def eta_ratio(self, fraction: float) -> float:
        """Predicted / actual total record at the checkpoint nearest ``fraction`` of the stop."""
        if not self.samples or not self.history:
            return float("nan")
        n, total = min(self.history, key=lambda h: abs(h[0] - fraction * self.samples))
        return total / self.samples


def run_until_converged(x, columns, targets, truth, block=4096, rate_hz=1000.0):
    """Stop on ``converged`` (or the record's end), noting the ETA at every checkpoint."""
    ps = PointStatistics(columns, rate_hz=rate_hz, targets=targets)
    history = []
    for k in range(0, x.shape[0], block):
        ps.update(x[k : k + block])
        if ps._checkpoint_ev is not None:
            snap = ps.targeted_snapshot()
            if snap.converged:
                break
            slow = snap.slowest()
            if slow is not None and slow.eta_s is not None:
                history.append((ps.n, ps.n + slow.eta_s * rate_hz))
    snap = ps.snapshot()
    stopped = snap.converged
    miss, withheld = {}, {}
    for name, want in truth.items():
        e = snap.estimate(name)
        withheld[name] = not np.isfinite(e.ci_low)
        miss[name] = bool(stopped and not withheld[name] and not e.ci_low <= want <= e.ci_high)
    return Stop(snap.samples if stopped else None, miss, withheld, history, snap)
