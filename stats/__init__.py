"""eddyvigil's statistics core: pure computation, no I/O beyond reading a targets file.

Public names are loaded on first use (PEP 562), so importing a light module such as
``stats.snapshot`` does not compile numba kernels or import scipy.
"""

from importlib import import_module

__all__ = [
    "BlockingAccumulator",
    "Estimate",
    "MomentAccumulator",
    "Moments",
    "PointSnapshot",
    "PointStatistics",
    "STATES",
    "StationarityVerdict",
    "Target",
    "Targets",
    "TargetsError",
    "assess",
    "statistic_names",
]

_WHERE = {
    "BlockingAccumulator": "stats.blocking",
    "Estimate": "stats.snapshot",
    "MomentAccumulator": "stats.moments",
    "Moments": "stats.moments",
    "PointSnapshot": "stats.snapshot",
    "PointStatistics": "stats.point",
    "STATES": "stats.snapshot",
    "StationarityVerdict": "stats.stationarity",
    "Target": "stats.targets",
    "Targets": "stats.targets",
    "TargetsError": "stats.targets",
    "assess": "stats.stationarity",
    "statistic_names": "stats.names",
}


def __getattr__(name):
    if name in _WHERE:
        value = getattr(import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'stats' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
