"""Convergence targets: the targets file of DESIGN §5, its defaults, and relative scales.

A target is the allowed half-width of a statistic's confidence interval, either absolute (in
the statistic's own units) or relative to a scale that cannot vanish:

=====================================  ====================================================
family of the statistic                relative to
=====================================  ====================================================
means ``U``, ``V``, ``W``              velocity scale ``sqrt(|U|^2 + 2k/3)``, ``|U|`` the
                                       local mean speed over the components present
second moments ``uu`` ... and ``k``    ``k``
third moments ``uuu`` ...              ``k**1.5``
fourth moments ``uuuu`` ...            ``k**2``
``skew_*``, ``flat_*``                 1 (a relative target is an absolute one)
``Tint_*``, ``Neff_*``, ``L_*``         the magnitude of the statistic itself
``eps``                                ``k**1.5 / L_u`` (judged in ``stats/eps_target.py``)
=====================================  ====================================================

Defaults (used when no file is given): confidence 0.95; ``U``, ``V``, ``W`` within 1 % of the
velocity scale; ``uu``, ``vv``, ``ww``, ``uv``, ``uw``, ``vw`` and ``k`` within 5 % of ``k``.
Why these are reachable in about 10-30 s at an integral time of a few ms (Gaussian,
exponential-correlation arithmetic, Lumley & Panofsky 1964; half-width = 1.96 x 1.1 x SE):
a mean at 20 % turbulence intensity has SE = 0.2 |U| sqrt(2 T_int / T), so 1 % needs
T >= 3700 T_int (11 s at 3 ms); ``uu`` has SE = uu sqrt(2 T_int / T) and with uu ~ 2k/3 the
5 % of k target needs T >= 1700 T_int (5 s at 3 ms); ``uv`` (SE = sqrt(uu vv (1 + r^2) T_int / T))
needs about 1100 T_int. Statistics that are not named are still reported, untargeted.

Three optional settings guard the verdict (REFERENCES §11, §12): ``min_record_s`` (no statistic
is converged before this much record, seconds), ``slowest_period_s`` (the slowest period of
the facility's unsteadiness, e.g. a pump or the speed control hunting; it is then treated as
the longest integral time present: blocks of at least 4 and a record of at least 100 of it) and ``accept_modelled_k = true`` (give k measured with fewer than three components an
interval; by default such a k is reported without one, as it rests on an isotropy model).
For rakes and fields, ``field_fraction`` (in (0, 1], default 1: every vector with valid
samples) is the fraction of vectors that must meet every target for the point to converge.

A ``[budget]`` table asks for k-budget terms directly (``stats/budget_targets.py`` turns it,
point by point, into tolerances on the statistics that feed each term; README, targets file)::

    [budget]
    production = { relative = 0.1 }            # +-10 % of the term's RMS across the traverse
    turbulent_transport = { absolute = 0.5 }   # m^2/s^3
    axis = "y"                                 # traverse axis (default y)
    positions = [-0.1, -0.05, 0.0, 0.05, 0.1]  # the planned traverse (optional)

A file replaces the default list as a whole: its ``[targets]`` table is the complete list of
targets. A file without a ``[targets]`` table keeps the default targets and only sets the
confidence. Example (DESIGN §5)::

    confidence = 0.95
    [targets]
    U   = { relative = 0.01 }     # +-1 % of sqrt(|U|^2 + 2k/3)
    uv  = { absolute = 0.02 }     # m^2/s^2
    uuv = { relative = 0.15 }     # +-15 % of k^(3/2)

>>> t = Targets.from_dict({"targets": {"U": {"relative": 0.01}, "uv": {"absolute": 0.02}}})
>>> round(t.resolve("U", {"U": 8.0, "V": 6.0, "k": 1.5}), 4)
0.1005
>>> t.resolve("uv", {"k": float("nan")}), t.resolve("uu", {"k": 1.0})
(0.02, None)
"""

from __future__ import annotations

import difflib
import math
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType

from eddyvigil.stats.names import (
    MEAN_NAMES,
    NOT_ESTIMATED,
    STRESS_NAMES,
    VELOCITY_LETTERS,
    family,
    is_known_name,
    known_names,
)

