"""Scenarios: a traverse of measurement points with known truth, described as TOML data.

A scenario is a TOML file, built in (``simulator/scenarios/NAME.toml``) or at a user path.
Two ways to give the points:

- ``[flow]`` with ``kind = "plane_wake"``: analytic self-similar profiles (below) sampled at the
  ``[traverse]`` positions; every point then also knows its k-budget terms.
- ``[[points]]``: each point spelled out (``mean``, ``stress``, ``tint_s`` or ``length_m``,
  optional ``skew`` or ``skew_a``, ``shedding``, ``faults``). ``skew`` is the skewness of each
  independent unit process; the generator's parameter ``a`` of ``y = z + a (z^2 - 1)`` is
  solved from it (:func:`skew_parameter`), so u, which is its first process times a constant,
  has exactly that skewness (v and w mix in the earlier processes through the Cholesky factor
  of ``stress``). ``skew_a`` gives ``a`` itself.

Top-level ``[scenario]`` keys: ``name``, ``description``, ``facility``, ``stream``
(default ``probe-a``), ``rate_hz``, ``point_seconds`` (time per point, the cap with
``--follow-control``), ``spectrum`` (``"ou"``, ``"vonkarman"`` or ``"pope"``: Pope's model
spectrum with a dissipation range, needs ``nu``), ``columns``
(``["u", "v", "w"]``), ``dtype`` (``"<f8"`` or ``"<f4"``), ``nu`` (m^2/s), ``c1`` (Kolmogorov
constant of the 1-D spectrum, 0.49), ``sampling`` (``"uniform"`` or ``"random"`` with
``data_rate_hz`` and ``probe_diameter_m``). ``[faults]`` as in :mod:`eddyvigil.simulator.faults`.

Plane wake profiles, with ``xi = y / half_width`` and ``G = exp(-xi^2 / (2 spread^2))``::

    U   = U_inf - U_s exp(-ln2 xi^2)           V = W = 0
    uu  = bg + A_uu G,  vv = bg + A_vv G,  ww = bg + A_ww G
    uv  = -A_uv xi G,   uw = vw = 0
    a   = (c_u G, c_v xi G, c_w G)   (skew parameters of the independent components, so that
                                     uuu, uvv, ... are even in y and uuv, vvv odd)
    L_u = length_m      (von Kármán integral length; eps = 0.714 uu^{3/2} / L_u for C1 = 0.49)
    shedding on v: amplitude A_shed G at frequency f_shed

The k-budget of a thin shear layer (Pope 2000, Turbulent Flows, §5/§7) at every point:
``production = -uv dU/dy``, ``turbulent_transport = -d/dy [0.5 (uuv + vvv + wwv)]``,
``dissipation = eps`` and ``residual = dissipation - production - turbulent_transport`` (what
advection, pressure transport and viscous diffusion must supply). Derivatives of the analytic
profiles are taken by a 5-point central difference with a step of 1e-4 half-widths.
"""

from __future__ import annotations

import importlib.resources
import json
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from eddyvigil.simulator.faults import validate_faults
from eddyvigil.simulator.signals import (
    OUGenerator,
    RandomSampler,
    Shedding,
    PopeShapeGenerator,
    TurbulenceGenerator,
    VonKarmanGenerator,
    cholesky_factor,
    skew_moments,
)
from eddyvigil.stats import names

__all__ = [
    "PointSpec",
    "Scenario",
    "PlaneWake",
    "ScenarioError",
    "builtin_scenarios",
    "load_scenario",
    "moment_names",
    "skew_parameter",
    "MAX_SKEWNESS",
    "point_truth",
    "write_truth",
]

DEFAULT_SCENARIO = "wake"
#: Largest |skewness| a scenario may ask for: the transform's skewness tends to 2 sqrt(2) as
#: a grows, and 2.8 already needs a = 1.5.
MAX_SKEWNESS = 2.8


class ScenarioError(ValueError):
    """A scenario file that cannot be used; the message is meant for the user."""


