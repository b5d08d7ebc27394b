"""Spectra and dissipation of one measurement point, beside (not inside) ``PointStatistics``.

:class:`PointSpectra` holds a :class:`~eddyvigil.stats.spectra.SpectrumAccumulator` for the
point's velocity columns and, when asked, evaluates :func:`~eddyvigil.stats.dissipation.dissipation`
with the mean speed, ``u'^2`` and their standard errors taken from the point's moment snapshot.
:func:`summary_fields` turns the result into the DESIGN §8 fields of a point line and the
statistics rows of DESIGN §3 (``eps``, ``eps_inertial``, ``eps_iso``, ``eta``, ``tau_eta``,
``lambda_g``, ``Re_lambda``).
"""

from __future__ import annotations

import math

from eddyvigil.stats.dissipation import C1_DEFAULT, NU_AIR_20C, Dissipation, Quantity, dissipation
from eddyvigil.stats.eps_target import EpsStatus, EpsTarget
from eddyvigil.stats.spectra import SpectrumAccumulator, SpectrumSnapshot

__all__ = ["NO_SPECTRUM_RANDOM", "SPECTRAL_ROWS", "PointSpectra", "summary_fields"]

#: the rows this module adds to a point's ``statistics`` (DESIGN §3)
SPECTRAL_ROWS = ("eps", "eps_inertial", "eps_iso", "eta", "tau_eta", "lambda_g", "Re_lambda")
NO_SPECTRUM_RANDOM = (
    "randomly sampled data (a t column): no spectrum is computed yet; "
    "it needs a method for irregular sampling"
)


class PointSpectra:
    """Welch spectra of a point's columns and, on request, eps and the scales.

    Parameters
    ----------
    columns, rate_hz : as the point's samples
    segment : samples per Welch segment (None: from the integral time of the first samples)
    c1 : Kolmogorov constant of the 1-D spectrum for the inertial fit
    fit_range_hz : a (low, high) range for the inertial fit instead of the automatic one
    stride : transform every ``stride``-th Welch segment only (cheaper, fewer dof)
    targets : the run's ``stats.Targets``; a target on ``eps`` is judged here
        (``stats/eps_target.py``)
    executor : a one-worker executor for the Welch transforms (see ``SpectrumAccumulator``)
    """

    def __init__(
        self,
        columns,
        rate_hz: float,
        *,
        segment: int | None = None,
        c1: float = C1_DEFAULT,
        fit_range_hz=None,
        stride: int = 1,
        targets=None,
        executor=None,
    ):
        self.columns = tuple(columns)
        t = None if targets is None else targets.targets.get("eps")
        self.eps_target = None if t is None else EpsTarget(relative=t.relative, absolute=t.absolute)
        self.eps_status: EpsStatus | None = None
        self.rate_hz = float(rate_hz)
        self.c1 = float(c1)
        self.fit_range_hz = fit_range_hz
        self.welch = SpectrumAccumulator(
            self.columns, self.rate_hz, segment=segment, stride=stride, executor=executor
        )
        self._cache: tuple | None = None
        self._live: tuple | None = None

    def update(self, block) -> PointSpectra:
        self.welch.update(block)
        return self

    def merge(self, other: PointSpectra) -> PointSpectra:
        """A new PointSpectra pooling both records' segments (inputs untouched; other follows)."""
        out = PointSpectra(
            self.columns,
            self.rate_hz,
            segment=self.welch.segment,
            c1=self.c1,
            fit_range_hz=self.fit_range_hz,
            stride=self.welch.stride,
        )
        out.welch = self.welch.merge(other.welch)
        return out

    def spectrum(self) -> SpectrumSnapshot | None:
        return self.welch.snapshot()

    def evaluate(
        self, moments, nu: float | None = None
    ) -> tuple[SpectrumSnapshot | None, Dissipation | None]:
        """Spectrum and dissipation given the point's moment snapshot (``PointSnapshot``).

        Cached until a new segment completes (the estimate cannot change in between).
        """
        key = (
            self.welch.segments,
            None if moments is None else moments.samples,
            nu,
        )  # moments drift slowly
        if self._cache is not None and self._cache[0] == key:
            return self._cache[1], self._cache[2]
        spec = self.welch.snapshot()
        result = None
        if spec is not None and moments is not None:
            u = self.columns[0]
            speed, speed_se = _value_and_error(moments, u.upper())
            var, var_se = _value_and_error(moments, u + u)
            if math.isfinite(speed) and math.isfinite(var) and var > 0:
                result = dissipation(
                    spec,
                    speed,
                    nu=nu,
                    c1=self.c1,
                    fit_range_hz=self.fit_range_hz,
                    variance=var,
                    variance_stderr=var_se if math.isfinite(var_se) else None,
                    speed_stderr=speed_se if math.isfinite(speed_se) else None,
                    confidence=moments.confidence,
                )
        if self.eps_target is not None and spec is not None and moments is not None:
            k, _ = _value_and_error(moments, "k")
            length, _ = _value_and_error(moments, f"L_{self.columns[0]}")
            self.eps_status = self.eps_target.evaluate(
                None if result is None else result.eps,
                segments=spec.segments,
                duration_s=float(moments.duration_s),
                k=k,
                length_m=length,
            )
        self._cache = (key, spec, result)
        return spec, result

    def eps_met(self, moments, nu: float | None = None) -> bool:
        """True unless ``eps`` is targeted and not converged (evaluated on the latest segments)."""
        if self.eps_target is None:
            return True
        self.evaluate(moments, nu)
        return self.eps_status is not None and self.eps_status.converged

    def live(
        self,
        moments,
        nu: float | None = None,
        now: float | None = None,
        growth: float = 1.25,
        min_interval_s: float = 1.0,
    ):
        """Like :meth:`evaluate`, for a display: re-evaluated only once the segment count has grown
        by ``growth`` and (when the caller passes its clock's ``now``) ``min_interval_s`` has passed
        since the last live evaluation; a display needs no fresher ε, and the fit costs tens of ms.
        The point's summary line always uses :meth:`evaluate`. Returns ``(spectrum,
        dissipation, eps_status)``; the status is None when ``eps`` is untargeted."""
        if self._live is not None:
            segs, at, out = self._live
            grown = self.welch.segments >= growth * segs and self.welch.segments > segs
            waited = now is None or at is None or now - at >= min_interval_s
            if segs > 0 and not (grown and waited):
                return out
        out = (*self.evaluate(moments, nu), self.eps_status)
        self._live = (self.welch.segments, now, out)
        return out


