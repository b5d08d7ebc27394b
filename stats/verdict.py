"""The move-on verdict of one point: what a person at the facility should do now, and why.

Computed once from a :class:`~eddyvigil.stats.snapshot.PointSnapshot` as an immutable
:class:`Verdict`; the dashboard, the terminal status, the summary's point lines and the control
socket all show this one value, so they can never disagree. Pure: no I/O, no clock.

Kinds, in the words shown (``headline``):

* ``waiting`` (WAITING FOR DATA): no sample of the point yet;
* ``no-targets`` (NO TARGETS): nothing to converge;
* ``warming-up`` (WARMING UP): no targeted error bar is trustworthy yet;
* ``keep-acquiring`` (KEEP ACQUIRING): error bars are honest but some target is not met, or
  the targets are met and the record is still too short for the drift check to have power;
* ``check-signal`` (CHECK SIGNAL): the error bars are good enough, but a guard (stationarity)
  holds a statistic, or no honest interval exists for a targeted one;
* ``move-on`` (MOVE ON): every target met, and the record long enough (below).

The minimum record (the rule behind the ``converged`` signal). The stationarity guard compares
20 to 63 segment means (``stats.stationarity``); its false-flag rate and power hold while
adjacent segment means are correlated by at most about 0.1, which for an exponential
autocorrelation needs segments of at least ~10 integral times (the correlation of adjacent
means of length L is about T_int/L; from memory, after Bendat & Piersol 2010, *Random Data*
§8.2). So before ``MIN_SEGMENTS × 10 = 200`` integral times of the slowest component the guard
cannot be trusted to have seen a drift, and the verdict says KEEP ACQUIRING even if every
target is met. Where T_int is not known yet the record cannot be judged long enough.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from eddyvigil.stats.convergence import STOP_MARGIN
from eddyvigil.stats.snapshot import PointSnapshot

__all__ = [
    "KINDS",
    "HEADLINES",
    "STATE_WORDS",
    "MIN_RECORD_INTEGRAL_TIMES",
    "Verdict",
    "point_verdict",
    "state_words",
    "display_state",
    "plain_reason",
    "format_duration",
]

#: Record length (in integral times of the slowest component) before MOVE ON is said.
MIN_RECORD_INTEGRAL_TIMES = 200.0

KINDS = ("waiting", "no-targets", "warming-up", "keep-acquiring", "check-signal", "move-on")
HEADLINES = {
    "waiting": "WAITING FOR DATA",
    "no-targets": "NO TARGETS",
    "warming-up": "WARMING UP",
    "keep-acquiring": "KEEP ACQUIRING",
    "check-signal": "CHECK SIGNAL",
    "move-on": "MOVE ON",
}

#: The one table of what each statistic state (``stats.snapshot.STATES``) means in words.
STATE_WORDS = {
    "warming-up": "warming up",
    "converging": "converging",
    "confirming": "met, confirming",
    "converged": "converged",
    "suspect": "suspect",
    "no-interval": "no honest interval",
    "untargeted": "no target",
}


def display_state(e) -> str:
    """The state a row shows: ``confirming`` for a target met now whose streak is not complete.

    Snapshots that already carry ``confirming`` pass through; a ``converging`` statistic whose
    half-width (with the stopping margin) is within its target is shown as ``confirming``, so
    rows and banner tell one story.
    """
    if (e.state == "converging" and e.target is not None and math.isfinite(e.half_width)
            and STOP_MARGIN * e.half_width <= e.target):
        return "confirming"
    return e.state


def state_words(state: str) -> str:
    """Words for a statistic's state (an unknown state is shown as itself).

    >>> state_words("confirming"), state_words("something-new")
    ('met, confirming', 'something-new')
    """
    return STATE_WORDS.get(state, state)


@dataclass(frozen=True)
class Verdict:
    """What to do at one point now: ``kind`` (one of :data:`KINDS`), ``reason`` in words.

    ``met``/``targeted`` count targets; ``slowest`` and ``eta_s`` name the statistic furthest
    from its target and the acquisition time it still needs (None when unknown);
    ``record_integral_times`` is the record length over the slowest integral time;
    ``flags`` the guard findings, one short sentence per component.
    """

    kind: str
    reason: str
    met: int = 0
    targeted: int = 0
    slowest: str | None = None
    eta_s: float | None = None
    record_integral_times: float | None = None
    flags: tuple[str, ...] = ()

    @property
    def headline(self) -> str:
        return HEADLINES[self.kind]

    @property
    def move_on(self) -> bool:
        return self.kind == "move-on"

    def text(self) -> str:
        """One line: ``KEEP ACQUIRING: 3/6 targets met; slowest uv, about 42 s more``."""
        return f"{self.headline}: {self.reason}" if self.reason else self.headline

    def to_json(self) -> dict:
        """The ``"verdict"`` object of a summary point line and of control messages."""
        return {
            "kind": self.kind,
            "reason": self.reason,
            "met": self.met,
            "targeted": self.targeted,
            "slowest": self.slowest,
            "eta_s": _finite_or_none(self.eta_s),
            "record_integral_times": _finite_or_none(self.record_integral_times),
            "flags": list(self.flags),
        }


def _finite_or_none(x):
    return None if x is None or not math.isfinite(x) else float(x)


def format_duration(s: float | None, unknown: str = "unknown") -> str:
    """A duration in words a person reads at a glance (``unknown`` when there is none).

    >>> format_duration(41.6), format_duration(185), format_duration(3720), format_duration(None)
    ('42 s', '3 min 05 s', '1 h 02 min', 'unknown')
    """
    if s is None or not math.isfinite(s) or s < 0:
        return unknown
    s = round(s)
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s // 3600} h {(s % 3600) // 60:02d} min"


_DRIFT = re.compile(r"mean drifts by ([+-]?[0-9.]+) standard errors")
_HALVES = re.compile(r"halves differ by ([0-9.]+) standard errors")


def plain_reason(component: str, reason: str) -> str:
    """The guard's finding for one component, short enough for a banner.

    >>> plain_reason("u", "trend: mean drifts by +8.8 standard errors over the record "
    ...                   "(slope t = 5.1, limit 2.9); halves differ by 4.0 standard errors")
    'u: mean drifts +8.8 standard errors'
    >>> plain_reason("v", "halves differ by 4.2 standard errors (limit 3.1)")
    'v: mean steps by 4.2 standard errors between the halves'
    >>> plain_reason("w", "trend: 130 reverse arrangements outside (80, 120]")
    'w: mean trends (reverse-arrangement test)'
    """
    m = _DRIFT.search(reason)
    if m:
        return f"{component}: mean drifts {m.group(1)} standard errors"
    m = _HALVES.search(reason)
    if m:
        return f"{component}: mean steps by {m.group(1)} standard errors between the halves"
    if "reverse arrangements" in reason:
        return f"{component}: mean trends (reverse-arrangement test)"
    return f"{component}: {reason.split(';')[0].strip()}"


def _record_integral_times(snap: PointSnapshot, skip=frozenset()) -> float | None:
    """Record length over the longest finite integral time of the point's components.

    ``skip``: components whose integral time is not to be trusted (a drift inflates it: a
    drift of a few sigma turns 5 ms into seconds), left out unless every component is.
    """
    tints = []
    have = set(snap.names)
    columns = [c for c in snap.columns if c not in skip] or list(snap.columns)
    for c in columns:
        name = f"Tint_{c}"
        if name in have:
            t = snap.estimate(name).value
            if math.isfinite(t) and t > 0:
                tints.append(t)
    if len(tints) != len(columns) or not snap.duration_s > 0:
        return None
    return snap.duration_s / max(tints)


def _precise_enough(targeted) -> bool:
    """Every targeted half-width, with the stopping margin, within its target."""
    for e in targeted:
        if not (math.isfinite(e.half_width) and e.target is not None and math.isfinite(e.target)):
            return False
        if STOP_MARGIN * e.half_width > e.target:
            return False
    return True


def point_verdict(snap: PointSnapshot | None) -> Verdict:
    """The verdict for a point's current statistics (None or no samples: ``waiting``).

    A suspect statistic (stationarity guard) gives CHECK SIGNAL once the guard has power
    (the record spans ``MIN_RECORD_INTEGRAL_TIMES``) or the error bars are otherwise good
    enough (the guard is then what stands between the user and moving on). Before that the
    guard, re-tested at every look, fires now and then on stationary data (a few per cent of
    looks), so the verdict keeps acquiring and lists what was flagged so far. A drift inflates
    the error bars, so waiting for them alone would hide it.
    """
    if snap is None or snap.samples == 0:
        return Verdict("waiting", "no samples of this point yet")
    targeted = snap.targeted()
    record = _record_integral_times(snap)
    flags = tuple(plain_reason(c, r) for c, r in sorted(snap.suspect.items()))
    met = sum(1 for e in targeted if e.converged)
    n = len(targeted)
    base = dict(met=met, targeted=n, record_integral_times=record, flags=flags)
    if not targeted:
        return Verdict("no-targets", "nothing to converge", **base)
    slow = snap.slowest()
    slow_name = slow.name if slow is not None else None
    slow_eta = slow.eta_s if slow is not None else None
    base.update(slowest=slow_name, eta_s=slow_eta)
    no_interval = [e for e in targeted if e.state == "no-interval"]
    suspect = [e for e in targeted if e.state == "suspect"]
    # the guard's power is judged on the components it did not flag
    guarded = _record_integral_times(snap, skip=frozenset(snap.suspect))
    long_enough = guarded is not None and guarded >= MIN_RECORD_INTEGRAL_TIMES
    if (flags or suspect) and (long_enough or _precise_enough(targeted)):
        words = "; ".join(flags) or "; ".join(f"{e.name}: {e.reason}" for e in suspect)
        return Verdict("check-signal", f"not stationary: {words}", **base)
    if no_interval and all(e.converged or e in no_interval for e in targeted):
        words = "; ".join(f"{e.name}: {e.reason or 'no honest error bar'}" for e in no_interval)
        return Verdict("check-signal", f"no honest interval for {words}", **base)
    flagged = f"; flagged so far: {'; '.join(flags)}" if flags else ""
    if snap.converged:
        if record is None or record < MIN_RECORD_INTEGRAL_TIMES:
            have = "unknown" if record is None else f"{record:.0f}"
            return Verdict(
                "keep-acquiring",
                f"all {n} targets met; the record spans {have} integral times, "
                f"{MIN_RECORD_INTEGRAL_TIMES:.0f} needed before the drift check can be trusted",
                **base,
            )
        return Verdict("move-on", f"all {n} targets met after {format_duration(snap.converged_at_s)}"
                       f" of data", **base)
    if all(e.state in ("warming-up", "suspect") for e in targeted) and suspect != list(targeted):
        return Verdict("warming-up", "too few blocks for an honest error bar yet" + flagged,
                       **base)
    eta = "time still needed unknown" if slow_eta is None else f"about {format_duration(slow_eta)} more"
    confirming = sum(1 for e in targeted if display_state(e) == "confirming")
    conf = f", {confirming} confirming" if confirming else ""
    return Verdict("keep-acquiring",
                   f"{met}/{n} targets met{conf}; slowest {slow_name}, {eta}" + flagged, **base)
