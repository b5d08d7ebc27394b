"""Analytic gradients of every statistic against complex-step differentiation."""

import numpy as np
import pytest

from eddyvigil.stats.blocking import BlockingAccumulator
from eddyvigil.stats.delta import StatisticTable
from eddyvigil.stats.kernels import central_terms_and_jacobian, influence_autocovariances
from eddyvigil.stats.moments import MomentAccumulator
from eddyvigil.stats.monomials import layout


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


def _numpy_central_jacobian(tab, raw):
    """The numpy version the kernel replaced: d(central co-moments)/d(monomial means)."""
    m, D = tab.m, raw.shape[0]
    negd_ext = np.append(-raw[:m], 1.0)
    raw_ext = np.append(raw, 1.0)
    factors = negd_ext[tab._comp]
    J = np.zeros((len(tab.combo_list), D + 1))
    np.add.at(J, (tab._owner, tab._mono), np.prod(factors, axis=1))
    for p in range(4):
        others = np.prod(np.delete(factors, p, axis=1), axis=1)
        comp = tab._comp[:, p]
        real = comp < m
        np.add.at(J, (tab._owner[real], comp[real]), -raw_ext[tab._mono[real]] * others[real])
    return J[:, :D]


@pytest.mark.parametrize("m", [1, 2, 3])
def test_central_terms_and_jacobian_kernel_matches_numpy(m):
    rng = np.random.default_rng(10 + m)
    x = rng.gamma(2.0, size=(5000, m)) + np.array([3.0, 1.0, 0.0])[:m]
    ref = x[:64].mean(axis=0)
    raw = MomentAccumulator(m).update(x).raw_about(ref)
    tab = StatisticTable(("u", "v", "w")[:m], layout(m))
    terms = np.empty(tab._mono.shape[0])
    J = np.empty((len(tab.combo_list), raw.size))
    central_terms_and_jacobian(raw, m, tab._mono, tab._comp, tab._owner, terms, J)
    np.testing.assert_array_equal(terms @ tab._summing, tab.central_all(raw))
    np.testing.assert_allclose(J, _numpy_central_jacobian(tab, raw), rtol=1e-14, atol=0.0)


@pytest.mark.parametrize("m", [1, 3])
def test_influence_autocovariances_match_dense_numpy(m):
    # The kernel skips exact zeros of the gradient; dense products are the reference.
    rng = np.random.default_rng(20 + m)
    x = rng.normal(size=(200_000, m)) + np.array([5.0, 1.0, -2.0])[:m]
    b = BlockingAccumulator(m, base=64)
    b.update(x)
    ref = b.ref
    raw = MomentAccumulator(m).update(x).raw_about(ref)
    _, g = StatisticTable(("u", "v", "w")[:m], layout(m)).values_and_gradient(raw, ref)
    g[1, :] = rng.normal(size=g.shape[1])  # one dense row too
    L = int(np.count_nonzero(b.count))
    n = b.count[:L].astype(np.float64)
    mu = b.S[0] / b.count[0]
    c0, gamma = np.empty((g.shape[0], L)), np.empty((g.shape[0], L))
    influence_autocovariances(
        g, n, b.S[:L], b.Q[:L], b.P[:L], b.first[:L], b.last[:L], mu, c0, gamma
    )
    zq = (np.matmul(g[None], b.Q[:L]) * g[None]).sum(axis=-1).T
    zp = (np.matmul(g[None], b.P[:L]) * g[None]).sum(axis=-1).T
    zs, zf, zl = g @ b.S[:L].T, g @ b.first[:L].T, g @ b.last[:L].T
    zmu = (g @ mu)[:, None]
    want_c0 = (zq - 2 * zmu * zs + n * zmu**2) / n
    want_gamma = (zp - zmu * (2 * zs - zf - zl) + (n - 1) * zmu**2) / n
    # c0 and gamma are small differences of large sums: compare on the scale of those sums
    scale = zq / n
    np.testing.assert_allclose(c0 / scale, want_c0 / scale, rtol=0.0, atol=1e-12)
    np.testing.assert_allclose(gamma / scale, want_gamma / scale, rtol=0.0, atol=1e-12)


@pytest.mark.parametrize("m", [1, 2, 3])
def test_chain_rule_kernel_matches_numpy(m):
    # values: the numpy evaluate(); gradient: the chain rule written with numpy rows
    rng = np.random.default_rng(30 + m)
    x = rng.gamma(3.0, size=(6000, m)) + np.array([2.0, -1.0, 0.5])[:m]
    ref = x[:64].mean(axis=0)
    raw = MomentAccumulator(m).update(x).raw_about(ref)
    tab = StatisticTable(("u", "v", "w")[:m], layout(m))
    values, grad = tab.values_and_gradient(raw, ref)
    np.testing.assert_allclose(values, tab.evaluate(raw, ref), rtol=1e-15, atol=0.0)
    cen, J = tab.central_all(raw), _numpy_central_jacobian(tab, raw)
    pos = tab._combo_pos
    lay = layout(m)
    normal = [J[pos[(i, i)]] for i in range(m)]
    rows = [np.eye(raw.size)[i] for i in range(m)]
    rows += [J[pos[c]] for c in tab.stress_combos]
    rows.append({3: 0.5, 2: 0.75, 1: 1.5}[m] * np.sum(normal, axis=0))
    rows += [J[pos[c]] for c in lay.combos[3]] + [J[pos[c]] for c in lay.combos[4]]
    for i in range(m):
        c2, c3 = cen[pos[(i, i)]], cen[pos[(i, i, i)]]
        rows.append(J[pos[(i, i, i)]] / c2**1.5 - 1.5 * c3 / c2**2.5 * normal[i])
    for i in range(m):
        c2, c4 = cen[pos[(i, i)]], cen[pos[(i, i, i, i)]]
        rows.append(J[pos[(i, i, i, i)]] / c2**2 - 2.0 * c4 / c2**3 * normal[i])
    np.testing.assert_allclose(grad, np.array(rows), rtol=1e-13, atol=1e-15)
