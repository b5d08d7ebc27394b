"""Convergence on the dissipation rate: a target on ``eps``, its state and ETA.

``eps`` comes from the spectra (``stats/point_spectra.py``), not from the moment accumulators,
so its target is judged here, beside them, with the same vocabulary as every statistic
(``stats/convergence.py``): ``warming-up``, ``converging``, ``confirming``, ``converged``,
``no-interval``, ``untargeted``.

A relative target on ``eps`` is relative to ``k^{3/2}/L_u``, the rate at which the large eddies
hand energy to the cascade (Taylor 1935; Pope 2000, Turbulent Flows, §6.1: ε ≈ 0.4-0.5
k^{3/2}/L11 at high Reynolds number, from memory). Unlike ε itself it cannot vanish while there
is turbulence, and it comes from the moments, not from the quantity being judged (a tolerance
relative to the estimate itself would move with the estimate). ``{ relative = 0.05 }`` allows a
half-width of 5 % of ``k^{3/2}/L_u``, about 10 % of ε itself. ``{ absolute = X }`` is in m²/s³.

State: ``no-interval`` while ε has no interval (no inertial range and no resolved dissipation
range yet, or no flat range at all: the reason is given); ``warming-up`` before
:data:`MIN_SEGMENTS` Welch segments (the χ² scatter of the bands and the flatness test need
them); ``converging`` while the half-width exceeds the target; ``confirming`` when it is met
at fewer than :data:`STREAK` consecutive evaluations (each on new segments); ``converged``
after that. The ETA assumes the half-width falls as 1/√T (independent segments:
Var ∝ 1/segments; Welch 1967), so the record needed is ``T (h/target)^2``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["MIN_SEGMENTS", "STREAK", "EpsStatus", "EpsTarget", "eps_scale"]

#: Welch segments before the half-width of ε is trusted for a verdict.
MIN_SEGMENTS = 32
#: Consecutive evaluations (each on new segments) meeting the target before "converged".
STREAK = 3


def eps_scale(k: float, length_m: float) -> float:
    """``k^{3/2}/L``: NaN when either is not a usable positive number yet.

    >>> round(eps_scale(0.5, 0.04), 4)
    8.8388
    >>> math.isnan(eps_scale(float("nan"), 0.04)), math.isnan(eps_scale(0.5, 0.0))
    (True, True)
    """
    k, length_m = float(k), float(length_m)
    if not (k > 0 and length_m > 0 and math.isfinite(k) and math.isfinite(length_m)):
        return math.nan
    return k**1.5 / length_m


@dataclass(frozen=True)
class EpsStatus:
    """The targeted-statistic fields of the ``eps`` row (as ``stats/point.py`` gives others)."""

    state: str
    target: float | None
    half_width: float | None
    eta_s: float | None
    converged: bool
    reason: str | None = None


class EpsTarget:
    """The state of ``eps`` against its target over successive evaluations of one point.

    Parameters
    ----------
    relative, absolute : exactly one, as in the targets file
    """

    def __init__(self, *, relative: float | None = None, absolute: float | None = None):
        if (relative is None) == (absolute is None):
            raise ValueError("give exactly one of relative or absolute")
        self.relative, self.absolute = relative, absolute
        self._streak = 0
        self._last_segments = -1
        self._last: EpsStatus | None = None

    def tolerance(self, k: float, length_m: float) -> float:
        """Allowed half-width now (NaN while the scale is not known)."""
        if self.absolute is not None:
            return float(self.absolute)
        return float(self.relative) * eps_scale(k, length_m)

    def evaluate(
        self, eps, *, segments: int, duration_s: float, k: float, length_m: float
    ) -> EpsStatus:
        """Status of ``eps`` (a ``dissipation.Quantity``) after ``segments`` Welch segments.

        Calling again with the same ``segments`` returns the same status (no new evidence, the
        streak does not grow).
        """
        if segments == self._last_segments and self._last is not None:
            return self._last
        tol = self.tolerance(k, length_m)
        target = tol if math.isfinite(tol) and tol > 0 else None
        if eps is None or eps.value is None or eps.ci_low is None or eps.ci_high is None:
            self._streak = 0
            why = (eps.reason if eps is not None else None) or "no estimate of eps yet"
            status = EpsStatus("no-interval", target, None, None, False, why)
        else:
            hw = 0.5 * (float(eps.ci_high) - float(eps.ci_low))
            if segments < MIN_SEGMENTS or target is None:
                self._streak = 0
                why = (
                    f"fewer than {MIN_SEGMENTS} spectral segments"
                    if segments < MIN_SEGMENTS
                    else "the scale k^(3/2)/L_u is not known yet"
                )
                status = EpsStatus("warming-up", target, hw, None, False, why)
            elif hw > target:
                self._streak = 0
                need = duration_s * (hw / target) ** 2
                status = EpsStatus("converging", target, hw, max(need - duration_s, 0.0), False)
            else:
                self._streak += 1
                done = self._streak >= STREAK
                status = EpsStatus("converged" if done else "confirming", target, hw, 0.0, done)
        self._last_segments, self._last = segments, status
        return status
