"""Consecutive blocks of one point joined into one call of its accumulators.

Every call of a point's accumulators (signal quality, statistics, spectra) costs a fixed
100-200 µs of Python and numba dispatch whatever the block's size, so a stream of small
messages spends most of its time there. :class:`Coalescer` holds a point's accepted blocks
until together they span :data:`COALESCE_S` of data (at most :data:`COALESCE_MAX_ROWS` rows),
and hands them on as one block; a block that alone is that long goes on at once, uncopied.

The grouping depends on the rows alone (their count, the stated rate and the dtype), never on
when they arrived or how many messages were queued, so a replay at any pace, the in-process
API and the live monitor feed the statistics the same groups: live = replay, bit for bit.
The price: the statistics (and so the dashboard's figures and the converged signal) lag the
received samples by less than :data:`COALESCE_S` of data; the trace does not lag. Rows still
pending when the point ends go to the statistics before its line is written.

>>> import numpy as np
>>> c = Coalescer(target_rows(rate_hz=20.0, seconds=0.5))  # 10 rows
>>> [g.shape[0] for g in c.add(np.zeros((4, 3), np.float32))], c.rows
([], 4)
>>> [g.shape[0] for g in c.add(np.zeros((7, 3), np.float32))], c.rows
([11], 0)
>>> [g.shape[0] for g in c.add(np.zeros((3, 3), np.float32))]
[]
>>> [g.shape[0] for g in c.flush()], c.rows
([3], 0)
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["COALESCE_S", "COALESCE_MAX_ROWS", "Coalescer", "target_rows"]

#: Data time a point's blocks may span before they go to the accumulators together (s).
COALESCE_S = 0.5
#: ... and at most this many rows (one 16384-row message already goes on alone).
COALESCE_MAX_ROWS = 16384


def target_rows(rate_hz: float, seconds: float = COALESCE_S,
                max_rows: int = COALESCE_MAX_ROWS) -> int:
    """Rows a group reaches before it is handed on: ``seconds`` of data at ``rate_hz``, at most
    ``max_rows``; 1 (every block alone) when ``seconds`` is 0."""
    if not seconds > 0 or not rate_hz > 0:
        return 1
    return max(1, min(int(max_rows), math.ceil(float(rate_hz) * float(seconds))))


class Coalescer:
    """The pending blocks of one point (uniform sampling), joined once they reach ``target``
    rows. Blocks of another dtype than the pending ones close the group first (a join would
    convert them)."""

    __slots__ = ("target", "rows", "_blocks")

    def __init__(self, target: int):
        self.target = int(target)
        self.rows = 0
        self._blocks: list[np.ndarray] = []

    def add(self, block: np.ndarray) -> tuple[np.ndarray, ...]:
        """Take a block; returns the groups due now (none, one, or two at a dtype change)."""
        if not self._blocks:
            if block.shape[0] >= self.target:
                return (block,)
            self._blocks.append(block)
            self.rows = block.shape[0]
            return ()
        if block.dtype != self._blocks[0].dtype:
            return self.flush() + self.add(block)
        self._blocks.append(block)
        self.rows += block.shape[0]
        if self.rows < self.target:
            return ()
        return self.flush()

    def flush(self) -> tuple[np.ndarray, ...]:
        """The pending rows as one group (nothing when none are pending)."""
        blocks, self._blocks, self.rows = self._blocks, [], 0
        if not blocks:
            return ()
        if len(blocks) == 1:
            return (blocks[0],)
        return (np.concatenate(blocks),)
