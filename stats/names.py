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
    "moment_combinations",
    "moment_name",
    "statistic_names",
    "family",
    "components_of",
    "is_known_name",
]

#: Column names eddyvigil treats as velocity components (one letter each).
VELOCITY_LETTERS = ("u", "v", "w")


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


def _stress_order(m: int) -> list[tuple[int, int]]:
    # DESIGN §3 lists normal stresses first, then shear: uu, vv, ww, uv, uw, vw.
    normal = [(i, i) for i in range(m)]
    shear = [(i, j) for i in range(m) for j in range(i + 1, m)]
    return normal + shear


def statistic_names(columns: tuple[str, ...] | list[str]) -> list[str]:
    """Every statistic eddyvigil computes for these velocity columns, in report order.

    >>> statistic_names(("u", "v"))[:6]
    ['U', 'V', 'uu', 'vv', 'uv', 'k']
    >>> len(statistic_names(("u", "v", "w")))
    50
    """
    cols = tuple(columns)
    m = len(cols)
    names = [c.upper() for c in cols]
    names += [moment_name(cols, c) for c in _stress_order(m)]
    names.append("k")
    names += [moment_name(cols, c) for c in moment_combinations(m, 3)]
    names += [moment_name(cols, c) for c in moment_combinations(m, 4)]
    for prefix in ("skew", "flat", "Tint", "Neff", "L"):
        names += [f"{prefix}_{c}" for c in cols]
    return names


def family(name: str) -> str:
    """The family a statistic belongs to; the targets file's relative scales go by family.

    >>> [family(n) for n in ("U", "uv", "k", "uuv", "uuvv", "skew_u", "Tint_w", "eps")]
    ['mean', 'second', 'second', 'third', 'fourth', 'skewness', 'time_scale', 'dissipation']
    """
    if name == "k":
        return "second"
    if name in ("eps",):
        return "dissipation"
    if name == "eta":
        return "length_scale"
    prefix, _, suffix = name.partition("_")
    if suffix:
        return {
            "skew": "skewness",
            "flat": "flatness",
            "Tint": "time_scale",
            "Neff": "effective_samples",
            "L": "length_scale",
        }.get(prefix, "unknown")
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
    if name in ("k", "eps", "eta"):
        return set(VELOCITY_LETTERS)
    prefix, _, suffix = name.partition("_")
    if suffix:
        return {suffix}
    return {ch.lower() for ch in name}


def is_known_name(name: str, columns=VELOCITY_LETTERS) -> bool:
    """True when ``name`` is a statistic eddyvigil can compute for ``columns`` (default u, v, w)."""
    extra = {"eps", "eta"} | {f"L_{c}" for c in columns}
    return name in statistic_names(columns) or name in extra
