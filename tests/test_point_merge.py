"""Merging the statistics of independent records of one point (repeats, saved states).

Values must equal numpy over the concatenated samples (Pébay 2008, SAND2008-6212, REFERENCES §4:
the merge is exact); standard errors of the merged mean must agree with the exact variance of
the mean of independent AR(1) records (REFERENCES §1: the variances of the records' sums add);
the checkpoint-streak rule of ``PointStatistics.merge`` is checked on its two outcomes.
"""

import numpy as np
from processes import MEAN, STRESS, ar1_mean_variance, turbulence

from eddyvigil.stats import PointStatistics, Targets

RHO = np.exp(-1 / 10)
COLS = ("u", "v", "w")
LOOSE = Targets.from_dict({"targets": {"U": {"relative": 0.05}, "uu": {"relative": 0.5}}})


def _fed(x, targets=None, step=4096):
    ps = PointStatistics(COLS, rate_hz=1000.0, targets=targets)
    for k in range(0, x.shape[0], step):
        ps.update(x[k : k + step])
    return ps


def test_independent_records_with_their_own_references_merge():
    rng = np.random.default_rng(71)
    xa, xb = turbulence(rng, 50_000, RHO), turbulence(rng, 30_001, RHO)
    a, b = _fed(xa), _fed(xb)
    assert not np.array_equal(a.blocking.ref, b.blocking.ref)
    snap = a.merge(b).snapshot()
    allx = np.concatenate([xa, xb])
    cov = np.cov(allx.T, bias=True)
    np.testing.assert_allclose(snap.estimate("U").value, allx[:, 0].mean(), rtol=1e-12)
    np.testing.assert_allclose(snap.estimate("vw").value, cov[1, 2], rtol=1e-9, atol=1e-12)
    # the error of the merged mean: exact value for two independent AR(1) records (§1),
    # to the accuracy of one blocking estimate (about 15 % at these block counts)
    sigma = np.sqrt(STRESS[0, 0])
    var_sum = sum(n**2 * ar1_mean_variance(RHO, n, sigma) for n in (50_000, 30_001))
    exact = np.sqrt(var_sum) / 80_001
    np.testing.assert_allclose(snap.estimate("U").stderr, exact, rtol=0.25)


def test_two_converged_repeats_stay_converged_when_they_agree():
    rng = np.random.default_rng(72)
    a = _fed(turbulence(rng, 60_000, RHO), LOOSE)
    b = _fed(turbulence(rng, 60_000, RHO), LOOSE)
    assert a.snapshot().converged and b.snapshot().converged
    merged = a.merge(b)
    snap = merged.snapshot()
    assert snap.converged and snap.converged_at_s == merged.duration_s == 120.0
    assert a.snapshot().converged_at_s < 60.0  # inputs untouched


def test_repeats_that_disagree_are_not_converged_once_merged():
    # the second repeat's mean is off by 1.5 standard deviations of u: each record on its own
    # is stationary and converged, their union is not stationary (guard), so streaks restart
    rng = np.random.default_rng(73)
    a = _fed(turbulence(rng, 60_000, RHO), LOOSE)
    shifted = MEAN + np.array([1.5, 0.0, 0.0])
    b = _fed(turbulence(rng, 60_000, RHO, mean=shifted), LOOSE)
    assert a.snapshot().converged and b.snapshot().converged
    merged = a.merge(b)
    assert merged.checkpoints.streak["U"] == 0
    snap = merged.snapshot()
    assert not snap.converged and snap.estimate("U").converged is False
    assert "u" in snap.suspect
