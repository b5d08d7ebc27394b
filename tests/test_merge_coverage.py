"""Merged repeats of a point keep honest 95 % intervals (statistical coverage, slow).

Each replicate measures one point three times, as independent records of unequal length
(exact AR(1) / sampled Ornstein-Uhlenbeck, 3 components mixed to a prescribed Reynolds-stress
tensor: REFERENCES §10; Lund, Wu & Squires 1998, J. Comput. Phys. 140:233), builds each record
with its own reference, and merges the three. The error of the merged mean is checked against
REFERENCES §1 (Var of the mean of a correlated series; for independent records the variances
of their sums add): the 95 % interval must contain the truth in 0.92-0.98 of 400 replicates
(binomial sd 0.011).
"""

import numpy as np
import pytest
from processes import MEAN, STRESS, ar1_mean_variance, turbulence

from eddyvigil.stats import PointStatistics

pytestmark = pytest.mark.slow

REPS = 400
LENGTHS = (24_000, 2**15, 14_000)
RHO = np.exp(-1 / 10)  # T_int = 10 samples


def _repeat(rng, n):
    ps = PointStatistics(("u", "v", "w"), rate_hz=1000.0)
    x = turbulence(rng, n, RHO)
    for k in range(0, n, 8192):
        ps.update(x[k : k + 8192])
    return ps


def test_merged_independent_repeats_cover_the_truth():
    truth = {"U": MEAN[0], "V": MEAN[1], "uu": STRESS[0, 0], "uv": STRESS[0, 1]}
    truth["k"] = 0.5 * np.trace(STRESS)
    hits = dict.fromkeys(truth, 0)
    se_u = []
    for r in range(REPS):
        rng = np.random.default_rng(20_000 + r)
        parts = [_repeat(rng, n) for n in LENGTHS]
        assert not np.array_equal(parts[0].blocking.ref, parts[1].blocking.ref)
        merged = parts[0].merge(parts[1]).merge(parts[2])
        snap = merged.snapshot()
        assert snap.samples == sum(LENGTHS)
        for name, want in truth.items():
            e = snap.estimate(name)
            hits[name] += e.ci_low <= want <= e.ci_high
        se_u.append(snap.estimate("U").stderr)
    cov = {name: h / REPS for name, h in hits.items()}
    # the exact standard error of the mean of the union (independent AR(1) records, §1)
    exact = np.sqrt(
        sum(n**2 * ar1_mean_variance(RHO, n, np.sqrt(STRESS[0, 0])) for n in LENGTHS)
    ) / sum(LENGTHS)
    ratio = float(np.mean(se_u)) / exact
    print(f"merged repeats: coverage {cov}, mean SE(U) / exact = {ratio:.3f}")
    for name, c in cov.items():
        assert 0.92 <= c <= 0.98, (name, c, cov)
    assert 0.9 <= ratio <= 1.1, ratio
