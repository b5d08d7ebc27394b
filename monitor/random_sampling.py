"""The pipeline's hook for randomly sampled (laser-Doppler) streams: which weighting a point
uses, and rows handed to its statistics with their own times and weights.

The quality layer may hold rows back (``--quality exclude`` releases replaced rows later, in
order), so the times and weights of the rows received wait in a first-in, first-out queue
and leave it with the rows the statistics take.
"""

from __future__ import annotations

import numpy as np

from eddyvigil.stats.weighted_point import WeightedPointStatistics

__all__ = ["RandomFeed", "weighting_for"]


def weighting_for(has_weight: bool, fallback: str) -> str:
    """DESIGN §10: ``transit`` when a weight column is present, else the chosen fallback."""
    return "transit" if has_weight else fallback


class RandomFeed:
    """Times/weights queue of one point, and its :class:`WeightedPointStatistics`."""

    def __init__(self, columns, has_weight: bool, fallback: str, targets):
        self.weighting = weighting_for(has_weight, fallback)
        self.stats = WeightedPointStatistics(columns, self.weighting, targets=targets)
        self._t: list[np.ndarray] = []
        self._w: list[np.ndarray] = []

    def check(self, weights) -> str | None:
        """A rejection reason for a block that does not fit this point's weighting."""
        if (weights is not None) != (self.weighting == "transit"):
            return "layout_changed"  # a weight column appeared or vanished within the point
        if weights is not None and not bool(np.all(np.asarray(weights) >= 0)):
            return "bad_weight"
        return None

    def no_weights(self):
        """What ``feed`` takes as the weights of rows that bring none (a flushed tail)."""
        return np.empty(0) if self.weighting == "transit" else None

    def feed(self, rows: np.ndarray, times, weights, duration_s: float) -> None:
        """Queue this block's times/weights; hand ``rows`` (what quality released) on."""
        self._t.append(np.asarray(times, dtype=np.float64))
        if weights is not None:
            self._w.append(np.asarray(weights, dtype=np.float64))
        k = rows.shape[0]
        if k == 0:
            return
        t = np.concatenate(self._t)
        self._t = [t[k:]]
        w = None
        if self._w:
            wa = np.concatenate(self._w)
            self._w = [wa[k:]]
            w = wa[:k]
        self.stats.update(rows, duration_s, times=t[:k], weights=w)
