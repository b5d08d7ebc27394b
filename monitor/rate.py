"""The received sample rate of a stream: one definition, used by the terminal and the page.

The rate is *samples accepted per second of wall clock over the last* :data:`WINDOW_S`
*seconds*, per stream: with the arrival marks ``(t_i, cumulative samples_i)`` of the accepted
blocks that fall in the window, it is ``(samples_last - samples_first) / (now - t_first)``,
i.e. the samples that arrived after the first mark in the window, over the time since it.
A block counts at its arrival, so a steady publisher of R samples/s in blocks of n reads
R (n / (now - t_first) of bias at most one block, which is why the window is seconds long).
Before two marks exist the rate is unknown (None: shown as an en dash, never as 0); when no
block has arrived for a whole window it is 0.
"""

from __future__ import annotations

import math
from collections import deque

__all__ = ["WINDOW_S", "ReceiveRate", "format_rate"]

#: Window of the received rate (s of wall clock).
WINDOW_S = 2.0


class ReceiveRate:
    """Arrival marks of one stream's accepted blocks; :meth:`rate_hz` over the last window.

    >>> r = ReceiveRate()
    >>> r.rate_hz(0.0) is None
    True
    >>> for i in range(21):            # 500 samples every 0.05 s: 10 kHz
    ...     r.add(0.05 * i, 500)
    >>> round(r.rate_hz(1.0))
    10000
    >>> r.rate_hz(4.0)                 # nothing for a whole window
    0.0
    """

    def __init__(self, window_s: float = WINDOW_S):
        self.window_s = float(window_s)
        self.total = 0
        self._marks: deque[tuple[float, int]] = deque()
        self._seen = False

    def add(self, now: float, samples: int) -> None:
        """``samples`` accepted at wall time ``now`` (s, monotonic)."""
        self.total += int(samples)
        self._marks.append((float(now), self.total))
        self._seen = True
        self._trim(now)

    def _trim(self, now: float) -> None:
        while self._marks and self._marks[0][0] < now - self.window_s:
            self._marks.popleft()

    def rate_hz(self, now: float) -> float | None:
        """Samples per second over the last window; None while unknown, 0 after a silence."""
        self._trim(now)
        if not self._marks:
            return 0.0 if self._seen else None
        t0, n0 = self._marks[0]
        if len(self._marks) < 2 or now <= t0:
            return None
        return (self._marks[-1][1] - n0) / (now - t0)


def format_rate(hz: float | None) -> str:
    """A rate for people, one format everywhere: three significant figures with a unit.

    >>> format_rate(10_012.4), format_rate(850.0), format_rate(2.05e6), format_rate(0.0)
    ('10.0 kHz', '850 Hz', '2.05 MHz', '0 Hz')
    >>> format_rate(None)
    '–'
    """
    if hz is None or not math.isfinite(hz):
        return "–"
    for unit, div in (("MHz", 1e6), ("kHz", 1e3)):
        if abs(hz) >= div:
            return f"{hz / div:#.3g} {unit}".replace(". ", " ")
    if hz == 0:
        return "0 Hz"
    return f"{hz:#.3g} Hz".replace(". ", " ") if hz < 100 else f"{hz:.0f} Hz"
