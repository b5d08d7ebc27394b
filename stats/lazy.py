"""Public names of a package loaded on first use (PEP 562), for the three packages' __init__.

A package lists where each public name lives; ``import eddyvigil.stats.snapshot`` or
``import eddyvigil.monitor.cli`` then loads neither numba nor numpy's BLAS until a name that
needs them is asked for. Pure Python; imports nothing else.

>>> ns = {"__name__": "demo"}
>>> getattr_, dir_ = lazy_exports(ns, {"sqrt": "math"})
>>> getattr_("sqrt")(9.0), "sqrt" in ns, dir_()
(3.0, True, ['sqrt'])
"""

from __future__ import annotations

from importlib import import_module

__all__ = ["lazy_exports"]


def lazy_exports(namespace: dict, where: dict[str, str]):
    """``(__getattr__, __dir__)`` for a module whose globals are ``namespace``: each name of
    ``where`` is imported from its module on first use and kept in ``namespace``."""
    package = namespace["__name__"]

    def __getattr__(name):
        if name in where:
            value = getattr(import_module(where[name]), name)
            namespace[name] = value
            return value
        raise AttributeError(f"module {package!r} has no attribute {name!r}")

    def __dir__():
        return sorted(where)

    return __getattr__, __dir__
