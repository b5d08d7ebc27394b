"""eddyvigil's statistics core: pure computation, no I/O beyond reading a targets file.

Public names are loaded on first use (PEP 562), so importing a light module such as
``eddyvigil.stats.snapshot`` does not compile numba kernels or import scipy.
"""

from eddyvigil.stats.lazy import lazy_exports

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


__getattr__, __dir__ = lazy_exports(globals(), _WHERE)
