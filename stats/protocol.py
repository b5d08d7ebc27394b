"""The one interface every accumulator of ``stats/`` offers.

An accumulator takes samples in blocks and can be combined with another one built on other
samples; the classes of this package that do so
(:class:`~eddyvigil.stats.moments.MomentAccumulator`,
:class:`~eddyvigil.stats.blocking.BlockingAccumulator`,
:class:`~eddyvigil.stats.point.PointStatistics`) all satisfy :class:`Accumulator`:

``update(block) -> self``
    take a block (n, m) of samples in time order; mutates and returns the accumulator.
``merge(other) -> new``
    a new accumulator over both inputs' samples; never mutates either input.
``snapshot() -> value``
    an immutable view of what is known now (read-only arrays or frozen dataclasses).
``copy() -> new``
    an independent copy: updating one never changes the other.
``empty(...)``
    a class method returning an accumulator with no samples.
``n``
    the number of samples taken in.

Accumulators are also picklable and compare equal (``==``) when their states agree bit for bit.

>>> from eddyvigil.stats.moments import MomentAccumulator
>>> isinstance(MomentAccumulator(1), Accumulator)
True
"""

from __future__ import annotations

from typing import Any, Protocol, Self, runtime_checkable

__all__ = ["Accumulator", "same_fields"]


@runtime_checkable
class Accumulator(Protocol):
    """Structural type of the accumulators (module docstring)."""

    n: int

    def update(self, block: Any) -> Self: ...

    def merge(self, other: Self) -> Self: ...

    def snapshot(self) -> Any: ...

    def copy(self) -> Self: ...

    @classmethod
    def empty(cls, *args: Any, **kwargs: Any) -> Self: ...


def same_fields(a: object, b: object, skip: tuple[str, ...] = ()) -> bool:
    """True when ``a`` and ``b`` hold the same attributes, array for array bit for bit (NaN
    equal to NaN) and the rest by ``==``; attributes named in ``skip`` are not compared (the
    ``__eq__`` of a state-holding class)."""
    import numpy as np

    if a.__dict__.keys() != b.__dict__.keys():
        return False
    for k, v in a.__dict__.items():
        if k in skip:
            continue
        w = b.__dict__[k]
        if isinstance(v, np.ndarray) or isinstance(w, np.ndarray):
            if not (isinstance(v, np.ndarray) and isinstance(w, np.ndarray)):
                return False
            if v.shape != w.shape or not np.array_equal(v, w, equal_nan=v.dtype.kind == "f"):
                return False
        elif v != w:
            return False
    return True