__all__ = [
    "TargetsError",
    "Target",
    "Targets",
    "TargetPlan",
    "DEFAULT_CONFIDENCE",
    "DEFAULT_TARGETS",
    "BUDGET_TERMS",
    "BudgetRequest",
]

#: Confidence level of the intervals when the file does not say.
DEFAULT_CONFIDENCE = 0.95

#: Default targets as ``name -> relative tolerance`` (see the module docstring for the scales).
DEFAULT_TARGETS: Mapping[str, float] = MappingProxyType(
    # U V W to 1 % of |U|; uu vv ww uv uw vw and k to 5 % of k
    {**{name: 0.01 for name in MEAN_NAMES}, **{name: 0.05 for name in STRESS_NAMES}}
)

# Families whose relative scale is the magnitude of the statistic itself.
_SELF_SCALED = ("time_scale", "effective_samples", "length_scale", "dissipation")

#: How a relative target's scale is found, by family: "self" is the statistic's own magnitude,
#: the others are keys of _scales().
_SCALE_KIND = {
    "mean": "speed",
    "skewness": "one",
    "flatness": "one",
    "second": "k",
    "third": "k^1.5",
    "fourth": "k^2",
    **{fam: "self" for fam in _SELF_SCALED},
}


def _scales(means, k) -> dict[str, float]:
    """Every shared scale from the mean components present and k (NaN where not yet known).

    The scale of the means is ``sqrt(|U|^2 + 2k/3)``, not the mean speed ``|U|`` that DESIGN §5
    first named: in a recirculation zone or a wake centre |U| passes through zero while the
    fluctuations do not, and a tolerance relative to |U| then asked for days of record. With
    2k/3 (the variance of one component in isotropic turbulence) the scale stays positive
    wherever the flow is turbulent, and equals |U| to within 2 % at 20 % turbulence intensity.
    A file that says ``U = { relative = 0.01 }`` keeps working; only its scale changed. Without
    a usable k the scale is |U| alone.
    """
    k = float(k)
    if not k >= 0.0:  # NaN or negative: not a usable energy yet
        k15 = k2 = k = math.nan
    else:
        k15, k2 = k**1.5, k * k
    if means:
        # without a k (a caller's dict that has none) the scale is |U| alone, as before
        extra = 2.0 * k / 3.0 if k >= 0.0 else 0.0
        speed = math.sqrt(math.fsum(float(m) ** 2 for m in means) + extra)
    else:
        speed = math.nan
    return {"speed": speed, "k": k, "k^1.5": k15, "k^2": k2, "one": 1.0, "none": math.nan}


# What a relative target is relative to, for describe() and error messages.
_SCALE_TEXT = {
    "mean": "of the velocity scale sqrt(|U|^2 + 2k/3)",
    "second": "of k",
    "third": "of k^(3/2)",
    "fourth": "of k^2",
    "skewness": "(relative to 1)",
    "flatness": "(relative to 1)",
}

_UNITS = {
    "mean": "m/s",
    "second": "m^2/s^2",
    "third": "m^3/s^3",
    "fourth": "m^4/s^4",
    "skewness": "-",
    "flatness": "-",
    "time_scale": "s",
    "effective_samples": "-",
    "length_scale": "m",
    "dissipation": "m^2/s^3",
}

_TOP_KEYS = ("confidence", "targets", "min_record_s", "slowest_period_s", "accept_modelled_k",
             "budget", "field_fraction")

#: k-budget terms a ``[budget]`` table may ask for (the ones the statistics of a point feed
#: through a derivative across the traverse: stats.budget.derived_tolerances)
BUDGET_TERMS = ("production", "turbulent_transport")

_BUDGET_KEYS = (*BUDGET_TERMS, "axis", "positions")

_TARGET_KEYS = ("relative", "absolute")


class TargetsError(ValueError):
    """A targets file or mapping that cannot be used; the message is meant for the user."""


