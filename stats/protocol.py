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

__all__ = ["Accumulator"]


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
