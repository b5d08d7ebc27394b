"""Stopping rule bookkeeping and the ETA (time still needed)."""

import numpy as np
import pytest
from processes import ar1

from eddyvigil.stats import PointStatistics, Targets
from eddyvigil.stats.convergence import (
    CHECKPOINT_GROWTH,
    ETA_CALIBRATION,
    MIN_BLOCKS,
    STOP_MARGIN,
    STREAK,
    Checkpoints,
    eta_seconds,
    passes,
)


def test_every_condition_of_the_stopping_rule_is_needed():
    ok = dict(half_width=0.5, target=1.0, blocks=100, se_rel_err=0.1, stationary=True)
    assert passes(**ok)
    assert not passes(**{**ok, "stationary": False})
    assert not passes(**{**ok, "blocks": MIN_BLOCKS - 1})
    assert not passes(**{**ok, "se_rel_err": 0.16})
    assert not passes(**{**ok, "half_width": 1.0 / STOP_MARGIN + 1e-9})
    assert not passes(**{**ok, "target": None})
    assert not passes(**{**ok, "half_width": float("nan")})
    assert not passes(**ok, long_enough=False)


def test_eta_from_the_one_over_t_fall_of_the_variance():
    # Var ~ 1/T (REFERENCES §1): a half-width twice the target needs (2 x margin)^2 the time,
    # then the remaining checkpoints of the streak.
    T = 10.0
    need = ETA_CALIBRATION * T * (STOP_MARGIN * 2.0) ** 2 * CHECKPOINT_GROWTH ** (STREAK - 1)
    assert eta_seconds(2.0, 1.0, 200, T) == pytest.approx(need - T)
    # met now, one checkpoint passed: the rest of the streak, each checkpoint 5 % further on
    assert eta_seconds(0.5, 1.0, 200, T, streak=1) == pytest.approx(
        T * (CHECKPOINT_GROWTH ** (STREAK - 1) - 1)
    )
    # too few blocks now: at least the time to reach MIN_BLOCKS
    assert eta_seconds(0.1, 1.0, 32, T) == pytest.approx(
        T * MIN_BLOCKS / 32 * CHECKPOINT_GROWTH ** (STREAK - 1) - T
    )
    # a guard's minimum record (e.g. 100 T_int) is a floor on the need
    assert eta_seconds(0.1, 1.0, 200, T, min_total_s=50.0) == pytest.approx(
        50.0 * CHECKPOINT_GROWTH ** (STREAK - 1) - T
    )
    assert eta_seconds(1.0, None, 200, T) is None
    assert eta_seconds(1.0, 1.0, 8, T) is None
    assert eta_seconds(float("nan"), 1.0, 200, T) is None


def test_checkpoints_need_a_streak_of_passes_in_a_row():
    assert STREAK == 2
    cp = Checkpoints()
    cp.record(10_000, {"U": True}, 1.0)
    cp.record(11_000, {"U": False}, 1.1)
    cp.record(12_100, {"U": True}, 1.2)
    assert not cp.is_converged("U") and cp.converged_at_s is None
    cp.record(14_641, {"U": True}, 1.46)
    assert cp.is_converged("U") and cp.converged_at_s == 1.46
    assert cp.next_n == int(np.ceil(14_641 * CHECKPOINT_GROWTH))


def test_early_eta_predicts_the_actual_stopping_time():
    # Seeded AR(1) runs (rho = 0.95, target +-1 % of a mean of 5): the total time predicted at
    # the first moment an ETA is offered against the time the verdict actually came.
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.01}}})
    ratios = []
    for r in range(40):
        x = 5.0 + ar1(np.random.default_rng(700 + r), 600_000, 1, 0.95)
        ps = PointStatistics(("u",), rate_hz=1000.0, targets=targets)
        predicted = None
        for k in range(0, x.shape[0], 2048):
            snap = ps.update(x[k : k + 2048]).snapshot()
            eta = snap.estimate("U").eta_s
            if predicted is None and eta is not None and eta > 0:
                predicted = snap.duration_s + eta
            if snap.converged:
                break
        assert snap.converged and predicted is not None
        ratios.append(predicted / snap.duration_s)
    assert 0.6 <= np.median(ratios) <= 1.6, np.median(ratios)