@dataclass(frozen=True, slots=True)
class Target:
    """The tolerance of one statistic: exactly one of ``absolute`` and ``relative`` is set."""

    name: str
    absolute: float | None = None
    relative: float | None = None

    def __post_init__(self):
        if (self.absolute is None) == (self.relative is None):
            raise TargetsError(
                f"target {self.name!r}: give exactly one of 'relative' or 'absolute'"
            )
        for key in _TARGET_KEYS:
            x = getattr(self, key)
            if x is not None and not (math.isfinite(x) and x > 0):
                raise TargetsError(f"target {self.name!r}: {key} must be positive and finite")

    def describe(self) -> str:
        """One line, e.g. ``"±5 % of k"`` or ``"±0.02 m^2/s^2"``."""
        fam = family(self.name)
        if self.absolute is not None:
            return f"±{self.absolute:g} {_UNITS.get(fam, '')}".rstrip()
        scale = _SCALE_TEXT.get(fam, f"of |{self.name}|")
        return f"±{100.0 * self.relative:g} % {scale}"


@dataclass(frozen=True, slots=True)
class BudgetRequest:
    """The ``[budget]`` table: tolerances on k-budget terms (``Target`` named by the term;
    relative: to the term's RMS across the traverse so far, absolute: m^2/s^3), the traverse
    axis and, optionally, the planned positions along it (m)."""

    terms: Mapping[str, Target]
    axis: str = "y"
    positions: tuple[float, ...] | None = None

    def describe(self, term: str) -> str:
        t = self.terms[term]
        if t.absolute is not None:
            return f"±{t.absolute:g} m^2/s^3"
        return f"±{100.0 * t.relative:g} % of its RMS across the traverse"

    def to_dict(self) -> dict:
        out: dict = {name: ({"absolute": t.absolute} if t.absolute is not None
                            else {"relative": t.relative}) for name, t in self.terms.items()}
        out["axis"] = self.axis
        if self.positions is not None:
            out["positions"] = list(self.positions)
        return out


def _parse_budget(source: str, table) -> BudgetRequest:
    where = f"{source}: [budget]"
    if not isinstance(table, Mapping):
        raise TargetsError(f"{where} must be a table, got {type(table).__name__}")
    unknown = [k for k in table if k not in _BUDGET_KEYS]
    if unknown:
        raise TargetsError(
            f"{where}: unknown key {unknown[0]!r}{_suggest(str(unknown[0]), _BUDGET_KEYS)}; "
            "terms that can be asked for: production, turbulent_transport (dissipation, "
            "advection and the residual are not fed by a point's moments); also axis, positions"
        )
    terms = {}
    for name in BUDGET_TERMS:
        if name not in table:
            continue
        spec = table[name]
        if not isinstance(spec, Mapping) or len(spec) != 1 \
                or next(iter(spec)) not in _TARGET_KEYS:
            raise TargetsError(f"{where} {name}: expected {{ relative = 0.1 }} or "
                               f"{{ absolute = 0.5 }} (m^2/s^3), got {spec!r}")
        ((key, value),) = spec.items()
        if not _is_number(value) or not (math.isfinite(value) and value > 0):
            raise TargetsError(f"{where} {name}: {key} must be a positive number, got {value!r}")
        terms[name] = Target(name=name, **{key: float(value)})
    if not terms:
        raise TargetsError(f"{where}: name at least one term (production, turbulent_transport)")
    axis = table.get("axis", "y")
    if axis not in ("x", "y", "z"):
        raise TargetsError(f"{where}: axis must be \"x\", \"y\" or \"z\", got {axis!r}")
    positions = table.get("positions")
    if positions is not None:
        ok = isinstance(positions, list) and len(positions) >= 3 and all(
            _is_number(p) and math.isfinite(p) for p in positions)
        if not ok or len({round(float(p), 9) for p in positions}) != len(positions):
            raise TargetsError(f"{where}: positions must be a list of at least three distinct "
                               "numbers (m along the axis)")
        positions = tuple(sorted(float(p) for p in positions))
    return BudgetRequest(terms, axis, positions)


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _suggest(word: str, choices) -> str:
    close = difflib.get_close_matches(word, list(choices), n=3, cutoff=0.5)
    return f" (did you mean {', '.join(repr(c) for c in close)}?)" if close else ""


