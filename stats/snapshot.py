"""Immutable views of a point's statistics, as readers (summary, dashboard, control) see them.

A pipeline builds a new snapshot a few times per second and publishes it by rebinding one
attribute; nothing in here is ever mutated after construction.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import NamedTuple

__all__ = ["Estimate", "PointSnapshot", "STATES"]

#: States a statistic can be in, in the order a run passes through them.
#: ``warming-up``: the error bar is not yet trustworthy (too few blocks, or a record or blocks
#: too short against the integral time); ``converging``: the error bar is trustworthy but wider
#: than the target; ``confirming``: the target was met at the last checkpoint, the streak of
#: checkpoints is not complete; ``converged``: target met at every checkpoint of the streak;
#: ``suspect``: a guard holds it (stationarity of a component it depends on, slow content
#: under the blocking curve); ``no-interval``: no honest interval exists (tails too heavy for
#: the moments the error needs, or k resting on an unverifiable model), value only;
#: ``untargeted``: no target was set (value and error bar still reported).
STATES = (
    "warming-up",
    "converging",
    "confirming",
    "converged",
    "suspect",
    "no-interval",
    "untargeted",
)


def _finite_or_none(x: float | None) -> float | None:
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


class Estimate(NamedTuple):
    """One statistic at one moment of one point (immutable).

    ``target`` is the allowed half-width of the interval in the statistic's units (already
    resolved from a relative target), ``half_width`` the current one, ``eta_s`` the predicted
    acquisition time still needed (0 once converged, None when it cannot be predicted).
    A named tuple rather than a frozen dataclass: a snapshot builds ~50 of them a few times a
    second, and a tuple is built several times faster.
    """

    name: str
    value: float
    stderr: float
    ci_low: float
    ci_high: float
    half_width: float
    target: float | None
    converged: bool | None
    eta_s: float | None
    state: str
    blocks: int = 0
    reason: str | None = None
    #: standard error the record does not resolve yet (slow content: sqrt(V_top - V) of the
    #: blocking curve's rise above the chosen level, or sqrt(V_low - V) of the means' low-band
    #: estimate, stats.slow_spectrum); ``stderr`` is the resolved part. In the summary entry
    #: as ``unresolved`` when above 0; on the status board beside the value
    unresolved: float = 0.0
    #: how the error was found where it was not by plain blocking (None: blocking), e.g. a
    #: line taken out first (stats.periodic)
    error_method: str | None = None

    def to_json(self) -> dict:
        """The entry of DESIGN §4 ``statistics`` (non-finite numbers become null)."""
        out = {
            "name": self.name,
            "value": _finite_or_none(self.value),
            "stderr": _finite_or_none(self.stderr),
            "ci_low": _finite_or_none(self.ci_low),
            "ci_high": _finite_or_none(self.ci_high),
            "target": _finite_or_none(self.target),
            "converged": self.converged,
            "eta_s": _finite_or_none(self.eta_s),
            "state": self.state,
            "blocks": int(self.blocks),
        }
        if self.error_method is not None:
            out["error_method"] = self.error_method
        if self.unresolved > 0 and math.isfinite(self.unresolved):
            out["unresolved"] = float(self.unresolved)
        return out


@dataclass(frozen=True, slots=True)
class PointSnapshot:
    """All statistics of one measurement point at one moment."""

    columns: tuple[str, ...]
    samples: int
    duration_s: float
    confidence: float
    estimates: tuple[Estimate, ...]
    converged: bool
    converged_at_s: float | None
    k_method: str
    suspect: Mapping[str, str] = field(default_factory=dict)

    def __post_init__(self):
        object.__setattr__(self, "suspect", MappingProxyType(dict(self.suspect)))

    def estimate(self, name: str) -> Estimate:
        for e in self.estimates:
            if e.name == name:
                return e
        raise KeyError(name)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(e.name for e in self.estimates)

    def targeted(self) -> tuple[Estimate, ...]:
        return tuple(e for e in self.estimates if e.target is not None)

    def slowest(self) -> Estimate | None:
        """The targeted statistic furthest from its target (largest ETA; unknown ETA first);
        rows without an honest interval do not count (the point's verdict does not wait)."""
        open_ = [e for e in self.targeted() if not e.converged and e.state != "no-interval"]
        if not open_:
            return None
        return max(open_, key=lambda e: math.inf if e.eta_s is None else e.eta_s)

    def statistics_json(self) -> list[dict]:
        return [e.to_json() for e in self.estimates]

    def summary_fields(self) -> dict:
        """The statistics part of a DESIGN §4 point line (the pipeline adds stream, point...)."""
        return {
            "samples": int(self.samples),
            "duration_s": float(self.duration_s),
            "confidence": float(self.confidence),
            "converged": bool(self.converged),
            "converged_at_s": _finite_or_none(self.converged_at_s),
            "k_method": self.k_method,
            "suspect": dict(self.suspect),
            "statistics": self.statistics_json(),
        }
