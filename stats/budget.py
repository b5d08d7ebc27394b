"""Turbulent-kinetic-energy budget across a traverse, each term with a standard error.

Thin shear layer, one station (Pope 2000, *Turbulent Flows*, CUP, §5/§7; REFERENCES §8)::

    0 = advection + production + turbulent_transport - dissipation + residual
    production          P = -<uv> dU/dy   (- (<uu> - <vv>) dU/dx where dU/dx is known)
    turbulent_transport T = -d/dy [ 1/2 (<uuv> + <vvv> + <wwv>) ]
    dissipation         eps, from an ``eps`` statistic of the points when present
    residual            R = eps - P - T - advection: pressure transport, viscous diffusion,
                        every unmeasured term and every error of the others.

Derivatives across the traverse
-------------------------------
Positions may be unevenly spaced. The derivative at point ``i`` is that of the Lagrange
parabola through three neighbouring points (``i-1, i, i+1``; one-sided ``0, 1, 2`` and
``n-3, n-2, n-1`` at the ends). Its weights come from Fornberg (1988, "Generation of finite
difference formulas on arbitrarily spaced grids", Math. Comp. 51:699), computed here by
solving the small moment (Vandermonde) system, which gives the same weights; the formula is
exact for quadratics on any grid (``tests/test_budget.py``).

Two uncertainties are kept apart and then combined:

* **noise**: the derivative is linear in the point values, ``D = sum_j w_j f_j``; the points
  are independent records, so ``Var(D) = sum_j w_j^2 SE_j^2`` (REFERENCES §8, the central
  difference case ``[Var(U+) + Var(U-)] / (2 dy)^2``). Exact for a linear estimator; a Monte
  Carlo check is in the tests.
* **discretisation**: the three-point formula misses the curvature of the profile between
  points. Its error is estimated as the difference between the four-point (cubic) derivative,
  one order more accurate, and the three-point one; the four points are the three of the
  stencil and the next one on either side, and the larger of the two differences is kept (a
  profile resolved by only a few points per half-width is not trusted to one side). This
  estimate is treated as a standard uncertainty (the type-B uncertainty of JCGM 100:2008,
  *Guide to the expression of uncertainty in measurement*, combined in quadrature with the
  type-A noise). It is itself noisy; with fewer
  than four points it is not available and no interval is given.

Citations of Fornberg (1988), Goodman (1960) and JCGM 100:2008 are from memory.

Within one point, the covariances between different statistics are not in the summary. We
assume ``U``, ``<uv>``, ``eps`` and the transport flux uncorrelated within a point, so the
errors of different terms add in quadrature in the residual (an assumption, not a bound: the
coverage test on the plane wake is its check). For the triple moments summed in the
transport flux, which are strongly correlated with each other, we take the bound of perfect
positive correlation: ``SE(a + b) <= SE(a) + SE(b)``.

Products of independent factors use the exact variance ``Var(ab) = b^2 Var(a) + a^2 Var(b) +
Var(a) Var(b)`` (Goodman 1960, "On the exact variance of products", JASA 55:708); its first two
terms are the delta method of REFERENCES §8 (check: ``<uv> = -0.01 +- 0.0005``, ``dU/dy = 50 +-
2`` give ``P = 0.5``, ``SE = 0.0320``); the third matters where both factors cross zero (the
centre of a wake).

>>> round(production_check(-0.01, 0.0005, 50.0, 2.0)[1], 4)
0.032
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "LUMLEY_PRESSURE_FACTOR",
    "TERMS",
    "WWV_ASSUMPTIONS",
    "Budget",
    "Derivative",
    "Term",
    "derivative",
    "derivative_weights",
    "derived_tolerances",
    "station_derivative",
    "k_from_two_components",
    "log_layer_production",
    "production_check",
    "tke_budget",
]

#: Names of the budget terms (DESIGN §11), in table order.
TERMS = ("production", "turbulent_transport", "dissipation", "advection", "residual")

#: How ``<wwv>`` is taken when ``w`` is not measured (REFERENCES §8, common practice).
WWV_ASSUMPTIONS = {
    "vvv": "<wwv> taken equal to <vvv> (w not measured; common practice, REFERENCES §8)",
    "half": "<wwv> taken as (<uuv> + <vvv>)/2 (w not measured; common practice, REFERENCES §8)",
}

#: Lumley (1978): -<p u_i>/rho = (1/5) <u_i u_k u_k>, so the pressure transport is -2/5 of
#: the turbulent transport (REFERENCES §8; Pope 2000 §7, from memory of the original).
LUMLEY_PRESSURE_FACTOR = -0.4


# --------------------------------------------------------------------------- small checks


def production_check(uv: float, se_uv: float, dudy: float, se_dudy: float) -> tuple[float, float]:
    """``P = -uv dU/dy`` and its SE for independent ``uv`` and ``dU/dy`` (Goodman 1960)."""
    return -uv * dudy, float(_product_se(uv, se_uv, dudy, se_dudy))


def _product_se(a, se_a, b, se_b):
    """SE of ``a b`` for independent factors (Goodman 1960, exact)."""
    return np.sqrt((b * se_a) ** 2 + (a * se_b) ** 2 + (se_a * se_b) ** 2)


def log_layer_production(u_tau: float, y: float, kappa: float = 0.41) -> float:
    """Production in the log layer, ``u_tau^3 / (kappa y)`` (Pope 2000, §7.1).

    >>> round(log_layer_production(0.5, 0.01), 2)  # REFERENCES §8 check value
    30.49
    """
    return u_tau**3 / (kappa * y)


def k_from_two_components(uu, vv, assume: str = "ww=(uu+vv)/2"):
    """k from two measured normal stresses (REFERENCES §8).

    ``assume="ww=(uu+vv)/2"``: ``k = 3/4 (uu + vv)``; ``assume="ww=vv"`` (jets and wakes):
    ``k = 1/2 (uu + 2 vv)``.

    >>> k_from_two_components(1.0, 0.5), k_from_two_components(1.0, 0.5, "ww=vv")
    (1.125, 1.0)
    """
    if assume == "ww=(uu+vv)/2":
        return 0.75 * (uu + vv)
    if assume == "ww=vv":
        return 0.5 * (uu + 2.0 * vv)
    raise ValueError(f"unknown assumption {assume!r}: 'ww=(uu+vv)/2' or 'ww=vv'")


# --------------------------------------------------------------------------- derivatives


def derivative_weights(nodes, at: float) -> np.ndarray:
    """Weights ``w`` with ``f'(at) ~ sum_j w_j f(nodes_j)``, exact for polynomials of degree
    ``len(nodes) - 1`` (Fornberg 1988). Nodes must be distinct.

    >>> derivative_weights([-1.0, 0.0, 1.0], 0.0).round(12).tolist()
    [-0.5, 0.0, 0.5]
    """
    x = np.asarray(nodes, dtype=np.float64)
    scale = float(np.max(np.abs(x - at))) or 1.0
    s = (x - at) / scale
    m = len(x)
    # sum_j w_j s_j^p = [p == 1] for p = 0..m-1 (moments of the derivative at s = 0)
    a = np.vander(s, m, increasing=True).T
    rhs = np.zeros(m)
    rhs[1] = 1.0
    return np.linalg.solve(a, rhs) / scale


def _stencils(n: int, i: int) -> tuple[list[int], list[list[int]]]:
    """The three-point stencil of point ``i`` and the four-point ones (one more point on
    either side, where it exists) for its error estimate."""
    lo = min(max(i - 1, 0), n - 3)
    three = [lo, lo + 1, lo + 2]
    fours = [sorted(three + [j]) for j in (lo - 1, lo + 3) if 0 <= j < n]
    return three, fours


@dataclass(frozen=True)
class Derivative:
    """A derivative profile: value, noise SE, discretisation estimate, and the point that
    contributes most to the noise variance at each position (index into the profile)."""

    value: np.ndarray
    noise_stderr: np.ndarray
    discretisation: np.ndarray
    limiting_point: np.ndarray

    @property
    def stderr(self) -> np.ndarray:
        return np.hypot(self.noise_stderr, self.discretisation)


def derivative(x, f, se) -> Derivative:
    """d f / d x at every position (module docstring: scheme, noise and discretisation).

    ``x`` strictly increasing, at least three points; ``se`` the standard errors of ``f``
    (NaN where a point has none: the derivatives that use it get a NaN SE).
    """
    x = np.asarray(x, dtype=np.float64)
    f = np.asarray(f, dtype=np.float64)
    se = np.asarray(se, dtype=np.float64)
    n = len(x)
    if n < 3:
        raise ValueError("a derivative across the traverse needs at least three points")
    if not np.all(np.diff(x) > 0):
        raise ValueError("positions must be strictly increasing")
    value = np.empty(n)
    noise = np.empty(n)
    disc = np.full(n, np.nan)
    limiting = np.zeros(n, dtype=np.int64)
    for i in range(n):
        three, fours = _stencils(n, i)
        w = derivative_weights(x[three], x[i])
        value[i] = w @ f[three]
        contrib = (w * se[three]) ** 2
        noise[i] = math.sqrt(contrib.sum())
        limiting[i] = three[int(np.nanargmax(contrib))] if np.any(np.isfinite(contrib)) else i
        if fours:
            # np.max, not max(): a NaN (a point without a value) must give NaN
            disc[i] = np.max([abs(derivative_weights(x[s], x[i]) @ f[s] - value[i])
                              for s in fours])
    return Derivative(value, noise, disc, limiting)


# --------------------------------------------------------------------------- the budget


@dataclass(frozen=True)
class Term:
    """One budget term across the traverse (m^2/s^3).

    ``stderr`` combines ``noise_stderr`` and ``discretisation`` in quadrature; it is NaN where
    no honest error exists (a point without an SE, or no discretisation estimate).
    ``limiting_point`` is the index of the point contributing most to the noise of the
    term's derivative across the traverse (dU/dy for production, the flux's for transport).
    """

    value: np.ndarray
    noise_stderr: np.ndarray
    discretisation: np.ndarray
    limiting_point: np.ndarray

    @property
    def stderr(self) -> np.ndarray:
        return np.hypot(self.noise_stderr, self.discretisation)

    def interval(self, confidence: float) -> tuple[np.ndarray, np.ndarray]:
        """Normal interval ``value -+ z SE`` (NaN bounds where SE is NaN)."""
        from scipy.stats import norm

        z = float(norm.ppf(0.5 + confidence / 2))
        se = self.stderr
        return self.value - z * se, self.value + z * se


@dataclass(frozen=True)
class Budget:
    """The k budget of one traverse; ``terms[name]`` is a :class:`Term` or None."""

    position: np.ndarray
    terms: dict
    assumptions: tuple[str, ...]
    pressure_lumley: Term | None = None
    extras: dict = field(default_factory=dict)


def _nan(n):
    return np.full(n, np.nan)


def _stat(stats: Mapping, name: str, n: int):
    """(values, stderrs) of a statistic, or None when no point has its value. A point without
    one has NaN: the terms whose stencils use that point are NaN, the others stand."""
    pair = stats.get(name)
    if pair is None:
        return None
    v = np.asarray(pair[0], dtype=np.float64)
    s = np.asarray(pair[1], dtype=np.float64)
    if v.shape != (n,) or s.shape != (n,) or not np.any(np.isfinite(v)):
        return None
    return v, s


def station_derivative(x_stations, f, se, at: int) -> Derivative:
    """d f / d x at station ``at`` from measurements at several streamwise stations.

    ``f``, ``se``: shape ``(stations, points)``, the same traverse positions at every
    station (NaN where a station lacks a position: the result is NaN there). Two stations
    give the two-point difference, whose error cannot be estimated from two stations (NaN
    discretisation: no interval); three or more, the three-point Lagrange formula as across
    the traverse (:func:`derivative`).
    """
    x = np.asarray(x_stations, dtype=np.float64)
    f = np.asarray(f, dtype=np.float64)
    se = np.asarray(se, dtype=np.float64)
    n_points = f.shape[1]
    value, noise, disc = _nan(n_points), _nan(n_points), _nan(n_points)
    limiting = np.full(n_points, -1, dtype=np.int64)  # -1: another station's point
    for j in range(n_points):
        if not np.all(np.isfinite(f[:, j])):
            continue
        if len(x) == 2:
            dx = x[1] - x[0]
            value[j] = (f[1, j] - f[0, j]) / dx
            noise[j] = math.hypot(se[0, j], se[1, j]) / abs(dx)
        else:
            d = derivative(x, f[:, j], se[:, j])
            value[j], noise[j], disc[j] = d.value[at], d.noise_stderr[at], d.discretisation[at]
        limiting[j] = j
    return Derivative(value, noise, disc, limiting)


def tke_budget(
    position: Sequence[float],
    stats: Mapping[str, tuple[Sequence[float], Sequence[float]]],
    *,
    wwv: str = "vvv",
    streamwise: Mapping[str, Derivative] | None = None,
) -> Budget:
    """The k budget across one traverse.

    Parameters
    ----------
    position : strictly increasing positions (m) along the traverse axis.
    stats : ``name -> (values, stderrs)`` per point, names of DESIGN §3 with ``u`` the
        streamwise and ``v`` the traverse-axis component (``U``, ``uv``, ``uuv``, ``vvv``,
        ``vww``, optional ``V``, ``k``, ``eps``). An SE may be NaN (no interval at that point).
    wwv : how ``<wwv>`` is taken when ``vww`` is absent (:data:`WWV_ASSUMPTIONS`).
    streamwise : optional ``{"U": dU/dx, "k": dk/dx}`` at these points from other stations
        (:func:`station_derivative`): they add the normal-stress production
        ``-(<uu> - <vv>) dU/dx`` and the advection ``-(U dk/dx + V dk/dy)``.
    """
    streamwise = dict(streamwise or {})
    y = np.asarray(position, dtype=np.float64)
    n = len(y)
    notes: list[str] = [
        "thin shear layer at one station (Pope 2000 §5/§7): streamwise derivatives of the "
        "stresses neglected",
        "points are independent records; within a point U, <uv>, eps and the transport flux "
        "are taken uncorrelated, the triple moments in the flux perfectly correlated (an "
        "upper bound)",
        "derivatives: three-point Lagrange differences on the uneven grid (Fornberg 1988); "
        "discretisation error estimated by the four-point formula, added in quadrature",
    ]
    terms: dict[str, Term | None] = dict.fromkeys(TERMS)
    if n < 3:
        notes.append(f"only {n} point(s): derivatives need at least three, no budget yet")
        return Budget(y, terms, tuple(notes))
    if n < 4:
        notes.append("three points: no discretisation estimate, so no interval for derived terms")

    # production
    mean_u, uv = _stat(stats, "U", n), _stat(stats, "uv", n)
    if mean_u is not None and uv is not None:
        d = derivative(y, *mean_u)
        value = -uv[0] * d.value
        noise = _product_se(uv[0], uv[1], d.value, d.noise_stderr)
        disc = np.abs(uv[0]) * d.discretisation
        uu, vv, dudx = _stat(stats, "uu", n), _stat(stats, "vv", n), streamwise.get("U")
        if uu is not None and vv is not None and dudx is not None:
            diff, se_diff = uu[0] - vv[0], uu[1] + vv[1]  # SEs add: an upper bound
            value = value - diff * dudx.value
            noise = np.hypot(noise, _product_se(diff, se_diff, dudx.value, dudx.noise_stderr))
            disc = np.hypot(disc, np.abs(diff) * dudx.discretisation)
            notes.append("production: -<uv> dU/dy - (<uu>-<vv>) dU/dx, dU/dx from the other "
                         "stations")
        else:
            notes.append("production: -<uv> dU/dy; the normal-stress term -(<uu>-<vv>) dU/dx "
                         "needs a second station and is left in the residual")
        terms["production"] = Term(value, noise, disc, d.limiting_point)
    else:
        notes.append("production: needs U and uv")

    # turbulent transport
    uuv, vvv, vww = _stat(stats, "uuv", n), _stat(stats, "vvv", n), _stat(stats, "vww", n)
    if uuv is not None and vvv is not None:
        if vww is not None:
            third, se_third = vww
            notes.append("turbulent transport: <wwv> measured")
        elif wwv in WWV_ASSUMPTIONS:
            if wwv == "vvv":
                third, se_third = vvv
            else:
                third = 0.5 * (uuv[0] + vvv[0])
                se_third = 0.5 * (uuv[1] + vvv[1])
            notes.append("turbulent transport: " + WWV_ASSUMPTIONS[wwv])
        else:
            raise ValueError(f"wwv must be one of {sorted(WWV_ASSUMPTIONS)}, not {wwv!r}")
        flux = 0.5 * (uuv[0] + vvv[0] + third)
        # perfect positive correlation within a point: SEs add (module docstring)
        se_flux = 0.5 * (uuv[1] + vvv[1] + se_third)
        d = derivative(y, flux, se_flux)
        terms["turbulent_transport"] = Term(-d.value, d.noise_stderr, d.discretisation,
                                            d.limiting_point)
    else:
        notes.append("turbulent transport: needs uuv and vvv")

    # dissipation
    eps = _stat(stats, "eps", n)
    if eps is not None:
        terms["dissipation"] = Term(eps[0], eps[1], np.zeros(n), np.arange(n))
        notes.append("dissipation: the points' eps (from their spectra)")
    else:
        notes.append("dissipation: the points carry no eps, so no residual")

    k, dkdx = _stat(stats, "k", n), streamwise.get("k")
    if k is not None and dkdx is not None and mean_u is not None:
        value = -mean_u[0] * dkdx.value
        noise = _product_se(mean_u[0], mean_u[1], dkdx.value, dkdx.noise_stderr)
        disc = np.abs(mean_u[0]) * dkdx.discretisation
        mean_v = _stat(stats, "V", n)
        if mean_v is not None:
            dk = derivative(y, *k)
            value = value - mean_v[0] * dk.value
            noise = np.hypot(noise, _product_se(mean_v[0], mean_v[1], dk.value,
                                                dk.noise_stderr))
            disc = np.hypot(disc, np.abs(mean_v[0]) * dk.discretisation)
            notes.append("advection: -U dk/dx - V dk/dy, dk/dx from the other stations")
        else:
            notes.append("advection: -U dk/dx (V not measured, taken as 0)")
        if np.all(np.isnan(dkdx.discretisation)):
            notes.append("streamwise derivatives from fewer than four stations: their error "
                         "cannot be estimated, so terms using them carry no interval")
        terms["advection"] = Term(value, noise, disc, np.arange(n))
    else:
        notes.append("advection: -U dk/dx - V dk/dy needs dk/dx from a second station; "
                     "left in the residual")

    # residual = eps - P - T (- advection when known): each term's errors add in quadrature
    parts = [terms[t] for t in ("dissipation", "production", "turbulent_transport")]
    if all(p is not None for p in parts):
        e, p, t = parts
        value = e.value - p.value - t.value
        noise = np.sqrt(e.noise_stderr**2 + p.noise_stderr**2 + t.noise_stderr**2)
        disc = np.hypot(p.discretisation, t.discretisation)
        a = terms["advection"]
        if a is not None:
            value = value - a.value
            noise = np.hypot(noise, a.noise_stderr)
            disc = np.hypot(disc, a.discretisation)
        terms["residual"] = Term(value, noise, disc, t.limiting_point)
        notes.append("residual = dissipation - production - transport"
                     + (" - advection" if a is not None else "")
                     + ": pressure transport, viscous diffusion"
                     + ("" if a is not None else ", advection")
                     + " and every error of the other terms")

    lumley = None
    t = terms["turbulent_transport"]
    if t is not None:
        f = abs(LUMLEY_PRESSURE_FACTOR)
        lumley = Term(LUMLEY_PRESSURE_FACTOR * t.value, f * t.noise_stderr,
                      f * t.discretisation, t.limiting_point)
    return Budget(y, terms, tuple(notes), lumley)


# --------------------------------------------------------------------------- term tolerances


def derived_tolerances(position, stats, term: str, half_width, confidence: float = 0.95,
                       discretisation=None):
    """Per-point half-widths on the statistics feeding ``term`` that give ``term`` an interval
    of half-width ``half_width`` (scalar or per point, m^2/s^3) at every point (``inf`` at a
    point: nothing asked there).

    ``discretisation``: the term's discretisation estimate per point when the caller knows a
    better one than these values give (``stats/budget_targets.py``: the finished points',
    where some values are only interpolated); default: the four-point estimate of ``stats``.

    The noise budget at point ``i`` is what the discretisation estimate leaves,
    ``(H/z)^2 - disc_i^2`` (nothing: time cannot help there, more points can), shared
    equally among the contributions (first-order variance of :func:`tke_budget`):

    * production ``-<uv>_i D_i``: half to ``<uv>_i`` (``|D_i| SE <= s/sqrt(2)``), half to the
      three ``U_j`` of the stencil (``|<uv>_i w_ij| SE_j <= s/sqrt(6)``);
    * turbulent transport ``-sum_j w_ij F_j``: a third to each flux ``F_j`` of the stencil,
      and ``SE(F) = (SE(uuv) + SE(vvv) + SE(vww))/2`` split equally (each ``<= 2 SE(F)/3``).

    A statistic in several stencils takes the smallest tolerance. Returns ``(tolerances,
    unreachable)``: ``{name: half-widths per point}`` (NaN where no tolerance follows) and a
    boolean mask of the points where the discretisation estimate alone exceeds ``H/z``.
    """
    from scipy.stats import norm

    z = float(norm.ppf(0.5 + confidence / 2))
    y = np.asarray(position, dtype=np.float64)
    n = len(y)
    b = tke_budget(y, stats)
    t = b.terms.get(term)
    if term not in ("production", "turbulent_transport") or t is None:
        raise ValueError(f"no tolerances for {term!r} from these statistics")
    h = np.broadcast_to(np.asarray(half_width, dtype=np.float64), (n,))
    disc = np.nan_to_num(t.discretisation if discretisation is None
                         else np.asarray(discretisation, dtype=np.float64), nan=0.0)
    room = (h / z) ** 2 - disc**2
    unreachable = room <= 0
    s = np.sqrt(np.where(unreachable, np.nan, room))  # noise SE allowed at each point
    weights = []
    for i in range(n):
        idx = _stencils(n, i)[0]
        w = derivative_weights(y[idx], y[i])
        w[np.abs(w) < 1e-9 * np.abs(w).max()] = 0.0  # a centre weight that is 0 up to rounding
        weights.append((idx, w))
    out: dict[str, np.ndarray] = {}
    if term == "production":
        mean_u, uv = _stat(stats, "U", n), _stat(stats, "uv", n)
        d = derivative(y, *mean_u)
        with np.errstate(divide="ignore", invalid="ignore"):
            out["uv"] = z * s / (np.sqrt(2.0) * np.abs(d.value))
            tol_u = np.full(n, np.inf)
            for i, (idx, w) in enumerate(weights):
                for j, wj in zip(idx, w, strict=True):
                    tol_u[j] = min(tol_u[j], z * s[i] / (np.sqrt(6.0) * abs(uv[0][i] * wj)))
    else:
        tol_u = None
        tol_f = np.full(n, np.inf)
        with np.errstate(divide="ignore", invalid="ignore"):
            for i, (idx, w) in enumerate(weights):
                for j, wj in zip(idx, w, strict=True):
                    tol_f[j] = min(tol_f[j], z * s[i] / (np.sqrt(3.0) * abs(wj)))
        each = 2.0 * tol_f / 3.0
        for name in ("uuv", "vvv", "vww"):
            if name in stats:
                out[name] = each.copy()
    if tol_u is not None:
        out["U"] = tol_u
    for k, v in out.items():
        out[k] = np.where(np.isfinite(v), v, np.nan)
    return out, unreachable
