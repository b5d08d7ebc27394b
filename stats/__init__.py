"""eddyvigil's statistics core: pure computation, no I/O beyond reading a targets file."""

from stats.blocking import BlockingAccumulator
from stats.moments import MomentAccumulator, Moments
from stats.names import statistic_names
from stats.point import PointStatistics
from stats.snapshot import STATES, Estimate, PointSnapshot
from stats.targets import Target, Targets, TargetsError

__all__ = [
    "BlockingAccumulator",
    "Estimate",
    "MomentAccumulator",
    "Moments",
    "PointSnapshot",
    "PointStatistics",
    "STATES",
    "Target",
    "Targets",
    "TargetsError",
    "statistic_names",
]