def _parse_target(source: str, name, spec) -> Target:
    where = f"{source}: [targets] {name}"
    if not isinstance(name, str) or not is_known_name(name):
        known = known_names()
        if isinstance(name, str) and name.lower() in known:
            hint = f" (did you mean {name.lower()!r}? capitals are means, lower case fluctuations)"
        else:
            hint = _suggest(str(name), known)
        raise TargetsError(
            f"{where}: unknown statistic name{hint}; names (README, 'Statistic names'): means "
            "U V W, stresses uu vv ww uv uw vw, k, third/fourth moments like uuv or uuvv, "
            "skew_u, flat_u, Tint_u, Neff_u, L_u"
        )
    if name in NOT_ESTIMATED and name != "eps":  # eps: judged in stats/eps_target.py
        # a target nobody computes could never be met: refuse it rather than ignore it
        raise TargetsError(
            f"{where}: {name} is a statistic name, but this version does not estimate it yet; "
            "remove the target"
        )
    if not isinstance(spec, Mapping):
        raise TargetsError(
            f"{where}: expected an inline table like {{ relative = 0.05 }} or "
            f"{{ absolute = 0.02 }}, got {type(spec).__name__} {spec!r}"
        )
    unknown = [k for k in spec if k not in _TARGET_KEYS]
    if unknown:
        raise TargetsError(
            f"{where}: unknown key {unknown[0]!r}{_suggest(str(unknown[0]), _TARGET_KEYS)}; "
            "use 'relative' or 'absolute'"
        )
    if len(spec) != 1:
        raise TargetsError(
            f"{where}: give exactly one of 'relative' or 'absolute' (got {len(spec)})"
        )
    ((key, value),) = spec.items()
    if not _is_number(value):
        raise TargetsError(f"{where}: {key} must be a number, got {type(value).__name__} {value!r}")
    value = float(value)
    if not (math.isfinite(value) and value > 0):
        raise TargetsError(f"{where}: {key} must be positive and finite, got {value!r}")
    return Target(name=name, **{key: value})


