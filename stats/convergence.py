"""When may the user stop? Checkpoint bookkeeping and the time still needed.

A statistic is converged only when, at STREAK (2) consecutive geometric checkpoints of the sample
count, all of these held (REFERENCES §11, after Chow & Robbins 1965 and Glynn & Whitt 1992):

* at least ``MIN_BLOCKS`` blocks at the chosen blocking level;
* the relative error of the standard error itself at most ``MAX_SE_RELATIVE_ERROR``;
* the half-width (t-quantile on the block count times the lugsail standard error), inflated
  by the safety factor ``STOP_MARGIN``, at most the target;
* the record is at least ``MIN_RECORD_TINTS`` integral times long (and as long as the user's
  ``min_record_s`` / ``slowest_period_s`` ask), and each block at the chosen level at least
  ``MIN_BLOCK_TINTS`` integral times (REFERENCES §11, §12: blocks must be several T_int long
  before their means are nearly independent);
* the stationarity guard passed for every component the statistic depends on, the blocking
  curve does not rise above the chosen level (slow content), and the moments the interval
  needs exist (tails).

Checking only at geometric checkpoints, and asking for STREAK in a row, keeps the verdict from
firing on one lucky low-noise draw; the margin covers the remaining low bias of estimated
errors at the moment of stopping. The ETA follows from the 1/T scaling of the variance.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

__all__ = [
    "MIN_BLOCKS",
    "MAX_SE_RELATIVE_ERROR",
    "STOP_MARGIN",
    "CHECKPOINT_GROWTH",
    "STREAK",
    "MIN_RECORD_TINTS",
    "MIN_BLOCK_TINTS",
    "Checkpoints",
    "eta_seconds",
    "passes",
    "trustworthy",
]

MIN_BLOCKS = 64
MAX_SE_RELATIVE_ERROR = 0.15
# The trade (benchmarks/bench_stopping.py, default targets, README "How the error bars are
# made"): margin 1.1 with a streak of 3 at 10 % checkpoints stopped at a median 1.8x the
# oracle record; margin 1.0 with a streak of 2 at 5 % checkpoints, with intervals widened by
# 5 % (point.INTERVAL_INFLATION), at 1.32x with coverage 0.95-0.975 at the stop; at 3 %
# checkpoints 1.26x (T_int 10 samples; 1.22x at T_int 50) with worst coverage 0.953 (0.948),
# 600 runs, 1024-sample updates (benchmarks/bench_stopping.py blocks; 5 %: 1.32x, 1.28x).
STOP_MARGIN = 1.0
CHECKPOINT_GROWTH = 1.03
STREAK = 2
#: the ETA's need is scaled by this measured factor (the point stops when its slowest
#: statistic's noisy error estimate first passes). With 5 % checkpoints it was 1.1; with 3 %
#: the 1/T law alone is on time: predicted/actual total record at 25 / 50 % of the stop,
#: median 1.055 / 0.989 (T_int 10 samples) and 1.017 / 1.010 (T_int 50), 600 runs each,
#: 1024-sample updates (benchmarks/bench_stopping.py blocks); 1.1 gave 1.16 / 1.09
ETA_CALIBRATION = 1.0
#: record length, in integral times of the slowest component a statistic depends on, before
#: its error bar counts as trustworthy (REFERENCES §11's safe rule)
MIN_RECORD_TINTS = 100
#: length of each block at the chosen blocking level, in the same integral times
MIN_BLOCK_TINTS = 4
#: blocks needed before an ETA is offered at all (the SE is then known to about +-30 %)
ETA_MIN_BLOCKS = 16


def trustworthy(blocks: int, se_rel_err: float, half_width: float, long_enough: bool) -> bool:
    """True when the error bar can be trusted: enough blocks, a well-known standard error and
    a record and blocks long enough against the integral time (``long_enough``)."""
    return (
        long_enough
        and blocks >= MIN_BLOCKS
        and se_rel_err <= MAX_SE_RELATIVE_ERROR
        and math.isfinite(half_width)
    )


def passes(
    half_width: float,
    target: float | None,
    blocks: int,
    se_rel_err: float,
    stationary: bool,
    long_enough: bool = True,
) -> bool:
    """True when every stopping condition holds at this moment (``stationary``: no guard
    holds the statistic; ``long_enough``: record and blocks long enough, see trustworthy)."""
    if target is None or not math.isfinite(target) or not math.isfinite(half_width):
        return False
    return (
        stationary
        and long_enough
        and blocks >= MIN_BLOCKS
        and se_rel_err <= MAX_SE_RELATIVE_ERROR
        and STOP_MARGIN * half_width <= target
    )


def eta_seconds(
    half_width: float,
    target: float | None,
    blocks: int,
    duration_s: float,
    streak: int = 0,
    min_total_s: float = 0.0,
) -> float | None:
    """Predicted acquisition time still needed, from Var ~ 1/T and the block-count floor.

    ``streak``: consecutive checkpoints already passed; a statistic that meets its target now
    still waits for the rest of its streak (each checkpoint a factor CHECKPOINT_GROWTH further
    on). None while it cannot be predicted (no target, unknown error, too few blocks).
    ``min_total_s``: the least record the guards ask for (minimum record, block length).
    """
    if target is None or not (math.isfinite(target) and target > 0):
        return None
    if not math.isfinite(half_width) or blocks < ETA_MIN_BLOCKS or duration_s <= 0:
        return None
    need = ETA_CALIBRATION * duration_s * (STOP_MARGIN * half_width / target) ** 2
    need = max(need, duration_s * MIN_BLOCKS / blocks, min_total_s)
    if need <= duration_s:
        # met now: the remaining checkpoints of the streak decide
        remaining = max(STREAK - streak, 1)
        return duration_s * (CHECKPOINT_GROWTH**remaining - 1.0)
    # first pass at `need`, then the rest of the streak at geometric checkpoints
    return need * CHECKPOINT_GROWTH ** (STREAK - 1) - duration_s


@dataclass
class Checkpoints:
    """Geometric checkpoints of the sample count and the pass streak of each statistic."""

    # no verdict is possible before 64 blocks of 2 base blocks (64 samples each) exist
    first: int = 8192
    next_n: int = 8192
    streak: dict[str, int] = field(default_factory=dict)
    converged_at_s: float | None = None
    #: statistics whose error bar was trustworthy at some checkpoint: they never fall back
    #: to warming-up (a jump of the blocking level halves the block count for a while)
    trusted: set = field(default_factory=set)
    #: moment row -> blocking level a slow-content rise asked for (its blocks stay at least
    #: that long from then on; PointStatistics._remember_rise)
    slow_level: dict = field(default_factory=dict)

    def due(self, n: int) -> bool:
        return n >= self.next_n

    def record(
        self, n: int, results: dict[str, bool], duration_s: float, trusted=(), required=None
    ) -> None:
        """Record the pass/fail of each targeted statistic at a checkpoint reached at ``n``
        (None: neither, the streak stands).

        ``trusted``: names whose error bar was trustworthy here; ``required``: the names the
        point's verdict rests on (default: all of ``results``; rows without an honest
        interval are left out by the caller).
        """
        self.trusted.update(trusted)
        for name, ok in results.items():
            if ok is None:  # a level jump alone: the streak stands (PointStatistics._passes)
                continue
            self.streak[name] = self.streak.get(name, 0) + 1 if ok else 0
        self.next_n = max(int(math.ceil(n * CHECKPOINT_GROWTH)), n + 1)
        need = list(results if required is None else required)
        if need and self.converged_at_s is None and all(self.is_converged(k) for k in need):
            self.converged_at_s = duration_s

    def is_converged(self, name: str) -> bool:
        return self.streak.get(name, 0) >= STREAK

    def copy(self) -> Checkpoints:
        return Checkpoints(
            self.first,
            self.next_n,
            dict(self.streak),
            self.converged_at_s,
            set(self.trusted),
            dict(self.slow_level),
        )
