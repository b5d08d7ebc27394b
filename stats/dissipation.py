"""Dissipation rate, small scales and narrow-band peaks from a point's Welch spectra.

All from one probe with Taylor's hypothesis, ``k1 = 2 pi f / U`` (REFERENCES §7):

* inertial-range fit: ``eps = [E11(k1) k1^{5/3} / C1]^{3/2}``, ``E11 = U S(f) / 2 pi``, over the
  widest band where the compensated spectrum is flat within ±5 % (or a user range);
* isotropic derivative estimate ``eps_iso = 15 nu <(du/dx)^2> = 15 nu / U^2 int (2 pi f)^2 S df``
  up to a cut-off: where a white noise floor is found, the floor is subtracted and the integral
  stops where the signal sinks to the floor; the local-isotropy ratio
  ``<(dv/dx)^2>/<(du/dx)^2>`` (2 expected) where v is present;
* ``eta = (nu^3/eps)^{1/4}``, ``tau_eta = (nu/eps)^{1/2}``, ``lambda_g = (15 nu u'^2/eps)^{1/2}``,
  ``Re_lambda = u' lambda_g / nu``, and ``L_u = U S(0) / (4 u'^2)`` as a cross-check;
* ``peaks``: bins standing far above the running median of their neighbours (a Bonferroni bound
  on the chi^2 scatter), with the fraction of the component's variance they hold.

Every number comes with a reason when it cannot be given honestly (``Quantity.reason``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from eddyvigil.stats.spectra import SpectrumSnapshot, _bin_correlations, log_bin
from eddyvigil.stats.spectral_kernels import flattest_run
from scipy import ndimage, special

__all__ = [
    "C1_DEFAULT",
    "NU_AIR_20C",
    "Dissipation",
    "NoiseFloor",
    "Peak",
    "Quantity",
    "dissipation",
    "find_peaks",
    "inertial_fit",
    "isotropic_derivative",
    "noise_floor",
    "scales",
]

#: Kolmogorov constant of the 1-D longitudinal spectrum, (18/55) * 1.5 (Pope 2000, Turbulent Flows,
#: §6.5; REFERENCES §7)
C1_DEFAULT = 0.49
#: kinematic viscosity of dry air at 20 °C and 101.325 kPa, m^2/s (common practice; handbook value,
#: from memory)
NU_AIR_20C = 1.51e-5
#: flatness of the compensated spectrum accepted as inertial (REFERENCES §7: ±5 %)
FLAT_TOLERANCE = 0.05
#: the narrowest inertial range accepted, as a ratio of its end frequencies
MIN_FIT_SPAN = 5.0
#: fewest degrees of freedom of a band that may take part in the inertial fit (10 % scatter)
MIN_BAND_DOF = 200.0
#: standard errors by which the fitted shape is widened before the ±5 % test (0.5: the hump of an
#: exponential spectrum is refused, a Re_lambda = 500 model spectrum of 52 s accepted;
#: tests/test_dissipation*.py)
WIDEN = 0.5
#: above this turbulence intensity u'/U no spectral eps is given (Taylor's hypothesis, REFERENCES §7
#: pitfalls)
MAX_INTENSITY = 0.5
#: above this one eps_method says Taylor's hypothesis is strained (Wyngaard & Clifford 1977, from
#: memory)
STRAINED_INTENSITY = 0.25
#: eps_iso is "resolved" when the dissipation spectrum (2 pi f)^2 S at the cut-off is below this
#: fraction of its peak
RESOLVED_FRACTION = 0.05


@dataclass(frozen=True)
class Quantity:
    """A value with its standard error and interval; ``reason`` says why any of them is missing."""

    value: float | None
    stderr: float | None = None
    ci_low: float | None = None
    ci_high: float | None = None
    reason: str | None = None

    @classmethod
    def missing(cls, reason: str) -> Quantity:
        return cls(None, None, None, None, reason)

    @classmethod
    def lognormal(cls, value: float, rel: float, z: float, reason: str | None = None) -> Quantity:
        """Interval from a relative standard error, symmetric in log (positive quantities)."""
        if not (math.isfinite(value) and value > 0 and math.isfinite(rel)):
            return cls(
                value if math.isfinite(value) else None,
                None,
                None,
                None,
                reason or "no error estimate",
            )
        s = math.log1p(rel) if rel > 0 else 0.0
        return cls(value, value * rel, value * math.exp(-z * s), value * math.exp(z * s), reason)

    @property
    def rel(self) -> float:
        if self.value is None or self.stderr is None or self.value == 0:
            return float("nan")
        return self.stderr / abs(self.value)

    def as_dict(self) -> dict:
        return {
            "value": self.value,
            "stderr": self.stderr,
            "ci_low": self.ci_low,
            "ci_high": self.ci_high,
        }


@dataclass(frozen=True)
class NoiseFloor:
    level: float  # (m/s)^2/Hz, white
    level_stderr: float
    cutoff_hz: float  # the signal sinks to the floor here


@dataclass(frozen=True)
class Peak:
    component: str
    f_hz: float
    fraction: float  # of the component's variance

    def as_dict(self) -> dict:
        return {"component": self.component, "f_hz": self.f_hz, "fraction": self.fraction}


@dataclass(frozen=True)
class Dissipation:
    """Everything a point reports about dissipation and scales (DESIGN §3, §8)."""

    eps: Quantity
    eps_method: str
    eps_inertial: Quantity
    eps_iso: Quantity
    eta: Quantity
    tau_eta: Quantity
    lambda_g: Quantity
    Re_lambda: Quantity
    L_u_spectral: Quantity
    isotropy_ratio: Quantity | None
    nu: float
    nu_source: str
    c1: float
    speed_ms: float
    fit_range_hz: tuple[float, float] | None
    floors: dict = field(default_factory=dict)  # component -> NoiseFloor | None
    cutoff_hz: float = float("nan")
    peaks: tuple[Peak, ...] = ()

    def rows(self) -> dict[str, Quantity]:
        """The statistics rows named in DESIGN §3."""
        return {
            "eps": self.eps,
            "eps_inertial": self.eps_inertial,
            "eps_iso": self.eps_iso,
            "eta": self.eta,
            "tau_eta": self.tau_eta,
            "lambda_g": self.lambda_g,
            "Re_lambda": self.Re_lambda,
        }


def _z(confidence: float) -> float:
    # scipy.stats.norm.ppf's own formula (ndtri) without its argument checks, which cost 30x
    return float(special.ndtri(0.5 + confidence / 2.0))


def _chi2_quantile(p: float, dof) -> np.ndarray | float:
    """scipy.stats.chi2.ppf(p, dof) for 0 < p < 1 and dof > 0: its own formula,
    ``2 gammaincinv(dof/2, p)`` (scipy's chi2._ppf), the same bits without the argument checks
    (which cost 50x the value)."""
    return 2 * special.gammaincinv(np.asarray(dof, dtype=np.float64) / 2, p)


# ---------------------------------------------------------------- noise floor


def noise_floor(spec: SpectrumSnapshot, col: int = 0) -> NoiseFloor | None:
    """A white floor at the top of the spectrum, or None when the spectrum still falls there.

    The top octave (f_N/2 .. f_N) is "flat" when a least-squares line through its log-binned
    values falls by less than a factor 1.25 across it (turbulence there falls by far more: the
    -5/3 law alone gives 3.2). The level is the mean of its fine bins; the cut-off is the lowest
    frequency above which the log-binned spectrum stays below twice the level (signal = noise).
    """
    f, s = spec.f_hz, spec.psd[:, col]
    nyq = spec.rate_hz / 2.0
    top = (f >= nyq / 2.0) & (f < nyq)
    if top.sum() < 16:
        return None
    lb = log_bin(f[:-1], s[:-1], spec.dof[:-1], spec.window, 200)
    ok = (lb.f_hz >= nyq / 2.0) & (lb.psd > 0)
    if ok.sum() < 3 or np.any(lb.psd[lb.f_hz > 0] <= 0):
        return None
    slope = np.polyfit(np.log(lb.f_hz[ok]), np.log(lb.psd[ok]), 1)[0]
    if abs(slope) * math.log(2.0) > math.log(1.25):
        return None
    level = float(s[top].mean())
    dof_top = float(spec.dof[top].mean()) * top.sum() / 1.94  # Hann neighbours: 1 + 2(4/9 + 1/36)
    above = np.flatnonzero(lb.psd > 2.0 * level)
    if above.size == 0:  # nothing stands above the floor: no signal to differentiate
        return NoiseFloor(level, level * math.sqrt(2.0 / dof_top), 0.0)
    cutoff = float(lb.f_hz[above[-1] + 1]) if above[-1] + 1 < lb.f_hz.size else nyq / 2.0
    return NoiseFloor(level, level * math.sqrt(2.0 / dof_top), min(cutoff, nyq / 2.0))


# ---------------------------------------------------------------- epsilon, two ways


def _derivative_variance(spec, col, cutoff_hz, floor_level, floor_stderr):
    """int_0^fc (2 pi f)^2 (S - floor) df over fine bins, its standard error, the integrand's
    relative size at the cut-off, and the degrees of freedom of the error (inf: chi^2).

    The error is the larger of two: Welch's chi^2 per bin (neighbouring bins correlated as the
    window makes them), which holds for Gaussian signals, and the batch-means scatter of the
    same integral between groups of segments (``stats/segment_groups.py``, B - 1 dof), which
    also holds when the small scales' amplitude follows the large scales (skewed, intermittent
    signals). The noise floor's own error is added to either.
    """
    f, s, dof = spec.f_hz, spec.psd[:, col], spec.dof
    sel = (f > 0) & (f <= cutoff_hz)
    w = (2 * math.pi * f[sel]) ** 2 * spec.df_hz
    net = s[sel] - floor_level
    value = float(np.dot(w, net))
    v = w * s[sel] * np.sqrt(2.0 / dof[sel])
    r = _bin_correlations(spec.window, 3)
    var = float(np.dot(v, v)) + sum(
        2.0 * r[j - 1] * float(np.dot(v[:-j], v[j:])) for j in range(1, 4) if v.size > j
    )
    err_dof = math.inf
    groups = getattr(spec, "groups", None)
    if groups is not None and sel.any():
        rel, gdof = groups.relative_error(col, int(np.flatnonzero(sel)[-1]))
        batch = (rel * float(np.dot(w, s[sel]))) ** 2  # the scatter of the unfloored integral
        if math.isfinite(rel) and batch > var:
            var, err_dof = batch, gdof
    var += (float(w.sum()) * floor_stderr) ** 2
    g = w * net
    peak = float(g.max()) if g.size else 0.0
    tail = float(np.mean(g[-max(1, g.size // 50) :])) / peak if peak > 0 else float("inf")
    return value, math.sqrt(max(var, 0.0)), tail, err_dof


def isotropic_derivative(
    spec, speed_ms, nu, *, col=0, floor=None, cutoff_hz=None, confidence=0.95, speed_rel=0.0
):
    """``eps_iso`` from column ``col`` and the relative size of the integrand at the cut-off.

    ``speed_rel``: relative standard error of the convection speed; ``eps_iso ~ U^-2``.
    """
    fc = cutoff_hz if cutoff_hz is not None else (floor.cutoff_hz if floor else spec.rate_hz / 2.0)
    level = floor.level if floor else 0.0
    level_se = floor.level_stderr if floor else 0.0
    if floor is not None and not np.any(
        spec.psd[(spec.f_hz > 0) & (spec.f_hz <= fc), col] > 10.0 * level
    ):
        why = "the spectrum never rises ten times above the noise floor: no derivative estimate"
        return Quantity.missing(why), 0.0, 0.0, float("inf")
    d, d_se, tail, d_dof = _derivative_variance(spec, col, fc, level, level_se)
    if not d > 0:
        return Quantity.missing("no derivative variance above the noise floor"), d, d_se, tail
    k = 15.0 * nu / speed_ms**2
    eps = k * d
    # Student's t for the batch-means error of few groups (B - 1 dof), else the normal quantile
    z = _z(confidence) if math.isinf(d_dof) else float(special.stdtrit(d_dof, 0.5 + confidence / 2))
    if tail > RESOLVED_FRACTION:
        why = (
            f"dissipation range not resolved: (2 pi f)^2 S at the cut-off {fc:.4g} Hz is "
            f"{100 * tail:.0f} % of its peak, so this is a lower bound"
        )
        return Quantity(eps, None, None, None, why), d, d_se, tail
    return Quantity.lognormal(eps, math.hypot(d_se / d, 2.0 * speed_rel), z), d, d_se, tail


def inertial_fit(
    spec,
    speed_ms,
    *,
    col=0,
    c1=C1_DEFAULT,
    cutoff_hz=None,
    fit_range_hz=None,
    confidence=0.95,
    speed_rel=0.0,
):
    """``eps`` from the flattest wide band of the compensated spectrum; (Quantity, range).

    The interval is conditional on ``c1`` (Sreenivasan 1995 puts C1 at 0.53 ± 0.055, from
    REFERENCES §7); ``eps ~ U^-1`` through Taylor's hypothesis, so ``speed_rel`` enters once.
    """
    # compensate the fine bins, then average into log bands (a band average of S f^{5/3}, not
    # S at the band's mean frequency: exact for a pure power law)
    stop = spec.f_hz.size - 1 if spec.segment % 2 == 0 else spec.f_hz.size
    k1_fine = 2 * math.pi * spec.f_hz[:stop] / speed_ms
    comp_fine = speed_ms * spec.psd[:stop, col] / (2 * math.pi) * k1_fine ** (5.0 / 3.0)
    lb = log_bin(spec.f_hz[:stop], comp_fine, spec.dof[:stop], spec.window, 200)
    f, comp, dof = lb.f_hz, lb.psd, lb.dof
    hi = cutoff_hz if cutoff_hz is not None else spec.rate_hz / 2.0
    # bands noisier than 10 % (dof < 200) cannot show flatness within ±5 %: left out
    usable = (f > 2 * spec.df_hz) & (f <= hi) & (comp > 0) & (dof >= MIN_BAND_DOF)
    if fit_range_hz is not None:
        a, b = fit_range_hz
        pick = usable & (f >= a) & (f <= b)
        if pick.sum() < 2:
            return Quantity.missing(
                f"fewer than two spectral bands in the given range {a:g}-{b:g} Hz"
            ), None
        best = np.flatnonzero(pick)
        best = (best[0], best[-1])
    else:
        best = _flattest_band(f, comp, dof, usable)
        if best is None:
            return Quantity.missing(
                "no inertial range: the compensated spectrum is nowhere flat within "
                f"±{100 * FLAT_TOLERANCE:.0f} % "
                f"over a factor {MIN_FIT_SPAN:g} in frequency "
                "(low Reynolds number, noise, or too short a record)"
            ), None
    i, j = best
    wgt = dof[i : j + 1]
    cbar = float(np.sum(wgt * comp[i : j + 1]) / wgt.sum())
    rel_stat = math.sqrt(2.0 / wgt.sum())
    # a range accepted as flat within ±5 % leaves the plateau level uncertain by as much: a
    # uniform error of half-width FLAT_TOLERANCE (sd tol/sqrt 3), beside the chi^2 scatter
    rel_c = math.hypot(rel_stat, FLAT_TOLERANCE / math.sqrt(3.0))
    eps = (cbar / c1) ** 1.5
    return Quantity.lognormal(eps, math.hypot(1.5 * rel_c, speed_rel), _z(confidence)), (
        float(f[i]),
        float(f[j]),
    )


def _flattest_band(f, comp, dof, usable):
    """Widest run of bands (in log f) whose smooth shape stays within ±5 % of its level.

    Over each candidate run a weighted quadratic in log f is fitted to log(compensated) (weights
    dof/2, since var log S = 2/dof); the run is flat when the quadratic, widened by two standard
    errors, stays within log(1.05) of the run's mean level at both ends and at its vertex (so
    neither a slope nor a hump nor noise passes for flatness), and the scatter about it is
    chi^2-like. Prefix sums make every (start, end) pair O(1); the pairs loop in a numba
    kernel (``spectral_kernels.flattest_run``; vectorised numpy cost 10x more).
    """
    idx = np.flatnonzero(usable)
    if idx.size < 5:
        return None
    x = np.log(f)
    x = x - x[idx].mean()
    y = np.log(np.where(comp > 0, comp, 1.0))
    w = np.where(usable, dof / 2.0, 0.0)
    pw = [np.r_[0.0, np.cumsum(w * x**p)] for p in range(5)]
    py = [np.r_[0.0, np.cumsum(w * y * x**p)] for p in range(3)]
    pyy = np.r_[0.0, np.cumsum(w * y * y)]
    limit = _chi2_quantile(0.999, np.arange(f.size + 1).clip(1))  # once per dof, not per run
    a, b = flattest_run(
        x,
        np.stack(pw),
        np.stack(py),
        pyy,
        np.asarray(usable, dtype=np.bool_),
        math.log(MIN_FIT_SPAN),
        math.log1p(FLAT_TOLERANCE),
        WIDEN,
        limit,
    )
    return None if a < 0 else (int(a), int(b))


# ---------------------------------------------------------------- scales


def scales(
    eps: Quantity, nu: float, variance: float, variance_rel: float = 0.0, confidence: float = 0.95
):
    """eta, tau_eta, lambda_g, Re_lambda from eps and u'^2 (REFERENCES §7).

    Errors are propagated in log (powers of eps and u'^2).
    """
    if eps.value is None or not eps.value > 0:
        why = f"no dissipation rate ({eps.reason})" if eps.reason else "no dissipation rate"
        return tuple(Quantity.missing(why) for _ in range(4))
    e, z = eps.value, _z(confidence)
    re = eps.rel if eps.stderr is not None else float("nan")
    why = eps.reason if eps.stderr is None else None
    eta = Quantity.lognormal((nu**3 / e) ** 0.25, 0.25 * re, z, why)
    tau = Quantity.lognormal((nu / e) ** 0.5, 0.5 * re, z, why)
    lam = Quantity.lognormal(
        math.sqrt(15.0 * nu * variance / e), 0.5 * math.hypot(re, variance_rel), z, why
    )
    rel = math.hypot(0.5 * re, variance_rel)
    rel_lambda = Quantity.lognormal(math.sqrt(variance) * lam.value / nu, rel, z, why)
    return eta, tau, lam, rel_lambda


# ---------------------------------------------------------------- peaks


def find_peaks(
    spec: SpectrumSnapshot,
    *,
    alpha: float = 0.01,
    min_fraction: float = 0.002,
    flank: int = 9,
    gap: int = 3,
) -> tuple[Peak, ...]:
    """Narrow-band peaks of every column.

    A fine bin is a candidate when it exceeds the broadband level by more than the
    ``1 - alpha/n`` chi^2 quantile (Bonferroni over the ``n`` bins of a column), so a broadband
    spectrum shows a false peak in about ``alpha`` of points. The broadband level is the larger
    of the medians of ``flank`` bins on either side, ``gap`` bins away (clear of the Hann main
    lobe), de-biased by the chi^2 median: on a sloping spectrum the higher flank keeps a slope
    from passing for a peak. Touching candidates form one peak; its frequency is the
    power-weighted centroid of its main lobe, its fraction the excess power over the level
    divided by the column's variance.
    """
    out = []
    n = spec.f_hz.size
    stop = n - 1 if spec.segment % 2 == 0 else n
    dof = float(spec.dof[1])
    if stop < 2 * (flank + gap) + 4 or not dof > 0:
        return ()
    thr = _chi2_quantile(1.0 - alpha / (stop - 2), dof) / dof
    med_corr = _chi2_quantile(0.5, dof) / dof  # scipy.stats.chi2.median
    for c, name in enumerate(spec.columns):
        s = spec.psd[1:stop, c]
        if not np.all(s > 0):
            continue
        # med[k]: median of bins k..k+flank-1 (flank odd: a true median)
        h = flank // 2
        med = ndimage.median_filter(s, size=flank, mode="nearest")[h : h + s.size - flank + 1]
        base = np.full(s.size, np.inf)
        i = np.arange(flank + gap, s.size - flank - gap)
        base[i] = np.maximum(med[i - gap - flank + 1], med[i + gap]) / med_corr
        hot = s > thr * base
        total = float(spec.psd[:, c].sum())
        labels, count = ndimage.label(hot)
        for lab in range(1, count + 1):
            where = np.flatnonzero(labels == lab)
            lo, hi = max(where[0] - 2, 0), min(where[-1] + 3, s.size)
            level = float(np.min(base[where]))
            excess = np.clip(s[lo:hi] - level, 0.0, None)
            frac = float(excess.sum()) / total
            if frac < min_fraction:
                continue
            fc = float(np.dot(excess, spec.f_hz[1 + lo : 1 + hi]) / excess.sum())
            out.append(Peak(name, fc, frac))
    return tuple(out)


# ---------------------------------------------------------------- all together


def dissipation(
    spec: SpectrumSnapshot,
    speed_ms: float,
    *,
    nu: float | None = None,
    c1: float = C1_DEFAULT,
    fit_range_hz=None,
    detect_floor: bool = True,
    variance: float | None = None,
    variance_stderr: float | None = None,
    speed_stderr: float | None = None,
    confidence: float = 0.95,
) -> Dissipation:
    """Both estimates of eps, the choice between them, the scales and the peaks of one point.

    Column 0 is taken as u (streamwise); column 1, if present, as v for the isotropy ratio.
    ``variance`` is u'^2 (from the moments, better than the spectrum's windowed value);
    ``speed_stderr`` the standard error of the mean speed (Taylor's hypothesis converts with it).
    """
    nu_source = "point" if nu is not None else "default"
    nu = float(nu) if nu is not None else NU_AIR_20C
    z = _z(confidence)
    speed = abs(float(speed_ms))
    if variance is None:
        variance = float(spec.variance()[0])
    var_rel = (variance_stderr / variance) if (variance_stderr and variance > 0) else 0.0
    floors = {
        name: (noise_floor(spec, c) if detect_floor else None)
        for c, name in enumerate(spec.columns)
    }
    fl = floors[spec.columns[0]]
    cutoff = fl.cutoff_hz if fl else spec.rate_hz / 2.0
    peaks = find_peaks(spec)
    intensity = math.sqrt(variance) / speed if speed > 0 and variance >= 0 else math.inf
    if not intensity <= MAX_INTENSITY:
        why = (
            f"Taylor's hypothesis untenable: turbulence intensity u'/U = {intensity:.2g} "
            f"(above {MAX_INTENSITY:g})"
            if speed > 0
            else "no mean speed for Taylor's hypothesis"
        )
        miss = Quantity.missing(why)
        return Dissipation(
            miss,
            f"none: {why}",
            miss,
            miss,
            miss,
            miss,
            miss,
            miss,
            miss,
            None,
            nu,
            nu_source,
            c1,
            speed,
            None,
            floors,
            cutoff,
            peaks,
        )
    speed_rel = (speed_stderr / speed) if speed_stderr else 0.0
    inertial, rng = inertial_fit(
        spec,
        speed,
        c1=c1,
        cutoff_hz=cutoff,
        fit_range_hz=fit_range_hz,
        confidence=confidence,
        speed_rel=speed_rel,
    )
    iso, du, du_se, tail = isotropic_derivative(
        spec, speed, nu, floor=fl, cutoff_hz=cutoff, confidence=confidence, speed_rel=speed_rel
    )
    ratio = None
    if len(spec.columns) > 1 and du > 0:
        fv = floors[spec.columns[1]]
        dv, dv_se, _, _ = _derivative_variance(
            spec, 1, cutoff, fv.level if fv else 0.0, fv.level_stderr if fv else 0.0
        )
        if dv > 0:
            ratio = Quantity.lognormal(dv / du, math.hypot(dv_se / dv, du_se / du), z)
    # the choice: the derivative estimate needs no constant but must resolve the dissipation range
    # and rests on local isotropy; the inertial fit needs a flat range and C1
    iso_ok = iso.stderr is not None
    isotropic = ratio is None or (
        ratio.ci_low is not None and ratio.ci_low <= 2.0 * 1.25 and ratio.ci_high >= 2.0 / 1.25
    )
    if iso_ok and (isotropic or inertial.value is None):
        eps, method = (
            iso,
            "iso: the dissipation range is resolved above the noise floor (no constant needed)",
        )
        if not isotropic:
            method += f"; local isotropy doubtful (ratio {ratio.value:.2f}, 2 expected)"
    elif inertial.value is not None:
        why = (
            "the dissipation range is not resolved"
            if not iso_ok
            else f"local isotropy fails (ratio {ratio.value:.2f}, 2 expected)"
        )
        eps, method = (
            inertial,
            f"inertial: {why}; fit {rng[0]:.4g}-{rng[1]:.4g} Hz with C1 = {c1:g}",
        )
    else:
        eps = Quantity.missing(f"{inertial.reason}; and {iso.reason or 'no derivative estimate'}")
        method = "none: neither an inertial range nor a resolved dissipation range"
    if eps.value is not None and intensity > STRAINED_INTENSITY:
        method += f"; Taylor's hypothesis strained at u'/U = {intensity:.2f}"
    eta, tau, lam, rel = scales(eps, nu, variance, var_rel, confidence)
    s0 = (
        float(np.mean(spec.psd[2:4, 0])) if spec.psd.shape[0] > 4 else float("nan")
    )  # bin 1 feels the detrend
    lu_rel = math.sqrt(2.0 / (2.0 * float(spec.dof[1]) / 1.44))  # two neighbouring bins, r1 = 4/9
    lu = Quantity.lognormal(
        speed * s0 / (4.0 * variance) if variance > 0 else math.nan,
        math.hypot(lu_rel, var_rel),
        z,
        "from the lowest bins; biased low when the resolution is coarse",
    )
    return Dissipation(
        eps,
        method,
        inertial,
        iso,
        eta,
        tau,
        lam,
        rel,
        lu,
        ratio,
        nu,
        nu_source,
        c1,
        speed,
        rng,
        floors,
        cutoff,
        peaks,
    )
