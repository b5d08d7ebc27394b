"""Sequence accounting of one stream: its session, the ``seq`` it expects, gaps and losses.

A publisher numbers every message of a session ``0, 1, 2, ...`` (DESIGN §2). From those
numbers alone :class:`SequenceAccount` tells a repeated message from a lost one:

- The first message seen of a session sets the baseline: messages a publisher sent before
  the monitor listened are not losses.
- A ``seq`` at or below the last one seen in the same session is a duplicate.
- A jump forward is a gap; the missing count is the loss, less the messages of that stream
  that arrived in the meantime but were too broken to read a ``seq`` from (they consumed a
  ``seq`` yet cannot be placed: :meth:`SequenceAccount.unreadable`).
- A new session is a publisher restart: fresh expectations, one more restart counted.
- A message of a session that a restart already ended is *late* (:meth:`is_late`): with
  PUSH/PULL a lagging monitor may still hold messages of the old connection when the
  restarted publisher's arrive, and ZeroMQ queues the two connections fairly, so they
  interleave. Such a message is not another restart (the pipeline rejects it as
  ``late_session``): otherwise every interleaving would end a point.

It knows nothing of points: the stream charges a loss to its current point or the next
(:meth:`eddyvigil.monitor.stream.StreamState.charge_loss`), and the pipeline finishes the
current point at a restart, before the account takes the new session, so the point's line
names the session it belonged to.

>>> account = SequenceAccount()
>>> account.check("s1", 5)  # the baseline
SeqOutcome(duplicate=False, lost=0)
>>> account.check("s1", 9)  # 6, 7 and 8 never came
SeqOutcome(duplicate=False, lost=3)
>>> account.check("s1", 9)
SeqOutcome(duplicate=True, lost=0)
>>> account.gaps, account.lost, account.restarts
(1, 3, 0)
"""

from __future__ import annotations

from collections import deque
from typing import NamedTuple

__all__ = ["SeqOutcome", "SequenceAccount"]


class SeqOutcome(NamedTuple):
    """What one ``(session, seq)`` pair says: a duplicate, or how many messages were lost."""

    duplicate: bool
    lost: int


#: Ended sessions remembered per stream (late messages of older ones count as restarts).
ENDED_SESSIONS = 64


class SequenceAccount:
    """Session, expected ``seq``, gaps, losses and restarts of one stream (totals of the run)."""

    def __init__(self) -> None:
        self.session: str | None = None
        self.ended: deque[str] = deque(maxlen=ENDED_SESSIONS)  # sessions a restart ended
        self.expected_seq: int | None = None
        self.unreadable_pending = 0
        self.gaps = 0
        self.lost = 0
        self.restarts = 0

    def is_restart(self, session: str) -> bool:
        """True when ``session`` is not the stream's current one (a baseline exists)."""
        return self.session is not None and session != self.session

    def is_late(self, session: str) -> bool:
        """True when ``session`` is one a restart of this stream already ended."""
        return session != self.session and session in self.ended

    def unreadable(self) -> None:
        """A message of this stream arrived too broken to read its ``seq``: it consumed one."""
        self.unreadable_pending += 1

    def check(self, session: str, seq: int) -> SeqOutcome:
        """Account for one message; a restart (see :meth:`is_restart`) starts fresh."""
        if self.session is None or session != self.session:
            if self.session is not None:
                self.restarts += 1
                self.unreadable_pending = 0
                self.ended.append(self.session)
            self.session, self.expected_seq = session, seq + 1
            return SeqOutcome(False, 0)
        if seq < self.expected_seq:
            return SeqOutcome(True, 0)
        lost = 0
        if seq > self.expected_seq:
            lost = max(0, seq - self.expected_seq - self.unreadable_pending)
            if lost:
                self.gaps += 1
                self.lost += lost
        self.unreadable_pending = 0
        self.expected_seq = seq + 1
        return SeqOutcome(False, lost)
