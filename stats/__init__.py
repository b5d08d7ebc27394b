"""eddyvigil's statistics core: pure computation, no I/O beyond reading a targets file.

Public names are loaded on first use (PEP 562), so importing a light module such as
``eddyvigil.stats.snapshot`` does not compile numba kernels or import scipy.
"""

from importlib import import_module

__all__ = [
    "Accumulator",
    "BlockingAccumulator",
    "BlockingSnapshot",
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
    "Verdict",
    "assess",
    "point_verdict",
    "statistic_names",
]

_WHERE = {
    "Accumulator": "eddyvigil.stats.protocol",
    "BlockingAccumulator": "eddyvigil.stats.blocking",
    "BlockingSnapshot": "eddyvigil.stats.blocking",
    "Estimate": "eddyvigil.stats.snapshot",
    "MomentAccumulator": "eddyvigil.stats.moments",
    "Moments": "eddyvigil.stats.moments",
    "PointSnapshot": "eddyvigil.stats.snapshot",
    "PointStatistics": "eddyvigil.stats.point",
    "STATES": "eddyvigil.stats.snapshot",
    "StationarityVerdict": "eddyvigil.stats.stationarity",
    "Target": "eddyvigil.stats.targets",
    "Targets": "eddyvigil.stats.targets",
    "TargetsError": "eddyvigil.stats.targets",
    "Verdict": "eddyvigil.stats.verdict",
    "point_verdict": "eddyvigil.stats.verdict",
    "assess": "eddyvigil.stats.stationarity",
    "statistic_names": "eddyvigil.stats.names",
}


def __getattr__(name):
    if name in _WHERE:
        value = getattr(import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'eddyvigil.stats' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
