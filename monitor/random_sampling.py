"""The pipeline's hook for randomly sampled (laser-Doppler) streams: which weighting a point
uses, and rows handed to its statistics with their own times and weights.

The quality layer may hold rows back (``--quality exclude`` releases replaced rows later, in
order), so the times and weights of the rows received wait in a first-in, first-out queue
and leave it with the rows the statistics take.

What a person reads about random sampling, worded once for the dashboard and the terminal:
:func:`random_sampling_notes` (sentences, each flagged or not) and
:func:`random_sampling_status` (a few words for the status line), both from the point's
DESIGN §10 fields (``WeightedPointStatistics.random_sampling_fields``).
"""

from __future__ import annotations

import math

import numpy as np

from eddyvigil.stats.weighted_point import MIN_SAMPLES_PER_TINT, WeightedPointStatistics

__all__ = [
    "RandomFeed",
    "random_sampling_notes",
    "random_sampling_status",
    "random_sampling_view",
    "weighting_for",
]

#: what each weighting means, in words
WEIGHTING_WORDS = {
    "transit": "transit-time weighting (residence times from the weight column)",
    "arrival": "arrival-time weighting (gaps between arrivals; fair with about 10 or more "
    "samples per integral time)",
    "none": "no weighting: averages lean towards high speeds (velocity bias)",
}


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


def random_sampling_view(point_run) -> dict | None:
    """The point's DESIGN §10 fields for readers; None for uniform sampling or no point."""
    if point_run is None or point_run.random is None:
        return None
    return point_run.random.stats.random_sampling_fields()


def _per_tint(rs) -> dict:
    return {c: v for c, v in (rs.get("samples_per_tint") or {}).items() if v is not None}


def random_sampling_notes(fields) -> list[tuple[str, bool]]:
    """Plain sentences about a randomly sampled point, each with ``True`` where it warns:
    the weighting used, the data rate per integral time (fewer than about 10 samples per
    T_int said plainly), the dead-time check, and that no spectrum is computed.

    >>> fields = {"weighting": "transit", "random_sampling": {"data_rate_hz": 1000.0,
    ...     "samples_per_tint": {"u": 4.0}, "dead_time": {"suspected": False, "short_gaps": 95,
    ...     "expected_short_gaps": 95.2}}}
    >>> [flag for _, flag in random_sampling_notes(fields)]
    [False, True, False, False]
    """
    rs = fields.get("random_sampling") or {}
    weighting = fields.get("weighting")
    notes = [(f"random sampling, {WEIGHTING_WORDS.get(weighting, str(weighting))}",
              weighting == "none")]  # fmt: skip
    rate = rs.get("data_rate_hz")
    per = _per_tint(rs)
    if rate is None or not math.isfinite(rate):
        notes.append(("data rate: not known yet", False))
    elif not per:
        notes.append((f"data rate {rate:.4g}/s; integral time scale not found yet, so the "
                       "samples per T_int are not known", False))  # fmt: skip
    else:
        each = ", ".join(f"{v:.3g} per T_int of {c}" for c, v in per.items())
        low = [c for c, v in per.items() if v < MIN_SAMPLES_PER_TINT]
        if low:
            notes.append((f"data rate {rate:.4g}/s: {each}. That is fewer than about "
                          f"{MIN_SAMPLES_PER_TINT:g} samples per T_int ({', '.join(low)}): too "
                          "few to resolve the integral time scale; T_int and arrival-time "
                          "weighting are rough", True))  # fmt: skip
        else:
            notes.append((f"data rate {rate:.4g}/s: {each}", False))
    dead = rs.get("dead_time") or {}
    if dead.get("suspected") is None:
        notes.append(("dead-time check: waiting for 100 gaps between arrivals", False))
    elif dead["suspected"]:
        notes.append((f"dead time suspected: {dead['short_gaps']} gaps below 0.1 x the mean "
                      f"gap, {dead['expected_short_gaps']} expected for Poisson arrivals", True))
    else:
        notes.append((f"dead-time check passed: {dead['short_gaps']} short gaps, "
                      f"{dead['expected_short_gaps']} expected for Poisson arrivals", False))
    notes.append(("no spectrum is computed for random sampling (no eps, eta or Re_lambda)",
                  False))  # fmt: skip
    return notes


def random_sampling_status(fields) -> str:
    """A few words for the terminal status line, e.g.
    ``[LDV transit, 4 samples/T_int: too few (< 10), dead time ok, no spectrum]``."""
    rs = fields.get("random_sampling") or {}
    per = _per_tint(rs)
    words = [f"LDV {fields.get('weighting')}"]
    if per:
        low = min(per.values())
        words.append(f"{low:.3g} samples/T_int" + (
            f": too few (< {MIN_SAMPLES_PER_TINT:g})" if low < MIN_SAMPLES_PER_TINT else ""))
    dead = (rs.get("dead_time") or {}).get("suspected")
    words.append({None: "dead time ?", False: "dead time ok", True: "DEAD TIME SUSPECTED"}[dead])
    words.append("no spectrum")
    return "[" + ", ".join(words) + "]"