@dataclass(frozen=True, slots=True)
class Targets:
    """Confidence level and per-statistic tolerances of a run (read-only).

    Build it with :meth:`defaults`, :meth:`from_toml` or :meth:`from_dict`; ``targets`` maps a
    statistic name to its :class:`Target`.
    """

    confidence: float = DEFAULT_CONFIDENCE
    targets: Mapping[str, Target] = field(default_factory=dict)
    #: no verdict before this much record (seconds); None: no minimum of the user's
    min_record_s: float | None = None
    #: the slowest period (or correlation time) of the facility's unsteadiness (pump, speed
    #: control hunting...), seconds: it counts as an integral time that every statistic's
    #: minimum record and block length must respect (convergence.MIN_RECORD_TINTS, _BLOCK_)
    slowest_period_s: float | None = None
    #: give k from fewer than three components an interval (it rests on an isotropy model)
    accept_modelled_k: bool = False
    #: the [budget] table (stats/budget_targets.py), None when the file has none
    budget: BudgetRequest | None = None
    #: rakes and fields: the fraction of vectors that must meet every target (stats.field)
    field_fraction: float = 1.0

    @property
    def required_record_s(self) -> float:
        """The least record, in seconds, that the user's settings ask for before a verdict."""
        return 0.0 if self.min_record_s is None else self.min_record_s

    def __post_init__(self):
        c = self.confidence
        if not _is_number(c) or not (0.0 < float(c) < 1.0):
            raise TargetsError(f"confidence must be a number strictly between 0 and 1, got {c!r}")
        object.__setattr__(self, "confidence", float(c))
        for name, t in self.targets.items():
            if not isinstance(t, Target) or t.name != name:
                raise TargetsError(f"targets[{name!r}] must be a Target named {name!r}")
        object.__setattr__(self, "targets", MappingProxyType(dict(self.targets)))
        for key in ("min_record_s", "slowest_period_s"):
            x = getattr(self, key)
            if x is not None and not (_is_number(x) and math.isfinite(x) and x > 0):
                raise TargetsError(f"{key} must be a positive number of seconds, got {x!r}")
        if not isinstance(self.accept_modelled_k, bool):
            raise TargetsError(
                f"accept_modelled_k must be true or false, got {self.accept_modelled_k!r}"
            )
        f = self.field_fraction
        if not (_is_number(f) and 0.0 < float(f) <= 1.0):
            raise TargetsError(f"field_fraction must be a number in (0, 1], got {f!r}")
        object.__setattr__(self, "field_fraction", float(f))

    # ----------------------------------------------------------------- constructors
    @classmethod
    def defaults(cls) -> Targets:
        """The built-in targets (module docstring)."""
        return cls(
            confidence=DEFAULT_CONFIDENCE,
            targets={n: Target(n, relative=r) for n, r in DEFAULT_TARGETS.items()},
        )

    @classmethod
    def from_dict(cls, d: Mapping, *, source: str = "targets") -> Targets:
        """Targets from a mapping with the TOML file's schema; ``source`` names it in messages."""
        if not isinstance(d, Mapping):
            raise TargetsError(f"{source}: expected a table of settings, got {type(d).__name__}")
        unknown = [k for k in d if k not in _TOP_KEYS]
        if unknown:
            raise TargetsError(
                f"{source}: unknown setting {unknown[0]!r}{_suggest(str(unknown[0]), _TOP_KEYS)}; "
                "a targets file has 'confidence = 0.95' and a [targets] table"
            )
        confidence = d.get("confidence", DEFAULT_CONFIDENCE)
        if not _is_number(confidence) or not (0.0 < float(confidence) < 1.0):
            raise TargetsError(
                f"{source}: confidence must be a number strictly between 0 and 1 "
                f"(e.g. 0.95), got {confidence!r}"
            )
        record = {}
        for key in ("min_record_s", "slowest_period_s"):
            if key in d:
                x = d[key]
                if not (_is_number(x) and math.isfinite(x) and x > 0):
                    raise TargetsError(
                        f"{source}: {key} must be a positive number of seconds, got {x!r}"
                    )
                record[key] = float(x)
        if "accept_modelled_k" in d:
            if not isinstance(d["accept_modelled_k"], bool):
                raise TargetsError(
                    f"{source}: accept_modelled_k must be true or false, "
                    f"got {d['accept_modelled_k']!r}"
                )
            record["accept_modelled_k"] = d["accept_modelled_k"]
        if "budget" in d:
            record["budget"] = _parse_budget(source, d["budget"])
        if "field_fraction" in d:
            f = d["field_fraction"]
            if not (_is_number(f) and 0.0 < float(f) <= 1.0):
                raise TargetsError(
                    f"{source}: field_fraction must be a number in (0, 1] (e.g. 0.95: 95 % of "
                    f"the vectors), got {f!r}"
                )
            record["field_fraction"] = float(f)
        if "targets" not in d:
            return cls(confidence=float(confidence), targets=cls.defaults().targets, **record)
        table = d["targets"]
        if not isinstance(table, Mapping):
            raise TargetsError(
                f"{source}: 'targets' must be a table ([targets] followed by lines like "
                f"U = {{ relative = 0.01 }}), got {type(table).__name__}"
            )
        if not table:
            raise TargetsError(
                f"{source}: the [targets] table is empty; name at least one statistic, "
                "or remove the table to use the defaults"
            )
        parsed = {name: _parse_target(source, name, spec) for name, spec in table.items()}
        return cls(confidence=float(confidence), targets=parsed, **record)

    @classmethod
    def from_toml(cls, path) -> Targets:
        """Read a targets file; :class:`TargetsError` says what is wrong and where."""
        p = Path(path)
        try:
            with p.open("rb") as f:
                data = tomllib.load(f)
        except OSError as e:
            raise TargetsError(f"{p}: cannot read the targets file ({e.strerror or e})") from e
        except tomllib.TOMLDecodeError as e:
            raise TargetsError(f"{p}: not valid TOML: {e}") from e
        except UnicodeDecodeError as e:
            raise TargetsError(f"{p}: not valid TOML: not UTF-8 text ({e.reason})") from e
        return cls.from_dict(data, source=str(p))

    def to_dict(self) -> dict:
        """The TOML schema as a plain dict (``from_dict(t.to_dict()) == t``)."""
        out = {}
        for name, t in self.targets.items():
            out[name] = (
                {"absolute": t.absolute} if t.absolute is not None else {"relative": t.relative}
            )
        d = {"confidence": self.confidence, "targets": out}
        for key in ("min_record_s", "slowest_period_s"):
            if getattr(self, key) is not None:
                d[key] = getattr(self, key)
        if self.accept_modelled_k:
            d["accept_modelled_k"] = True
        if self.budget is not None:
            d["budget"] = self.budget.to_dict()
        if self.field_fraction != 1.0:
            d["field_fraction"] = self.field_fraction
        return d

    # ----------------------------------------------------------------- resolving
    def scale(self, name: str, values: Mapping[str, float]) -> float:
        """The scale a relative target of ``name`` multiplies, from the current ``values``.

        NaN when the scale is not yet known (a needed value is missing or not finite).
        """
        kind = _SCALE_KIND.get(family(name), "none")
        if kind == "self":
            return abs(float(values.get(name, math.nan)))
        means = [values[c.upper()] for c in VELOCITY_LETTERS if c.upper() in values]
        return _scales(means, values.get("k", math.nan))[kind]

    def resolve(self, name: str, values: Mapping[str, float]) -> float | None:
        """Absolute half-width allowed for ``name`` now; None if untargeted, NaN if not yet known.

        A relative target whose scale is zero or not finite resolves to NaN: a tolerance of
        zero could never be met, so "not yet known" is the honest answer.
        """
        t = self.targets.get(name)
        if t is None:
            return None
        if t.absolute is not None:
            return t.absolute
        s = self.scale(name, values)
        if not (math.isfinite(s) and s > 0.0):
            return math.nan
        return t.relative * s

    def plan(self, names) -> TargetPlan:
        """:meth:`resolve` for a fixed list of ``names``, worked out once (see TargetPlan)."""
        return TargetPlan(self, tuple(names))

    def describe(self) -> str:
        """Human-readable table of the targets, for ``--help`` and the README."""
        lines = [
            f"Targets: half-width of the {100.0 * self.confidence:g} % confidence interval",
        ]
        if not self.targets:
            lines.append("  (none: every statistic is reported untargeted)")
        width = max((len(n) for n in self.targets), default=1)
        for name, t in self.targets.items():
            lines.append(f"  {name:<{width}}  {t.describe()}")
        lines.append("Other statistics are reported without a target.")
        if self.budget is not None:
            for term in self.budget.terms:
                lines.append(f"Budget: {term} {self.budget.describe(term)} along "
                             f"{self.budget.axis} (per-point tolerances derived as points finish)")
        return "\n".join(lines)


