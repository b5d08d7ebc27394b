"""Statistic names of the trade, as DESIGN §3 spells them.

Capital letters are means, lower-case letter strings are central moments of the
fluctuations (letters in column order), and a few derived quantities carry a
component suffix. Everything that names a statistic goes through this module so
that the summary, the targets file and the dashboard can never disagree.
"""

from __future__ import annotations

from itertools import combinations_with_replacement

__all__ = [
    "VELOCITY_LETTERS",
    "MEAN_NAMES",
    "STRESS_NAMES",
    "FAMILIES",
    "NOT_ESTIMATED",
    "K_FACTORS",
    "K_METHODS",
    "k_from_normal_stresses",
    "mean_names",
    "stress_combinations",
    "stress_names",
    "moment_statistic_names",
    "known_names",
    "moment_combinations",
    "moment_name",
    "statistic_names",
    "family",
    "components_of",
    "is_known_name",
]

#: Column names eddyvigil treats as velocity components (one letter each).
VELOCITY_LETTERS = ("u", "v", "w")

#: The families, by the prefix of a suffixed name (``skew_u``) and by the name of a few others;
#: the targets file's relative scales and units go by family.
FAMILIES = {
    "skew": "skewness",
    "flat": "flatness",
    "Tint": "time_scale",
    "Neff": "effective_samples",
    "L": "length_scale",
    "k": "second",
    "eps": "dissipation",
    "eta": "length_scale",
}
#: Prefixes of the per-component statistics from the moments (delta method) ...
MOMENT_PREFIXES = ("skew", "flat")
#: ... and of those from the blocking analysis of the means (integral scales).
SCALE_PREFIXES = ("Tint", "Neff", "L")
#: Names of DESIGN §3 that have a relative scale but no estimator yet.
NOT_ESTIMATED = ("eps", "eta")

#: k from the normal stresses present: factor on their sum, by component count (DESIGN §3).
K_FACTORS = {3: 0.5, 2: 0.75, 1: 1.5}
#: How k is formed from the components present (README states the 2-component one).
K_METHODS = {
    3: "k = (uu + vv + ww)/2",
    2: "k = 3/4 (uu + vv): two components, assuming ww = (uu + vv)/2 (common practice)",
    1: "k = 3/2 uu: one component, assuming isotropy (common practice)",
}


def k_from_normal_stresses(normal):
    """Turbulent kinetic energy from the normal stresses of the components present.

    The monitor's estimator and the simulator's truth both call this, so they cannot disagree.

    >>> k_from_normal_stresses([1.0, 0.5, 0.5]), k_from_normal_stresses([1.0, 0.5])
    (1.0, 1.125)
    """
    normal = list(normal)
    total = normal[0]
    for x in normal[1:]:
        total = total + x
    return K_FACTORS[len(normal)] * total


def moment_combinations(m: int, order: int) -> list[tuple[int, ...]]:
    """Index tuples ``i <= j <= ...`` of all co-moments of one order for ``m`` components.

    >>> moment_combinations(3, 2)
    [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
    >>> [len(moment_combinations(3, p)) for p in (2, 3, 4)]
    [6, 10, 15]
    """
    return list(combinations_with_replacement(range(m), order))


def moment_name(columns: tuple[str, ...] | list[str], combo: tuple[int, ...]) -> str:
    """``("u","v","w"), (0, 1, 1) -> "uvv"``."""
    return "".join(columns[i] for i in combo)


def stress_combinations(m: int) -> list[tuple[int, int]]:
    """DESIGN §3 lists normal stresses first, then shear: uu, vv, ww, uv, uw, vw.

    >>> stress_combinations(2)
    [(0, 0), (1, 1), (0, 1)]
    """
    normal = [(i, i) for i in range(m)]
    shear = [(i, j) for i in range(m) for j in range(i + 1, m)]
    return normal + shear


def mean_names(columns) -> tuple[str, ...]:
    """``("u", "v") -> ("U", "V")``."""
    return tuple(c.upper() for c in columns)


def stress_names(columns) -> tuple[str, ...]:
    """Reynolds-stress names in report order, e.g. ``uu, vv, ww, uv, uw, vw``."""
    cols = tuple(columns)
    return tuple(moment_name(cols, c) for c in stress_combinations(len(cols)))


def moment_statistic_names(columns) -> tuple[str, ...]:
    """The statistics computed from the moments (with delta-method errors), in report order.

    >>> moment_statistic_names(("u",))
    ('U', 'uu', 'k', 'uuu', 'uuuu', 'skew_u', 'flat_u')
    """
    cols = tuple(columns)
    m = len(cols)
    names = [*mean_names(cols), *stress_names(cols), "k"]
    names += [moment_name(cols, c) for c in moment_combinations(m, 3)]
    names += [moment_name(cols, c) for c in moment_combinations(m, 4)]
    for prefix in MOMENT_PREFIXES:
        names += [f"{prefix}_{c}" for c in cols]
    return tuple(names)


def statistic_names(columns: tuple[str, ...] | list[str]) -> list[str]:
    """Every statistic eddyvigil computes for these velocity columns, in report order.

    >>> statistic_names(("u", "v"))[:6]
    ['U', 'V', 'uu', 'vv', 'uv', 'k']
    >>> len(statistic_names(("u", "v", "w")))
    50
    """
    cols = tuple(columns)
    names = list(moment_statistic_names(cols))
    for prefix in SCALE_PREFIXES:
        names += [f"{prefix}_{c}" for c in cols]
    return names


def known_names(columns=VELOCITY_LETTERS) -> list[str]:
    """Every name a targets file may use: the computed ones and those not estimated yet."""
    return statistic_names(columns) + list(NOT_ESTIMATED)


#: The dashboard's and the default targets' names for three components.
MEAN_NAMES = mean_names(VELOCITY_LETTERS)
STRESS_NAMES = stress_names(VELOCITY_LETTERS) + ("k",)


def family(name: str) -> str:
    """The family a statistic belongs to; the targets file's relative scales go by family.

    >>> [family(n) for n in ("U", "uv", "k", "uuv", "uuvv", "skew_u", "Tint_w", "eps")]
    ['mean', 'second', 'second', 'third', 'fourth', 'skewness', 'time_scale', 'dissipation']
    """
    if name in FAMILIES:
        return FAMILIES[name]
    prefix, _, suffix = name.partition("_")
    if suffix:
        return FAMILIES.get(prefix, "unknown")
    if len(name) == 1 and name.isupper():
        return "mean"
    if name.islower() and 2 <= len(name) <= 4:
        return {2: "second", 3: "third", 4: "fourth"}[len(name)]
    return "unknown"


def components_of(name: str) -> set[str]:
    """Lower-case component letters a statistic depends on (``k`` depends on all).

    >>> sorted(components_of("uvv")), sorted(components_of("skew_w")), sorted(components_of("V"))
    (['u', 'v'], ['w'], ['v'])
    """
    if name == "k" or name in NOT_ESTIMATED:
        return set(VELOCITY_LETTERS)
    prefix, _, suffix = name.partition("_")
    if suffix:
        return {suffix}
    return {ch.lower() for ch in name}


def is_known_name(name: str, columns=VELOCITY_LETTERS) -> bool:
    """True when ``name`` is a statistic eddyvigil can compute for ``columns`` (default u, v, w)."""
    return name in known_names(columns)
