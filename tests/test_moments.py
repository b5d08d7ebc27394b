"""Moment accumulator against numpy/scipy and published check values."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats as sps

from eddyvigil.stats.moments import MomentAccumulator
from eddyvigil.stats.monomials import layout


def two_pass(x):
    """Reference: central co-moments by plain numpy, population normalisation."""
    d = x - x.mean(axis=0)
    lay = layout(x.shape[1])
    out = {}
    for p in (2, 3, 4):
        out[p] = np.array([np.prod(d[:, list(c)], axis=1).mean() for c in lay.combos[p]])
    return out


def test_check_values_pebay():
    # Check values: x = [2,4,4,4,5,5,7,9]: mean 5, M2 = 32, M3 = 42, M4 = 356 (sums), population
    # variance 4, skewness 0.65625, flatness 2.78125 (worked by hand; Pébay 2008, SAND2008-6212
    # gives the formulas; numbers also verified with scipy.stats below).
    x = np.array([2, 4, 4, 4, 5, 5, 7, 9], dtype=float)[:, None]
    acc = MomentAccumulator(1).update(x)
    assert acc.mean[0] == 5.0
    assert acc.s2[0] == pytest.approx(32.0) and acc.s3[0] == pytest.approx(42.0)
    assert acc.s4[0] == pytest.approx(356.0)
    mo = acc.moments()
    assert mo.m2[0] == pytest.approx(4.0)
    assert mo.m3[0] / mo.m2[0] ** 1.5 == pytest.approx(0.65625)
    assert mo.m4[0] / mo.m2[0] ** 2 == pytest.approx(2.78125)
    assert mo.m3[0] / mo.m2[0] ** 1.5 == pytest.approx(sps.skew(x[:, 0]))
    assert mo.m4[0] / mo.m2[0] ** 2 == pytest.approx(sps.kurtosis(x[:, 0], fisher=False))


def test_halves_merge_to_whole():
    # Halves [2,4,4,4] (mean 3.5, M2 3, M3 -3, M4 5.25) and [5,5,7,9] (6.5, 11, 9, 49.25)
    # merge exactly to the whole set (Chan, Golub & LeVeque 1979; Pébay 2008).
    a = MomentAccumulator(1).update(np.array([[2.0], [4], [4], [4]]))
    b = MomentAccumulator(1).update(np.array([[5.0], [5], [7], [9]]))
    assert (a.mean[0], a.s2[0], a.s3[0], a.s4[0]) == pytest.approx((3.5, 3, -3, 5.25))
    assert (b.mean[0], b.s2[0], b.s3[0], b.s4[0]) == pytest.approx((6.5, 11, 9, 49.25))
    c = a.merge(b)
    assert (c.n, c.mean[0], c.s2[0], c.s3[0], c.s4[0]) == pytest.approx((8, 5, 32, 42, 356))


def test_every_prefix_matches_numpy_scipy():
    rng = np.random.default_rng(3)
    x = rng.gamma(2.0, size=(700, 3)) * [1.0, 0.5, 2.0] + [8.0, -1.0, 0.3]
    acc = MomentAccumulator(3)
    start = 0
    for size in [1, 2, 3, 5, 8, 13, 21, 34, 55, 89, 144, 233, 92]:
        acc.update(x[start : start + size])
        start += size
        pre = x[:start]
        mo = acc.moments()
        np.testing.assert_allclose(mo.mean, pre.mean(axis=0), rtol=1e-13)
        np.testing.assert_allclose(
            mo.covariance(), np.cov(pre.T, bias=True), rtol=1e-11, atol=1e-13
        )
        ref = two_pass(pre)
        np.testing.assert_allclose(mo.m3, ref[3], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(mo.m4, ref[4], rtol=1e-9, atol=1e-12)
        if start > 2:
            for i in range(3):
                lay = acc.layout
                np.testing.assert_allclose(
                    mo.m3[lay.index[(i, i, i)]], sps.moment(pre[:, i], 3), rtol=1e-9, atol=1e-12
                )
                np.testing.assert_allclose(
                    mo.m4[lay.index[(i, i, i, i)]], sps.moment(pre[:, i], 4), rtol=1e-9
                )
    assert start == x.shape[0]


def test_large_offset_regression():
    # Named regression: hot-wire-like data, 1e8 offset with tiny noise. The naive sum of squares
    # gives a variance of -170.7 for 1e9 + [4, 7, 13, 16]; the true value is 30 (population:
    # 22.5). REFERENCES §4 cancellation check; guards the two-pass kernel choice.
    x = (1e9 + np.array([4.0, 7.0, 13.0, 16.0]))[:, None]
    acc = MomentAccumulator(1).update(x[:2]).update(x[2:])
    assert acc.moments().m2[0] == pytest.approx(22.5, rel=1e-12)
    rng = np.random.default_rng(7)
    y = 1e8 + 1e-3 * rng.normal(size=(20_000, 2))
    acc = MomentAccumulator(2)
    for k in range(0, len(y), 3000):
        acc.update(y[k : k + 3000])
    # reference in extended precision; tolerance 1e-6 of the variance: at 1e8 a float64 (input
    # or block mean) is resolved to 1.5e-8 m/s, 1.5e-5 of the fluctuation, and the pairwise
    # combine of block means inherits that (a naive sum of squares would lose everything)
    yl = y.astype(np.longdouble)
    d = yl - yl.mean(axis=0)
    ref = (d.T @ d / len(y)).astype(np.float64)
    np.testing.assert_allclose(acc.moments().covariance(), ref, rtol=0, atol=1e-6 * 1e-6)


def test_float32_input_is_computed_in_float64():
    rng = np.random.default_rng(11)
    x = (10.0 + rng.normal(size=(5000, 3))).astype(np.float32)
    mo = MomentAccumulator(3).update(x).moments()
    np.testing.assert_allclose(
        mo.covariance(), np.cov(x.astype(np.float64).T, bias=True), rtol=1e-12
    )


def test_too_few_samples_give_nan_not_zero():
    mo = MomentAccumulator(3).moments()
    assert np.all(np.isnan(mo.mean)) and np.all(np.isnan(mo.m2))
    one = MomentAccumulator(2).update(np.array([[1.0, 2.0]])).moments()
    assert np.all(one.m2 == 0.0)  # a single sample has zero spread about itself (as numpy)


blocks = st.lists(st.integers(min_value=0, max_value=60), min_size=1, max_size=8)


@settings(max_examples=60, deadline=None)
@given(sizes=blocks, seed=st.integers(0, 2**31 - 1))
def test_any_block_split_gives_the_same_moments(sizes, seed):
    rng = np.random.default_rng(seed)
    n = sum(sizes)
    x = 3.0 + rng.standard_t(5, size=(n, 3))
    acc = MomentAccumulator(3)
    start = 0
    for s in sizes:
        acc.update(x[start : start + s])
        start += s
    whole = MomentAccumulator(3).update(x)
    if n == 0:
        assert acc.n == 0
        return
    a, b = acc.moments(), whole.moments()
    np.testing.assert_allclose(a.mean, b.mean, rtol=1e-12)
    for p in ("m2", "m3", "m4"):
        np.testing.assert_allclose(getattr(a, p), getattr(b, p), rtol=1e-9, atol=1e-9)


@settings(max_examples=40, deadline=None)
@given(
    seed=st.integers(0, 2**31 - 1),
    na=st.integers(0, 40),
    nb=st.integers(0, 40),
    nc=st.integers(0, 40),
)
def test_merge_laws(seed, na, nb, nc):
    rng = np.random.default_rng(seed)
    parts = [rng.normal(size=(k, 2)) * [1.0, 3.0] + [5.0, -2.0] for k in (na, nb, nc)]
    acc = [MomentAccumulator(2).update(p) for p in parts]
    before = [(a.n, a.mean.copy(), a.s2.copy(), a.s3.copy(), a.s4.copy()) for a in acc]
    left = acc[0].merge(acc[1]).merge(acc[2])
    right = acc[0].merge(acc[1].merge(acc[2]))
    swapped = acc[1].merge(acc[0])
    ident = acc[0].merge(MomentAccumulator.empty(2))
    # inputs untouched
    for a, (n, mean, _s2, _s3, s4) in zip(acc, before, strict=True):
        assert a.n == n and np.array_equal(a.mean, mean) and np.array_equal(a.s4, s4)
    assert left.n == right.n == na + nb + nc
    if left.n:
        for f in ("mean", "s2", "s3", "s4"):
            np.testing.assert_allclose(getattr(left, f), getattr(right, f), rtol=1e-9, atol=1e-9)
    if na + nb:
        both = acc[0].merge(acc[1])
        for f in ("mean", "s2", "s3", "s4"):
            np.testing.assert_allclose(getattr(both, f), getattr(swapped, f), rtol=1e-9, atol=1e-9)
    assert ident.n == acc[0].n
    if na:
        assert np.array_equal(ident.s4, acc[0].s4)


@pytest.mark.parametrize("m", [1, 2, 3])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_monomial_kernels_follow_the_layout_order(m, dtype):
    """The hand-written per-component-count kernels against numpy products of each combo of
    the layout, over chunks of uneven length (0, 1, 63, 64, 200 rows)."""
    from eddyvigil.stats.kernels import kernel_view, monomial_sums

    lay = layout(m)
    rng = np.random.default_rng(m)
    x = (rng.standard_normal((400, m)) * 2.0 + 5.0).astype(dtype)
    c = np.array([5.1, 4.9, 5.0][:m])
    lens = np.array([0, 1, 63, 64, 200, 72])
    starts = np.concatenate([[0], np.cumsum(lens)[:-1]])
    out = np.empty((lens.size, lay.n_monomials))
    monomial_sums(kernel_view(x), c, starts, lens, out)
    d = x.astype(np.float64) - c
    combos = [cb for p in (1, 2, 3, 4) for cb in lay.combos[p]]
    for j, (s0, n) in enumerate(zip(starts, lens, strict=True)):
        expect = [np.prod(d[s0 : s0 + n][:, list(cb)], axis=1).sum() for cb in combos]
        np.testing.assert_allclose(out[j], expect, rtol=1e-12, atol=1e-12)