def builtin_scenarios() -> list[str]:
    """Names of the scenarios shipped in ``simulator/scenarios``."""
    root = importlib.resources.files("eddyvigil.simulator") / "scenarios"
    return sorted(p.name[:-5] for p in root.iterdir() if p.name.endswith(".toml"))


def skew_parameter(skewness) -> np.ndarray:
    """The ``a`` of ``y = (z + a (z^2 - 1)) / sqrt(1 + 2 a^2)`` (Gaussian ``z``) whose skewness
    ``(6a + 8a^3)/(1 + 2a^2)^{3/2}`` is ``skewness`` (formula: REFERENCES §10; it is odd and
    increasing in ``a``, so the root is unique). Raises ``ValueError`` beyond
    :data:`MAX_SKEWNESS`.

    >>> round(float(skew_parameter(0.590206)), 5)  # REFERENCES §10: a = 0.1 gives 0.590206
    0.1
    """
    from scipy.optimize import brentq

    s = np.atleast_1d(np.asarray(skewness, dtype=np.float64))
    if not np.all(np.abs(s) <= MAX_SKEWNESS):
        raise ValueError(f"skew must be a skewness within +-{MAX_SKEWNESS}, not {skewness}")
    out = np.zeros_like(s)
    for i, target in enumerate(s):
        if target != 0.0:
            size = abs(float(target))
            root = brentq(lambda a, t=size: skew_moments(a)[0] - t, 0.0, 10.0,
                          xtol=1e-15, rtol=1e-15)
            out[i] = math.copysign(root, target)
    return out.reshape(np.shape(skewness))


def moment_names(columns, order: int) -> list[str]:
    """Names of the co-moments of ``order`` in column order: ``uu, uv, ...`` (DESIGN §3)."""
    cols = tuple(columns)
    return [names.moment_name(cols, c) for c in names.moment_combinations(len(cols), order)]


@dataclass(frozen=True)
class PointSpec:
    """One measurement point: position, prescribed statistics and optional known budget."""

    id: str
    x: float
    y: float
    z: float
    mean: tuple[float, ...]
    stress: tuple[tuple[float, ...], ...]
    tint_s: float | None = None
    length_m: float | None = None
    skew: tuple[float, ...] = (0.0, 0.0, 0.0)
    shedding: Shedding | None = None
    faults: dict | None = None
    budget: dict | None = None
    note: str | None = None

    def wire_point(self, nu: float | None) -> dict:
        p = {"id": self.id, "x": self.x, "y": self.y, "z": self.z}
        if nu is not None:
            p["nu"] = nu
        if self.note:
            p["note"] = self.note
        return p


