"""The vectorised accumulator of rakes and fields (stats/field.py).

References:
- values: numpy over each probe's valid samples (population moments, DESIGN §4), and the
  single-probe path :class:`PointStatistics` (its moments follow Pébay 2008, SAND2008-6212);
- errors: coverage of the 95 % intervals on processes with known truth: independent AR(1)
  (sampled Ornstein-Uhlenbeck) series per vector, exact stationary start (Gillespie 1996,
  Phys. Rev. E 54:2084; REFERENCES §10), mixed to a prescribed stress tensor by its Cholesky
  factor (Lund, Wu & Squires 1998, J. Comput. Phys. 140:233); truth: the mean and the
  stresses themselves; k = 3/4 (uu + vv) for two components (common practice, names.K_FACTORS);
- for white noise, Var(mean) = sigma^2 / N (common practice) fixes the standard error's size.
"""

from __future__ import annotations

import numpy as np
import pytest
from processes import ar1

from eddyvigil.stats.field import FieldStatistics
from eddyvigil.stats.point import PointStatistics
from eddyvigil.stats.targets import Targets

MEAN = np.array([6.0, -0.4])
STRESS = np.array([[1.0, -0.35], [-0.35, 0.6]])
TRUTH = {"U": MEAN[0], "V": MEAN[1], "uu": STRESS[0, 0], "vv": STRESS[1, 1],
         "uv": STRESS[0, 1], "k": 0.75 * (STRESS[0, 0] + STRESS[1, 1])}


def _field(rng, n, P, rho):
    """(n, P, 2) snapshots: P independent 2-component AR(1) vectors with MEAN and STRESS."""
    z = ar1(rng, n, 2 * P, rho).reshape(n, P, 2)
    return z @ np.linalg.cholesky(STRESS).T + MEAN


def test_per_probe_values_equal_numpy_and_the_single_probe_path():
    rng = np.random.default_rng(1710)
    x = _field(rng, 3_000, 5, 0.8)
    f = FieldStatistics(("u", "v"), 5, rate_hz=1000.0)
    for a, b in ((0, 700), (700, 701), (701, 3_000)):  # any split of the rows
        f.update(x[a:b])
    snap = f.snapshot()
    for p in range(5):
        xp = x[:, p]
        cov = np.cov(xp.T, bias=True)
        np.testing.assert_allclose(snap.values["U"][p], xp[:, 0].mean(), rtol=1e-13)
        np.testing.assert_allclose(snap.values["uv"][p], cov[0, 1], rtol=1e-10, atol=1e-13)
        np.testing.assert_allclose(snap.values["vv"][p], cov[1, 1], rtol=1e-11)
        np.testing.assert_allclose(snap.values["k"][p], 0.75 * np.trace(cov), rtol=1e-11)
        one = PointStatistics(("u", "v"), 1000.0).update(xp).snapshot()
        for name in f.names:
            np.testing.assert_allclose(snap.values[name][p], one.estimate(name).value,
                                       rtol=1e-11, atol=1e-13)
        assert snap.counts[p] == 3_000


def test_masked_vectors_are_excluded_exactly():
    rng = np.random.default_rng(1711)
    x = _field(rng, 4_000, 4, 0.5)
    valid = rng.random((4_000, 4)) > 0.15
    valid[:, 3] = True
    x_nan = x.copy()
    x_nan[~valid] = np.nan  # what a rejected PIV vector holds: never read
    masked = FieldStatistics(("u", "v"), 4, 500.0).update(x_nan, valid).snapshot()
    for p in range(4):
        alone = FieldStatistics(("u", "v"), 1, 500.0).update(x[valid[:, p], p][:, None, :])
        one = alone.snapshot()
        assert masked.counts[p] == valid[:, p].sum()
        for name in masked.names:
            # the same sums in the same order: the same digits
            assert masked.values[name][p] == one.values[name][0]
            np.testing.assert_allclose(masked.stderr[name][p], one.stderr[name][0], rtol=1e-12)
        np.testing.assert_allclose(masked.values["U"][p], x[valid[:, p], p, 0].mean(), rtol=1e-13)


def test_white_noise_standard_error_is_sigma_over_root_n():
    # uncorrelated snapshots (low-rate PIV): the chosen level must not invent correlation
    rng = np.random.default_rng(1712)
    n, P = 20_000, 200
    x = _field(rng, n, P, 0.0)
    snap = FieldStatistics(("u", "v"), P, 15.0).update(x).snapshot()
    ratio = snap.stderr["U"] / (np.sqrt(STRESS[0, 0] / n))
    assert 0.9 < np.median(ratio) < 1.1


def test_converged_fraction_and_eta():
    rng = np.random.default_rng(1713)
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.01}}})
    P = 8
    x = _field(rng, 20_000, P, 0.0)
    x[:, :4] = MEAN + (x[:, :4] - MEAN) * 10.0  # four noisy vectors will need far longer
    f = FieldStatistics(("u", "v"), P, 15.0, targets=targets)
    f.update(x)
    snap = f.snapshot()
    # quiet vectors: sigma 1 / sqrt(20000) * 1.96 = 0.014 << 0.06 (1 % of |U|)
    assert snap.probe_converged[4:].all() and not snap.probe_converged[:4].any()
    assert snap.converged_fraction == 0.5 and not snap.field_converged
    assert (snap.eta_s["U"][:4] > 0).all() and (snap.eta_s["U"][4:] == 0).all()
    assert np.isfinite(snap.eta_slowest_decile_s) and snap.eta_slowest_decile_s > 0
    half = FieldStatistics(("u", "v"), P, 15.0, targets=targets, fraction=0.5).update(x)
    assert half.snapshot().field_converged and half.converged_at_s is not None
    arrays = snap.arrays()
    assert arrays["U_stderr"].shape == (P,) and arrays["converged"].dtype == bool


def test_bad_shapes_are_refused():
    f = FieldStatistics(("u", "v"), 3, 10.0)
    with pytest.raises(ValueError):
        f.update(np.zeros((4, 2, 2)))
    with pytest.raises(ValueError):
        f.update(np.zeros((4, 3, 2)), valid=np.ones((4, 2), bool))


@pytest.mark.slow
@pytest.mark.parametrize(("rho", "n"), [(0.0, 3_000), (0.95, 60_000)])
def test_coverage_per_vector_on_known_truth_fields(rho, n):
    # rho 0: uncorrelated low-rate PIV snapshots; rho 0.95: a kHz time-resolved field
    hits, total = 0, 0
    for seed in range(12):
        rng = np.random.default_rng(1720 + seed)
        P = 64
        x = _field(rng, n, P, rho)
        snap = FieldStatistics(("u", "v"), P, 1000.0).update(x).snapshot()
        for name, truth in TRUTH.items():
            lo, hi = snap.ci_low[name], snap.ci_high[name]
            assert np.isfinite(lo).all()
            hits += int(((lo <= truth) & (truth <= hi)).sum())
            total += P
    coverage = hits / total
    print(f"rho={rho}: coverage {coverage:.3f} over {total} intervals")
    assert 0.92 <= coverage <= 0.98
