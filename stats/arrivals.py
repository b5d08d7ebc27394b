"""Inter-arrival times of randomly sampled data: a dead-time check and the data rate.

For Poisson arrivals the gaps are exponential: a fraction ``1 - exp(-0.1) = 0.0952`` of them
is shorter than a tenth of the mean gap. A processor with a dead time (it cannot validate a
new burst while busy with the last one) leaves too few short gaps. The check compares the
count of gaps below ``0.1 x`` the mean gap with the binomial expectation (common practice;
dead-time effects: Velte, Buchhave & George, arXiv 1906.05337).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["ArrivalCheck"]

_EDGES = np.logspace(-9, 3, 1201)  # gap histogram, 100 bins per decade (s)
SHORT = 0.1  # gaps below SHORT x mean count as short
EXPECTED_SHORT = 1.0 - math.exp(-SHORT)


class ArrivalCheck:
    """Histogram of inter-arrival gaps, shortest gap, count and total time."""

    def __init__(self):
        self.counts = np.zeros(_EDGES.size - 1, dtype=np.int64)
        self.n_gaps = 0
        self.total_s = 0.0
        self.shortest_s = math.inf
        self.last_t: float | None = None

    def copy(self) -> ArrivalCheck:
        new = ArrivalCheck()
        new.counts = self.counts.copy()
        new.n_gaps, new.total_s = self.n_gaps, self.total_s
        new.shortest_s, new.last_t = self.shortest_s, self.last_t
        return new

    def merge(self, other: ArrivalCheck) -> ArrivalCheck:
        """Both records' gaps (independent records: no gap across them); a new object."""
        new = self.copy()
        new.counts = self.counts + other.counts
        new.n_gaps = self.n_gaps + other.n_gaps
        new.total_s = self.total_s + other.total_s
        new.shortest_s = min(self.shortest_s, other.shortest_s)
        new.last_t = None
        return new

    def update(self, t: np.ndarray) -> None:
        t = np.asarray(t, dtype=np.float64)
        if t.shape[0] == 0:
            return
        gaps = np.diff(t) if self.last_t is None else np.diff(np.r_[self.last_t, t])
        self.last_t = float(t[-1])
        if gaps.shape[0] == 0:
            return
        self.counts += np.histogram(np.clip(gaps, 1e-9, 1e3), _EDGES)[0]
        self.n_gaps += gaps.shape[0]
        self.total_s += float(gaps.sum())
        self.shortest_s = min(self.shortest_s, float(gaps.min()))

    def rate_hz(self) -> float:
        return self.n_gaps / self.total_s if self.total_s > 0 else math.nan

    def dead_time(self) -> dict:
        """``{"short_gaps", "expected_short_gaps", "z", "suspected", "shortest_gap_s"}``;
        suspected when fewer than half the expected short gaps arrived and z < -5."""
        if self.n_gaps < 100:
            return {"short_gaps": None, "expected_short_gaps": None, "z": None,
                    "suspected": None, "shortest_gap_s": None}  # fmt: skip
        mean = self.total_s / self.n_gaps
        short = int(self.counts[: int(np.searchsorted(_EDGES, SHORT * mean)) - 1].sum())
        expected = self.n_gaps * EXPECTED_SHORT
        z = (short - expected) / math.sqrt(expected * (1 - EXPECTED_SHORT))
        return {
            "short_gaps": short,
            "expected_short_gaps": round(expected, 1),
            "z": round(z, 2),
            "suspected": bool(short < 0.5 * expected and z < -5),
            "shortest_gap_s": self.shortest_s,
        }