def _value_and_error(moments, name: str) -> tuple[float, float]:
    try:
        e = moments.estimate(name)
    except KeyError:
        return float("nan"), float("nan")
    return float(e.value), float(e.stderr)


def _row(name: str, q) -> dict:
    def num(x):
        return float(x) if x is not None and math.isfinite(x) else None

    honest = q is not None and q.value is not None and q.stderr is not None
    return {
        "name": name,
        "value": num(q.value) if q is not None and q.value is not None else None,
        "stderr": num(q.stderr) if honest else None,
        "ci_low": num(q.ci_low) if honest else None,
        "ci_high": num(q.ci_high) if honest else None,
        "target": None,
        "converged": None,
        "eta_s": None,
        "state": "untargeted" if honest else "no-interval",
        "blocks": 0,
        "reason": None if honest else (q.reason if q is not None else "no spectrum yet"),
    }


def summary_fields(
    spectra: PointSpectra | None,
    moments,
    point: dict | None,
    *,
    random_sampling: bool = False,
    max_bins: int = 200,
) -> tuple[dict, list[dict]]:
    """The DESIGN §8 fields of a point line and the spectral rows of its ``statistics``.

    ``random_sampling``: the point's samples carry a ``t`` column; then no spectrum is computed
    and the line says so.
    """
    nu_msg = (point or {}).get("nu")
    if random_sampling or spectra is None:
        why = NO_SPECTRUM_RANDOM if random_sampling else "no regularly sampled data"
        fields = {
            "spectra": None,
            "spectra_reason": why,
            "peaks": [],
            "eps_method": f"none: {why}",
            "nu": nu_msg,
            "nu_source": "point" if nu_msg is not None else None,
        }
        return fields, [_row(n, Quantity.missing(why)) for n in SPECTRAL_ROWS]
    spec, d = spectra.evaluate(moments, nu=nu_msg)
    if spec is None:
        why = "fewer samples than one spectral segment"
        fields = {
            "spectra": None,
            "spectra_reason": why,
            "peaks": [],
            "eps_method": f"none: {why}",
            "nu": nu_msg if nu_msg is not None else NU_AIR_20C,
            "nu_source": "point" if nu_msg is not None else "default",
        }
        return fields, [_row(n, Quantity.missing(why)) for n in SPECTRAL_ROWS]
    lb = spec.log_binned(max_bins)
    spectra_json = {
        name: {"f_hz": lb.f_hz.tolist(), "psd": lb.psd[:, c].tolist(), "dof": lb.dof.tolist()}
        for c, name in enumerate(spec.columns)
    }
    fields = {
        "spectra": spectra_json,
        "spectra_segment": int(spec.segment),
        "spectra_segments": int(spec.segments),
    }
    if d is None:
        why = "no finite mean speed or no positive u variance"
        fields.update(
            {
                "peaks": [],
                "eps_method": f"none: {why}",
                "nu": nu_msg if nu_msg is not None else NU_AIR_20C,
                "nu_source": "point" if nu_msg is not None else "default",
            }
        )
        return fields, [_row(n, Quantity.missing(why)) for n in SPECTRAL_ROWS]
    floor = d.floors.get(spec.columns[0])
    fields.update(
        {
            "peaks": [p.as_dict() for p in d.peaks],
            "eps_method": d.eps_method,
            "nu": d.nu,
            "nu_source": d.nu_source,
            "c1": d.c1,
            "eps_fit_range_hz": list(d.fit_range_hz) if d.fit_range_hz else None,
            "noise_floor": ({"psd": floor.level, "cutoff_hz": floor.cutoff_hz} if floor else None),
            "isotropy_ratio": d.isotropy_ratio.as_dict() if d.isotropy_ratio is not None else None,
            "L_u_spectral": d.L_u_spectral.as_dict(),
        }
    )
    rows = [_row(n, q) for n, q in d.rows().items()]
    status = spectra.eps_status
    if status is not None:
        rows[0].update(
            target=status.target,
            converged=status.converged,
            eta_s=status.eta_s,
            state=status.state,
            reason=status.reason if status.reason else rows[0]["reason"],
        )
    return fields, rows