class TargetPlan:
    """:meth:`Targets.resolve` of every name of a fixed list at once, from an array of values.

    A point's statistic names never change, so which names are targeted, how, and where the
    scales (|U|, k) sit in the value array is worked out once; :meth:`resolve` then computes
    each shared scale once instead of once per name. Same arithmetic as ``Targets.resolve``
    with ``values = dict(zip(names, values))``.
    """

    def __init__(self, targets: Targets, names: tuple[str, ...]):
        self.names = names
        pos = {n: i for i, n in enumerate(names)}
        #: indices of the targeted names, in name order
        self.targeted = tuple(i for i, n in enumerate(names) if n in targets.targets)
        # per targeted name: (index, absolute or None, relative or None, scale kind)
        self._rows = []
        for i in self.targeted:
            t = targets.targets[names[i]]
            kind = _SCALE_KIND.get(family(names[i]), "none")
            self._rows.append((i, t.absolute, t.relative, kind))
        self._mean_pos = [pos[c.upper()] for c in VELOCITY_LETTERS if c.upper() in pos]
        self._k_pos = pos.get("k")

    def resolve(self, values) -> list[float | None]:
        """Allowed half-width of every name (None untargeted, NaN not yet known); ``values``
        are the current values in name order (a sequence of floats)."""
        out: list[float | None] = [None] * len(self.names)
        scales = None
        for i, absolute, relative, kind in self._rows:
            if absolute is not None:
                out[i] = absolute
                continue
            if kind == "self":
                s = abs(float(values[i]))
            else:
                if scales is None:
                    k = math.nan if self._k_pos is None else values[self._k_pos]
                    scales = _scales([values[j] for j in self._mean_pos], k)
                s = scales[kind]
            out[i] = relative * s if math.isfinite(s) and s > 0.0 else math.nan
        return out
