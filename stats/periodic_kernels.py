"""Numba kernel of the periodic-content store (plain loops, no validation, no state).

``row_push`` turns samples into the row means of :class:`eddyvigil.stats.periodic.RowStore`:
equal-length rows of ``x - ref`` and of the second-order products ``(x - ref)_a (x - ref)_b``
(a <= b, in the order of ``monomials.layout(m).combos[2]``) with the centre time of each row,
halving the row count by pairing neighbours whenever the store is full. Checked against numpy's
reshape-and-mean in tests/test_periodic.py.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

__all__ = ["RowBundle", "row_push"]


class RowBundle(NamedTuple):
    """The row store's arrays as one kernel argument (passed as a plain tuple in this order)."""

    rows: np.ndarray  # (cap, m) row means of x - ref
    rows2: np.ndarray  # (cap, m (m + 1) / 2 or 0) row means of the products of x - ref
    times: np.ndarray  # (cap,) centre sample index of each row
    carry: np.ndarray  # (m,) sums of x - ref over the unfinished row
    carry2: np.ndarray  # (m (m + 1) / 2 or 0,) sums of the products over the unfinished row
    state: np.ndarray  # int64 (4,): full rows, row length, samples in the carry, samples seen


@numba.njit(cache=True, nogil=True)
def row_push(block, ref, bundle):  # pragma: no cover - compiled
    """Add ``block`` (n, m) to the row store (a :class:`RowBundle`); the samples seen count
    those before ``block``. A row's time is the index of its centre sample, (first + last) / 2."""
    rows, rows2, times, carry, carry2, state = bundle
    n, m = block.shape
    m2 = rows2.shape[1]
    d = np.empty(m)
    cap = rows.shape[0]
    full = state[0]
    row_len = state[1]
    carry_n = state[2]
    seen = state[3]
    i = 0
    while i < n:
        # the samples that complete (or continue) the unfinished row, added to the carry one
        # by one: one sequential sum per column and product whatever the split
        take = min(row_len - carry_n, n - i)
        for k in range(i, i + take):
            for c in range(m):
                d[c] = block[k, c] - ref[c]
                carry[c] += d[c]
            if m2:  # (none kept: the first-order rows alone)
                q = 0
                for a in range(m):
                    for b in range(a, m):
                        carry2[q] += d[a] * d[b]
                        q += 1
        carry_n += take
        i += take
        if carry_n < row_len:
            break
        if full == cap:
            # full: pair neighbours into rows twice as long; the carry becomes half a row
            half = full // 2
            for k in range(half):
                for c in range(m):
                    rows[k, c] = 0.5 * (rows[2 * k, c] + rows[2 * k + 1, c])
                for q in range(m2):
                    rows2[k, q] = 0.5 * (rows2[2 * k, q] + rows2[2 * k + 1, q])
                times[k] = 0.5 * (times[2 * k] + times[2 * k + 1])
            full = half
            row_len *= 2
            continue
        for c in range(m):
            rows[full, c] = carry[c] / row_len
            carry[c] = 0.0
        for q in range(m2):
            rows2[full, q] = carry2[q] / row_len
            carry2[q] = 0.0
        times[full] = (seen + i - 1) - 0.5 * (row_len - 1)
        full += 1
        carry_n = 0
    state[0] = full
    state[1] = row_len
    state[2] = carry_n
    state[3] = seen + n
