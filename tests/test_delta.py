"""Analytic gradients of every statistic against complex-step differentiation."""

import numpy as np
import pytest

from stats.delta import StatisticTable
from stats.moments import MomentAccumulator
from stats.monomials import layout


@pytest.mark.parametrize("m", [1, 2, 3])
def test_gradient_matches_complex_step(m):
    # Complex-step derivative (Squire & Trapp 1998, SIAM Review 40:110) of the value function is
    # exact to rounding for polynomials and powers: an independent check of the chain rule.
    rng = np.random.default_rng(m)
    x = rng.gamma(2.0, size=(4000, m)) + np.array([3.0, 1.0, 0.0])[:m]
    ref = x[:50].mean(axis=0)
    raw = MomentAccumulator(m).update(x).raw_about(ref)
    tab = StatisticTable(("u", "v", "w")[:m], layout(m))
    v1, g1 = tab.values_and_gradient(raw, ref)
    v2, g2 = tab.values_and_gradient_complex_step(raw, ref)
    np.testing.assert_allclose(v1, v2, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(g1, g2, rtol=1e-9, atol=1e-10)
    assert g1.shape == (len(tab.names), layout(m).n_monomials)


def test_values_from_monomials_match_numpy():
    rng = np.random.default_rng(0)
    x = rng.normal(size=(3000, 3)) * [1.0, 0.7, 0.5] + [10.0, 0.5, 0.0]
    ref = np.array([9.0, 1.0, -1.0])  # deliberately off the mean
    raw = MomentAccumulator(3).update(x).raw_about(ref)
    tab = StatisticTable(("u", "v", "w"), layout(3))
    values = dict(zip(tab.names, tab.evaluate(raw, ref), strict=True))
    d = x - x.mean(axis=0)
    assert values["U"] == pytest.approx(x[:, 0].mean(), rel=1e-13)
    assert values["uw"] == pytest.approx((d[:, 0] * d[:, 2]).mean(), rel=1e-9)
    assert values["vvw"] == pytest.approx((d[:, 1] ** 2 * d[:, 2]).mean(), rel=1e-8)
    assert values["uuvv"] == pytest.approx((d[:, 0] ** 2 * d[:, 1] ** 2).mean(), rel=1e-9)