class PlaneWake:
    """Analytic self-similar plane wake (see the module docstring for the formulas)."""

    PARAMS = {
        "U_inf": 10.0,
        "U_s": 1.5,
        "half_width": 0.05,
        "spread": 1.0,
        "bg": 0.01,
        "A_uu": 0.36,
        "A_vv": 0.30,
        "A_ww": 0.25,
        "A_uv": 0.16,
        "c_u": -0.06,
        "c_v": 0.25,
        "c_w": 0.0,
        "length_m": 0.025,
        "A_shed": 0.0,
        "f_shed": 50.0,
    }

    def __init__(self, **params):
        unknown = set(params) - set(self.PARAMS) - {"kind"}
        if unknown:
            raise ScenarioError(f"[flow] plane_wake: unknown key(s) {sorted(unknown)}")
        p = dict(self.PARAMS)
        p.update({k: float(v) for k, v in params.items() if k != "kind"})
        self.p = p

    def _g(self, y):
        xi = y / self.p["half_width"]
        return xi, math.exp(-(xi**2) / (2 * self.p["spread"] ** 2))

    def mean(self, y) -> np.ndarray:
        xi = y / self.p["half_width"]
        return np.array(
            [self.p["U_inf"] - self.p["U_s"] * math.exp(-math.log(2) * xi**2), 0.0, 0.0]
        )

    def stress(self, y) -> np.ndarray:
        xi, g = self._g(y)
        p = self.p
        r = np.diag([p["bg"] + p["A_uu"] * g, p["bg"] + p["A_vv"] * g, p["bg"] + p["A_ww"] * g])
        r[0, 1] = r[1, 0] = -p["A_uv"] * xi * g
        return r

    def skew(self, y) -> np.ndarray:
        xi, g = self._g(y)
        # u and w skewness even in y, v odd: the triple moments get the wake's symmetry
        return np.array([self.p["c_u"], self.p["c_v"] * xi, self.p["c_w"]]) * g

    def shedding(self, y) -> Shedding | None:
        _, g = self._g(y)
        if self.p["A_shed"] <= 0:
            return None
        return Shedding(self.p["f_shed"], (0.0, self.p["A_shed"] * g, 0.0))

    def third_moments(self, y) -> np.ndarray:
        c = cholesky_factor(self.stress(y))
        s, _ = skew_moments(self.skew(y))
        return np.einsum("im,jm,km,m->ijk", c, c, c, s)

    def transport_flux(self, y) -> float:
        """0.5 (uuv + vvv + wwv): the turbulent flux of k across the layer."""
        t = self.third_moments(y)
        return 0.5 * (t[0, 0, 1] + t[1, 1, 1] + t[2, 2, 1])

    def d_dy(self, fn, y) -> float:
        h = 1e-4 * self.p["half_width"]
        return (-fn(y + 2 * h) + 8 * fn(y + h) - 8 * fn(y - h) + fn(y - 2 * h)) / (12 * h)

    def point(self, pid, x, y, z, spectrum) -> PointSpec:
        shed = self.shedding(y)
        mean = self.mean(y)
        stress = self.stress(y)
        production = -stress[0, 1] * self.d_dy(lambda s: self.mean(s)[0], y)
        transport = -self.d_dy(self.transport_flux, y)
        return PointSpec(
            id=pid,
            x=x,
            y=y,
            z=z,
            mean=tuple(mean),
            stress=tuple(map(tuple, stress)),
            length_m=self.p["length_m"] if spectrum in ("vonkarman", "pope") else None,
            tint_s=self.p["length_m"] / float(np.linalg.norm(mean)) if spectrum == "ou" else None,
            skew=tuple(self.skew(y)),
            shedding=shed,
            budget={"production": production, "turbulent_transport": transport},
        )


FLOWS = {"plane_wake": PlaneWake}


@dataclass(frozen=True)
class Scenario:
    """A loaded scenario: settings plus the list of points (see the module docstring)."""

    name: str
    description: str
    facility: str
    stream: str
    rate_hz: float
    point_seconds: float
    spectrum: str
    columns: tuple[str, ...]
    dtype: str
    nu: float | None
    c1: float
    sampling: str
    data_rate_hz: float | None
    probe_diameter_m: float
    faults: dict
    points: tuple[PointSpec, ...]
    source: str = ""
    raw: dict = field(default_factory=dict, repr=False)

    def with_rate(self, rate_hz: float | None) -> Scenario:
        """The same scenario at another row rate (the mean data rate for random sampling)."""
        if rate_hz is None:
            return self
        if self.sampling == "random":
            if not 0 < rate_hz <= 0.2 * self.rate_hz:
                raise ScenarioError(
                    f"--rate for random sampling must be <= {0.2 * self.rate_hz:g} Hz"
                )
            return Scenario(**{**self.__dict__, "data_rate_hz": float(rate_hz)})
        return Scenario(**{**self.__dict__, "rate_hz": float(rate_hz)})

    def point_faults(self, point: PointSpec) -> dict:
        return validate_faults(point.faults if point.faults is not None else self.faults)

    def make_generator(self, point: PointSpec, seed) -> TurbulenceGenerator | RandomSampler:
        """The signal source of ``point``; ``next_block(n)`` gives rows in ``self.row_columns``."""
        m = len(self.columns)
        mean = np.asarray(point.mean, float)[:m]
        stress = np.asarray(point.stress, float)[:m, :m]
        skew = np.asarray(point.skew, float)[:m]
        if self.spectrum == "pope":
            if point.length_m is None:
                raise ScenarioError(f"point {point.id}: the Pope spectrum needs length_m")
            gen = PopeShapeGenerator(
                mean,
                stress,
                point.length_m,
                self.nu,
                self.rate_hz,
                seed,
                skew=skew,
                shedding=point.shedding,
            )
        elif self.spectrum == "vonkarman":
            if point.length_m is None:
                raise ScenarioError(f"point {point.id}: the von Kármán spectrum needs length_m")
            gen = VonKarmanGenerator(
                mean,
                stress,
                point.length_m,
                self.rate_hz,
                seed,
                skew=skew,
                shedding=point.shedding,
                c1=self.c1,
            )
        else:
            tint = point.tint_s
            if tint is None:
                if point.length_m is None:
                    raise ScenarioError(f"point {point.id}: give tint_s or length_m")
                tint = point.length_m / float(np.linalg.norm(mean))
            gen = OUGenerator(
                mean, stress, tint, self.rate_hz, seed, skew=skew, shedding=point.shedding
            )
        if self.sampling == "random":
            return RandomSampler(
                gen,
                self.data_rate_hz,
                seed,
                probe_diameter_m=self.probe_diameter_m,
                columns=self.columns,
            )
        return gen

    @property
    def row_columns(self) -> tuple[str, ...]:
        return self.columns + (("t", "weight") if self.sampling == "random" else ())

    @property
    def rows_per_second(self) -> float:
        return self.data_rate_hz if self.sampling == "random" else self.rate_hz


