"""Budget-driven targets: a ``[budget]`` term tolerance turned into the targets of one point.

A user asks for a k-budget term directly (``[budget] production = { relative = 0.1 }``,
``stats.targets.BudgetRequest``). Before a point of a traverse is measured, :func:`derive`
turns that request, with the neighbouring points already finished, into absolute half-widths
on the point's statistics that feed the term, and combines them with the plain per-statistic
targets (the tighter wins). The point's ``PointStatistics`` gets the result as its targets, so
the ordinary state / ETA / converged machinery stops the point on them.

How, for the point about to be measured at position ``y_p``:

1. **Grid.** The finished points of the traverse (same station), the point itself and, when
   the ``[budget]`` table gives the planned ``positions``, every planned position not yet
   measured. Without a plan, the traverse is assumed to go on past the point at its spacing
   to the nearest finished point: two assumed positions beyond it, the term required at the
   first and not at the second (a centred stencil, not an end one). So without ``positions``
   the last point of a traverse is asked for less than its one-sided end stencil needs. A
   point measured again is assumed to be where the traverse stands (an end stays an end).
2. **Values.** Finished points: their measured values and standard errors. The point itself:
   its earlier measurement when it is measured again (same position), otherwise the linear
   interpolation of the finished neighbours (linear extrapolation through the two nearest
   beyond the ends); the planned and assumed positions likewise. The point's live estimate is
   *not* used: the targets are fixed when its first samples arrive, so a replay stops at the
   same samples (live = replay).
3. **Term tolerance.** ``absolute``: as given (m^2/s^3). ``relative``: times the RMS of the
   term across the finished traverse (``stats.budget.tke_budget``; needs three finished
   points): a scale that does not vanish where the term crosses zero, as in a wake centre.
4. **Per-statistic tolerances** by :func:`eddyvigil.stats.budget.derived_tolerances` on that
   grid (its sharing of the noise budget between the statistics; a statistic in several
   stencils takes the smallest tolerance). The discretisation estimate is the finished
   traverse's (four finished points or more), interpolated in position; before that the whole
   tolerance goes to noise. The estimate takes at most half of the term's variance budget
   (:data:`MAX_DISCRETISATION_SHARE`): it is itself noisy (mostly the finished points' noise
   where the profile is well resolved), and taken at face value it asked for hours of record
   at points of the plane wake. Where it takes more, the term's interval may come out wider
   than the tolerance (up to sqrt(1.5) times, more where it alone exceeds the tolerance: no
   time can meet that, more points can); the point line says so, and the point is still
   asked for the noise share.
   The flux's tolerance is shared among ``<uuv>``, ``<vvv>`` and ``<vww>`` in proportion to
   their standard errors at the neighbours (they share one record, so they then meet their
   tolerances together; equal shares made ``<vvv>`` alone set the time on the wake).
5. **Combination.** A plain target of the same statistic is resolved at the point's
   interpolated U and k; the tighter of the two is the point's target.

The first points of a traverse have too few neighbours: with fewer than two finished points
(three for a relative tolerance) a point is measured on its plain targets only and its line
says so; measure those points again once the traverse is done (a later line of the same
point replaces the earlier one in the budget).

Re-derivation: the targets of a point are derived when it starts, from every point finished
by then, so each finished neighbour is taken into account by the next point.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from eddyvigil.stats.budget import derived_tolerances, tke_budget
from eddyvigil.stats.targets import Target, Targets

__all__ = ["FEEDS", "DerivedTargets", "derive"]

#: statistics (tke_budget's names: v = the traverse-axis component) feeding each term
FEEDS = {"production": ("U", "uv"), "turbulent_transport": ("uuv", "vvv", "vww")}

#: the largest share of a term's variance budget, (H/z)^2, left to the discretisation
#: estimate when per-point noise tolerances are derived (module docstring, step 4)
MAX_DISCRETISATION_SHARE = 0.5

#: finished points a tolerance needs: absolute (values to extrapolate), relative (+ a scale)
MIN_FINISHED = {"absolute": 2, "relative": 3}


@dataclass(frozen=True)
class DerivedTargets:
    """The targets a point gets and why (``to_json()``: the point line's ``derived_targets``).

    ``statistics``: one dict per derived tolerance: ``name`` (the statistic's real name),
    ``term``, ``half_width`` (derived, absolute), ``plain`` (the plain target resolved at the
    interpolated values, or None), ``applied`` (the derived one is the tighter).
    """

    targets: Targets
    basis: str | None
    terms: Mapping[str, dict]
    statistics: tuple[dict, ...]
    notes: tuple[str, ...]

    def applied(self) -> dict[str, str]:
        """``name -> term`` of the statistics whose target came from a term."""
        return {s["name"]: s["term"] for s in self.statistics if s["applied"]}

    def to_json(self) -> dict:
        return {"basis": self.basis, "terms": {k: dict(v) for k, v in self.terms.items()},
                "statistics": [dict(s) for s in self.statistics], "notes": list(self.notes)}


def _interp(xs: np.ndarray, fs: np.ndarray, x: float) -> float:
    """Linear interpolation of the finite ``fs``; linear extrapolation through the two
    nearest points beyond the ends; NaN with fewer than two finite values."""
    ok = np.isfinite(fs)
    xs, fs = xs[ok], fs[ok]
    if len(xs) < 2:
        return math.nan
    if xs[0] <= x <= xs[-1]:
        return float(np.interp(x, xs, fs))
    a, b = (0, 1) if x < xs[0] else (-2, -1)
    return float(fs[a] + (fs[b] - fs[a]) * (x - xs[a]) / (xs[b] - xs[a]))


def _split_flux(equal: dict, xf, finished, position: float, notes: list) -> dict:
    """The flux's tolerance shared among its triple moments in proportion to their standard
    errors at the finished neighbours (interpolated shares), not equally: the three share
    one record, so this makes them meet their tolerances together (the slowest, ``<vvv>`` on
    the wake, no longer sets the time alone). ``SE(F) = (SE(uuv) + SE(vvv) + SE(vww))/2``
    (``<vvv>`` twice when ``<vww>`` stands in for an unmeasured w) stays what the term needs.
    """
    names = [n for n in ("uuv", "vvv", "vww") if n in equal]
    coef = {n: 1.0 for n in names}
    if "vww" not in names and "vvv" in coef:
        coef["vvv"] = 2.0  # <wwv> taken as <vvv> (stats/budget.py WWV_ASSUMPTIONS)
    ses = [np.asarray(finished[n][1], dtype=np.float64) for n in names]
    shares = []
    for k in range(len(names)):
        with np.errstate(all="ignore"):
            r = ses[k] / sum(ses)
        ok = np.isfinite(r)
        if not np.any(ok):
            return equal
        shares.append(float(np.interp(position, np.asarray(xf)[ok], r[ok])))
    total = float(sum(equal[n] * coef[n] for n in names))  # = 2 x the flux's tolerance
    norm = sum(c * r for c, r in zip(coef.values(), shares, strict=True))
    if not (math.isfinite(total) and norm > 0):
        return equal
    notes.append("turbulent_transport: the flux's tolerance shared among "
                 + ", ".join(names) + " in proportion to their neighbours' standard errors")
    return {n: total * r / norm for n, r in zip(names, shares, strict=True)}


def _grid(finished: np.ndarray, position: float, planned, assume: bool
          ) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the grid and whether the term is required at each (module docstring);
    ``assume``: add the assumed positions beyond an outermost point when there is no plan."""
    near = lambda a, b: abs(a - b) <= 1e-9  # noqa: E731
    pts = [float(x) for x in finished] + [position]
    required = [True] * len(pts)
    if planned is not None:
        for x in planned:
            if not any(near(x, q) for q in pts):
                pts.append(float(x))
                required.append(True)
    elif assume:
        for side in (-1.0, 1.0):  # the point is outermost on this side: assume two more
            beyond = [x for x in finished if side * (x - position) > 0]
            if beyond:
                continue
            behind = [x for x in finished if side * (position - x) > 0]
            h = abs(position - (max(behind) if side > 0 else min(behind)))
            pts += [position + side * h, position + 2 * side * h]
            required += [True, False]
    order = np.argsort(pts)
    return np.asarray(pts)[order], np.asarray(required)[order]


def derive(
    targets: Targets,
    position: float,
    finished_position: Sequence[float],
    finished: Mapping[str, tuple[Sequence[float], Sequence[float]]],
    real_names: Mapping[str, str],
    own: Mapping[str, float] | None = None,
) -> DerivedTargets | None:
    """The targets of the point at ``position`` (module docstring); None without ``[budget]``.

    ``finished_position``: the finished points of the traverse (same station; not this
    point), strictly increasing; ``finished``: ``name -> (values, stderrs)`` at them under
    tke_budget's names (``U``, ``uv``, ``uuv``, ``vvv``, ``vww``, and ``V``, ``W``, ``k`` for
    the plain targets' scales); ``real_names``: tke_budget's name -> the statistic's name in
    this traverse's axis (``uv`` -> ``uw`` along z); ``own``: this point's earlier values
    when it is measured again.
    """
    request = targets.budget
    if request is None:
        return None
    from scipy.stats import norm

    z = float(norm.ppf(0.5 + targets.confidence / 2))
    xf = np.asarray(finished_position, dtype=np.float64)
    n_f = len(xf)
    basis = "earlier measurement of this point" if own else "interpolation of the neighbours"
    notes: list[str] = []
    terms: dict[str, dict] = {}
    derived: dict[str, tuple[float, str]] = {}
    grid = required = None
    values_here: dict[str, float] = {}
    for term, want in request.terms.items():
        kind = "absolute" if want.absolute is not None else "relative"
        entry = {"requested": {kind: want.absolute if kind == "absolute" else want.relative},
                 "half_width": None, "scale": None, "reachable": None}
        terms[term] = entry
        if n_f < MIN_FINISHED[kind]:
            notes.append(f"{term}: {n_f} finished point(s), {MIN_FINISHED[kind]} needed for a "
                         f"{kind} tolerance: plain targets only (measure this point again once "
                         "the traverse has its neighbours)")
            continue
        if any(finished.get(name) is None for name in FEEDS[term][:2]):
            notes.append(f"{term}: the finished points lack "
                         + " or ".join(FEEDS[term][:2]) + ": plain targets only")
            continue
        with np.errstate(all="ignore"):
            b = tke_budget(xf, finished) if n_f >= 3 else None
        t_f = None if b is None else b.terms.get(term)
        h = want.absolute
        if kind == "relative":
            v = np.asarray(t_f.value if t_f is not None else [], dtype=np.float64)
            v = v[np.isfinite(v)]
            scale = float(np.sqrt(np.mean(v**2))) if len(v) else math.nan
            if not (math.isfinite(scale) and scale > 0):
                notes.append(f"{term}: no RMS of the term yet: plain targets only")
                continue
            entry["scale"] = scale
            h = want.relative * scale
        entry["half_width"] = h
        if grid is None:
            grid, required = _grid(xf, float(position), request.positions, assume=not own)
            fill = {}
            for name, (vals, ses) in finished.items():
                vals = np.asarray(vals, dtype=np.float64)
                ses = np.asarray(ses, dtype=np.float64)
                at = {round(x, 9): (v, s) for x, v, s in zip(xf, vals, ses, strict=True)}
                here = own.get(name) if own else None
                col_v, col_s = [], []
                for x in grid:
                    if round(x, 9) in at:
                        v, s = at[round(x, 9)]
                    elif here is not None and abs(x - position) <= 1e-9:
                        v, s = here, math.nan
                    else:
                        v, s = _interp(xf, vals, x), math.nan
                    col_v.append(v)
                    col_s.append(s)
                fill[name] = (np.asarray(col_v), np.asarray(col_s))
            values_here = {name: float(v[np.argmin(np.abs(grid - position))])
                           for name, (v, _) in fill.items()}
        disc = None
        if t_f is not None and n_f >= 4 and np.any(np.isfinite(t_f.discretisation)):
            d = t_f.discretisation
            ok = np.isfinite(d)
            disc = np.interp(grid, xf[ok], d[ok])
        else:
            disc = np.zeros(len(grid))
            notes.append(f"{term}: no discretisation estimate yet (four finished points "
                         "needed): the whole tolerance goes to noise")
        # the estimate is itself noisy (mostly the points' noise where the profile is well
        # resolved): it takes at most MAX_DISCRETISATION_SHARE of the variance budget, so a
        # noisy estimate neither asks for days of record nor leaves the point untargeted
        cap = (h / z) * math.sqrt(MAX_DISCRETISATION_SHARE)
        i = int(np.argmin(np.abs(grid - position)))
        stencil = [j for j in range(max(i - 1, 0), min(i + 2, len(grid))) if required[j]]
        entry["reachable"] = not bool(np.any(disc[stencil] >= h / z))
        if not entry["reachable"]:
            notes.append(f"{term}: the discretisation estimate alone exceeds ±{h:.3g} m^2/s^3 "
                         f"(at z = {z:.2f}) near this point: time cannot meet it, more points "
                         f"can; noise is asked for {1 - MAX_DISCRETISATION_SHARE:.0%} of the "
                         "variance budget")
        elif np.any(disc[stencil] > cap):
            notes.append(f"{term}: the discretisation estimate takes more than "
                         f"{MAX_DISCRETISATION_SHARE:.0%} of the tolerance near this point; "
                         f"noise gets {1 - MAX_DISCRETISATION_SHARE:.0%} of it (more points "
                         "there would help more than time)")
        disc = np.minimum(disc, cap)
        half = np.where(required, h, np.inf)
        try:
            with np.errstate(all="ignore"):
                tol, _ = derived_tolerances(grid, fill, term, half, targets.confidence,
                                            discretisation=disc)
        except (ValueError, ArithmeticError, np.linalg.LinAlgError) as e:
            notes.append(f"{term}: no tolerances ({e}): plain targets only")
            continue
        here = {name: float(arr[i]) for name, arr in tol.items()}
        if term == "turbulent_transport":
            here = _split_flux(here, xf, finished, float(position), notes)
        for name, x in here.items():
            if math.isfinite(x) and x > 0 and (name not in derived or x < derived[name][0]):
                derived[name] = (x, term)
    rows, chosen = [], dict(targets.targets)
    plain_values = {real_names.get(k, k): v for k, v in values_here.items()}
    for name, (x, term) in derived.items():
        real = real_names.get(name, name)
        plain = targets.resolve(real, plain_values)
        if plain is not None and not math.isfinite(plain):
            plain = None
        applied = plain is None or x < plain
        if applied:
            chosen[real] = Target(real, absolute=x)
        rows.append({"name": real, "term": term, "half_width": x, "plain": plain,
                     "applied": applied})
    point_targets = dataclasses.replace(targets, targets=chosen) if rows else targets
    return DerivedTargets(point_targets, basis if rows else None, terms, tuple(rows),
                          tuple(notes))
