"""Stationarity guard end to end: AR(1) records through PointStatistics.

A linear drift of the u-mean by 15 standard errors of the whole-record mean must make the point
suspect; stationary records must rarely be. Requirement figures (not published values):
>= 90 % flagged with the drift, <= 5 % without, over 3-component records.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.signal import lfilter

from eddyvigil.stats.point import PointStatistics

RATE_HZ = 1000.0
T_INT_SAMPLES = 5.0  # integral time scale of the AR(1), in samples (5 ms at 1 kHz)
MEANS = np.array([8.0, 0.6, -0.3])  # m/s, an invented wind-tunnel point
SIGMAS = np.array([0.9, 0.6, 0.5])  # m/s
# Record lengths giving 32, 40, 48, 56 and 62 segment means of the point's segment store.
LENGTHS = (65_536, 81_920, 98_304, 114_688, 126_976)


def _ar1_mean_se(n: int, rho: float) -> float:
    """Standard deviation of the mean of n unit-variance AR(1) samples (exact):
    Var = (1/n^2)[n + 2 sum_k (n-k) rho^k] (common practice, e.g. Bendat & Piersol 2010)."""
    s = rho * (n * (1.0 - rho) - (1.0 - rho**n)) / (1.0 - rho) ** 2
    return math.sqrt((n + 2.0 * s) / n**2)


def _record(rng, n: int, drift_se: float) -> np.ndarray:
    """Exact stationary AR(1) per component (rho = exp(-1/T_int)), u with a linear drift of
    ``drift_se`` true standard errors of its whole-record mean from start to end."""
    rho = math.exp(-1.0 / T_INT_SAMPLES)
    e = rng.standard_normal((3, n))
    zi = rho * rng.standard_normal((3, 1))  # x_{-1} ~ N(0, 1): the record starts stationary
    x, _ = lfilter([math.sqrt(1.0 - rho * rho)], [1.0, -rho], e, axis=1, zi=zi)
    x = x.T * SIGMAS + MEANS
    drift = drift_se * SIGMAS[0] * _ar1_mean_se(n, rho)
    x[:, 0] += drift * ((np.arange(n) + 0.5) / n - 0.5)
    return x


def _snapshot(x: np.ndarray):
    ps = PointStatistics(("u", "v", "w"), RATE_HZ)
    for start in range(0, x.shape[0], 8192):  # blocks as a subscriber would hand them over
        ps.update(x[start : start + 8192])
    return ps, ps.snapshot()


def test_one_drifting_record_is_suspect_with_a_reason():
    rng = np.random.default_rng(2024)
    ps, snap = _snapshot(_record(rng, LENGTHS[2], drift_se=25.0))
    assert ps.blocking.segment_means().shape[0] == 48
    assert "u" in snap.suspect and "trend" in snap.suspect["u"]
    u = snap.estimate("U")
    assert u.state == "suspect" and u.converged is False and "u:" in u.reason
    assert snap.estimate("uv").state == "suspect"  # depends on u
    assert snap.estimate("vv").state != "suspect"
    assert snap.converged is False


@pytest.mark.slow
def test_drift_flagged_and_stationary_records_pass():
    reps = 200
    rng = np.random.default_rng(77)
    false_flags = hits = 0
    for r in range(reps):
        n = LENGTHS[r % len(LENGTHS)]
        _, quiet = _snapshot(_record(rng, n, drift_se=0.0))
        false_flags += bool(quiet.suspect)
        _, drifting = _snapshot(_record(rng, n, drift_se=15.0))
        u = drifting.estimate("U")
        flagged = bool(drifting.suspect) and u.state == "suspect" and not drifting.converged
        hits += flagged
    false_rate, power = false_flags / reps, hits / reps
    print(f"PointStatistics: stationary flagged {false_rate:.3f}, 15-SE drift flagged {power:.3f}")
    assert false_rate <= 0.05
    assert power >= 0.90