def _point_from_table(t: dict, i: int) -> PointSpec:
    known = {
        "id",
        "x",
        "y",
        "z",
        "mean",
        "stress",
        "tint_s",
        "length_m",
        "skew",
        "skew_a",
        "shedding",
        "faults",
        "note",
    }
    unknown = set(t) - known
    if unknown:
        raise ScenarioError(f"[[points]] #{i + 1}: unknown key(s) {sorted(unknown)}")
    for req in ("mean", "stress"):
        if req not in t:
            raise ScenarioError(f"[[points]] #{i + 1}: '{req}' is required")
    mean = tuple(float(v) for v in t["mean"])
    m = len(mean)
    stress = np.asarray(t["stress"], float)
    if stress.shape != (m, m):
        raise ScenarioError(f"[[points]] #{i + 1}: stress must be {m}x{m}")
    try:
        cholesky_factor(stress)
    except ValueError as e:
        raise ScenarioError(f"[[points]] #{i + 1}: {e}") from None
    if "skew" in t and "skew_a" in t:
        raise ScenarioError(f"[[points]] #{i + 1}: give skew (a skewness) or skew_a, not both")
    try:
        a = (skew_parameter(np.asarray(t["skew"], float)) if "skew" in t
             else np.asarray(t.get("skew_a", 0.0), float))
        skew = tuple(float(v) for v in np.broadcast_to(a, (m,)))
    except ValueError as e:
        raise ScenarioError(f"[[points]] #{i + 1}: {e}") from None
    shed = t.get("shedding")
    return PointSpec(
        id=str(t.get("id", f"P{i + 1:02d}")),
        x=float(t.get("x", 0.0)),
        y=float(t.get("y", 0.0)),
        z=float(t.get("z", 0.0)),
        mean=mean,
        stress=tuple(map(tuple, stress)),
        tint_s=t.get("tint_s"),
        length_m=t.get("length_m"),
        skew=skew,
        shedding=Shedding(**shed) if shed else None,
        faults=t.get("faults"),
        note=t.get("note"),
    )


def _number(table: dict, key: str, default, section="scenario"):
    v = table.get(key, default)
    if v is None:
        return None
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        raise ScenarioError(f"[{section}] {key} must be a number, not {v!r}")
    return float(v)


def _scenario_from_dict(d: dict, source: str) -> Scenario:
    s = d.get("scenario", {})
    spectrum = s.get("spectrum", "ou")
    if spectrum not in ("ou", "vonkarman", "pope"):
        raise ScenarioError(f"spectrum must be 'ou', 'vonkarman' or 'pope', not {spectrum!r}")
    if spectrum == "pope" and _number(s, "nu", None) is None:
        raise ScenarioError("spectrum = 'pope' needs nu (its dissipation range depends on it)")
    sampling = s.get("sampling", "uniform")
    if sampling not in ("uniform", "random"):
        raise ScenarioError(f"sampling must be 'uniform' or 'random', not {sampling!r}")
    columns = tuple(s.get("columns", ("u", "v", "w")))
    if not 1 <= len(columns) <= 3 or any(c in ("t", "weight") for c in columns):
        raise ScenarioError("columns: one to three velocity component names")
    dtype = s.get("dtype", "<f8")
    if dtype not in ("<f4", "<f8"):
        raise ScenarioError("dtype must be '<f4' or '<f8'")
    rate = _number(s, "rate_hz", 4000.0)
    if not rate > 0:
        raise ScenarioError("rate_hz must be > 0")
    if not _number(s, "point_seconds", 30.0) > 0:
        raise ScenarioError("point_seconds must be > 0")
    points: list[PointSpec] = []
    if "flow" in d:
        flow = dict(d["flow"])
        kind = flow.get("kind")
        if kind not in FLOWS:
            raise ScenarioError(f"[flow] kind must be one of {sorted(FLOWS)}, not {kind!r}")
        model = FLOWS[kind](**flow)
        tr = d.get("traverse", {})
        ys = tr.get("y")
        if not ys:
            raise ScenarioError("[traverse] y = [...] positions are required with [flow]")
        for i, y in enumerate(ys):
            try:
                points.append(
                    model.point(
                        f"P{i + 1:02d}",
                        float(tr.get("x", 0.0)),
                        float(y),
                        float(tr.get("z", 0.0)),
                        spectrum,
                    )
                )
            except ValueError as e:
                raise ScenarioError(f"[flow] at y = {y}: {e}") from None
    for i, t in enumerate(d.get("points", [])):
        points.append(_point_from_table(t, i))
    if not points:
        raise ScenarioError("a scenario needs [flow] + [traverse] or [[points]]")
    try:
        faults = validate_faults(d.get("faults"))
        for p in points:
            validate_faults(p.faults)
    except ValueError as e:
        raise ScenarioError(str(e)) from None
    data_rate = _number(s, "data_rate_hz", None)
    if sampling == "random" and not data_rate:
        raise ScenarioError("sampling = 'random' needs data_rate_hz")
    return Scenario(
        name=str(s.get("name", Path(source).stem or "scenario")),
        description=str(s.get("description", "")),
        facility=str(s.get("facility", "")),
        stream=str(s.get("stream", "probe-a")),
        rate_hz=rate,
        point_seconds=_number(s, "point_seconds", 30.0),
        spectrum=spectrum,
        columns=columns,
        dtype=dtype,
        nu=_number(s, "nu", None),
        c1=_number(s, "c1", 0.49),
        sampling=sampling,
        data_rate_hz=None if data_rate is None else float(data_rate),
        probe_diameter_m=_number(s, "probe_diameter_m", 1e-4),
        faults=faults,
        points=tuple(points),
        source=source,
        raw=d,
    )


def load_scenario(name_or_path: str | None = None) -> Scenario:
    """A built-in scenario by name (default ``wake``) or a TOML file by path."""
    name_or_path = name_or_path or DEFAULT_SCENARIO
    path = Path(name_or_path)
    if path.suffix == ".toml" or path.exists():
        try:
            text = path.read_text(encoding="utf-8")
        except OSError as e:
            raise ScenarioError(f"cannot read scenario file {path}: {e.strerror}") from None
        source = str(path)
    else:
        if name_or_path not in builtin_scenarios():
            raise ScenarioError(
                f"no built-in scenario {name_or_path!r}; built in: {', '.join(builtin_scenarios())}"
            )
        res = importlib.resources.files("eddyvigil.simulator") / "scenarios" / f"{name_or_path}.toml"
        text = res.read_text(encoding="utf-8")
        source = f"builtin:{name_or_path}"
    try:
        d = tomllib.loads(text)
    except tomllib.TOMLDecodeError as e:
        raise ScenarioError(f"scenario {source} is not valid TOML: {e}") from None
    try:
        return _scenario_from_dict(d, source)
    except ScenarioError:
        raise
    except (ValueError, TypeError, KeyError, AttributeError) as e:
        # a value of the wrong type somewhere (e.g. rate_hz = "fast"): say so, never a traceback
        raise ScenarioError(f"scenario {source}: bad value ({type(e).__name__}: {e})") from None


def _jsonable(v):
    if isinstance(v, float | np.floating):
        v = float(v)
        return v if math.isfinite(v) else None
    return v


def point_truth(scenario: Scenario, point: PointSpec, seed=0) -> dict:
    """The statistics the samples of ``point`` are drawn to have (names of DESIGN §3).

    Moments are population moments of the stationary signal before faults: means, stresses
    (shedding included), ``k``, all third and fourth co-moments, ``skew_u``, ``flat_u``,
    ``Tint_u`` (discrete ``dt (1/2 + sum rho_k)``, so ``Var(mean) = 2 sigma^2 Tint / T``),
    ``L_u = U Tint_u``; with the von Kármán spectrum also ``eps`` and ``eta`` (when ``nu``).
    """
    gen = scenario.make_generator(point, seed)
    turb = gen.generator if isinstance(gen, RandomSampler) else gen
    cols = scenario.columns
    idx = {c: i for i, c in enumerate(cols)}
    stats: dict[str, float | None] = {}
    for c in cols:
        stats[c.upper()] = turb.mean[idx[c]]
    r = turb.total_stress()
    t3 = turb.third_moments()
    q4 = turb.fourth_moments()
    for name in moment_names(cols, 2):
        stats[name] = r[idx[name[0]], idx[name[1]]]
    for name in moment_names(cols, 3):
        stats[name] = t3[tuple(idx[ch] for ch in name)]
    for name in moment_names(cols, 4):
        stats[name] = q4[tuple(idx[ch] for ch in name)]
    # k as the monitor defines it for the components present (one table: stats/names.py)
    stats["k"] = float(names.k_from_normal_stresses(np.diag(r)))
    c0 = cols[0]
    su = r[0, 0]
    stats[f"skew_{c0}"] = t3[0, 0, 0] / su**1.5
    stats[f"flat_{c0}"] = q4[0, 0, 0, 0] / su**2
    tint = turb.integral_time_s()
    for i, c in enumerate(cols):
        stats[f"Tint_{c}"] = tint[i]
    stats[f"L_{c0}"] = tint[0] * float(np.linalg.norm(turb.mean))
    eps = turb.epsilon() if isinstance(turb, VonKarmanGenerator | PopeShapeGenerator) else None
    stats["eps"] = eps
    nu = scenario.nu
    stats["eta"] = (nu**3 / eps) ** 0.25 if (eps and nu) else None
    if isinstance(turb, PopeShapeGenerator):
        # the small scales of REFERENCES §7 from eps and u'^2 = uu (as the monitor forms them)
        stats["tau_eta"] = math.sqrt(nu / eps)
        stats["lambda_g"] = math.sqrt(15.0 * nu * r[0, 0] / eps)
        stats["Re_lambda"] = math.sqrt(r[0, 0]) * stats["lambda_g"] / nu
    out = {
        "point": point.wire_point(scenario.nu),
        "statistics": {k: _jsonable(v) for k, v in stats.items()},
        "stationary": not np.any(
            np.asarray(scenario.point_faults(point).get("drift", {}).get("rate", 0.0), float)
        ),
    }
    if point.budget is not None and eps is not None:
        b = dict(point.budget)
        b["dissipation"] = eps
        b["residual"] = eps - b["production"] - b["turbulent_transport"]
        out["budget"] = {k: _jsonable(v) for k, v in b.items()}
    elif point.budget is not None:
        out["budget"] = {k: _jsonable(v) for k, v in point.budget.items()}
    return out


def write_truth(path, truth: dict) -> None:
    """Write the truth record as pretty JSON (atomically: temp file then rename)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(truth, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    tmp.replace(path)
