"""Blocking standard errors against exact results for AR(1) processes and batch blocking."""

import numpy as np
import pytest
from processes import ar1, ar1_mean_variance

from eddyvigil.stats.blocking import BlockingAccumulator, choose_level


def unit(D, i):
    g = np.zeros((1, D))
    g[0, i] = 1.0
    return g


def level_curve(acc, i=0):
    """c0 and block counts per level for monomial i (the mean of component i when i < m)."""
    L = int(np.count_nonzero(acc.count))
    n = acc.count[:L].astype(float)
    mu = acc.S[0, i] / acc.count[0]
    c0 = (acc.Q[:L, i, i] - 2 * mu * acc.S[:L, i] + n * mu**2) / n
    return c0, n


@pytest.mark.parametrize(
    ("rho", "n", "expected"),
    [
        # N Var(mean) / sigma^2 for AR(1): REFERENCES §1 table, values checked there against the
        # brute-force double sum; the closed form is the standard discrete result (Bendat &
        # Piersol 2010, Random Data; Tennekes & Lumley 1972 §6.4 for the continuous form).
        (0.9, 100, 17.200048),
        (0.5, 10, 2.600390625),
    ],
)
def test_exact_ar1_variance_of_mean(rho, n, expected):
    assert n * ar1_mean_variance(rho, n) == pytest.approx(expected, rel=1e-7)
    k = np.arange(1, n)
    brute = 1 + 2 * np.sum((1 - k / n) * rho**k)
    assert n * ar1_mean_variance(rho, n) == pytest.approx(brute, rel=1e-12)


def test_worked_example_standard_error():
    # f_s = 1 kHz, T_int = 10 ms, sigma = 1 m/s, N = 10 000: SE = 0.0447176 m/s,
    # N_eff = 500.08 (REFERENCES §1 worked example).
    rho = np.exp(-1e-3 / 1e-2)
    assert np.sqrt(ar1_mean_variance(rho, 10_000)) == pytest.approx(0.0447176, rel=1e-5)
    assert 1 / ar1_mean_variance(rho, 10_000) == pytest.approx(500.08, rel=1e-4)


def test_streaming_equals_batch_blocking():
    # Flyvbjerg & Petersen (1989) batch transform: x^{k+1}_i = (x^k_{2i-1} + x^k_{2i}) / 2.
    rng = np.random.default_rng(5)
    base = 16
    x = ar1(rng, base * 2**10, 1, 0.8) + 4.0
    acc = BlockingAccumulator(1, base=base)
    start = 0
    for size in (1000, 3, 7000, 5000, 3000, 381):
        acc.update(x[start : start + size])
        start += size
    assert start == x.shape[0]
    c0, n = level_curve(acc)
    y = (x[:, 0] - acc.ref[0]).reshape(-1, base).mean(axis=1)
    mu = y.mean()
    for k in range(len(n)):
        assert n[k] == y.size
        np.testing.assert_allclose(c0[k], np.mean((y - mu) ** 2), rtol=1e-10, atol=1e-12 * c0[0])
        y = 0.5 * (y[0::2] + y[1::2])


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_level_sums_equal_the_batch_series(seed):
    # Every level's sums against the batch transform of Flyvbjerg & Petersen (1989), with the
    # lag-one products taken directly: sum_t (y_t y_{t+1}^T + y_{t+1} y_t^T) / 2. The kernel
    # gets them from the next level's outer products and the other half of the neighbour
    # pairs; the pieces (1 to 5000 samples, an odd number of base blocks) reach every branch
    # of its pairing: a pending row or not, a previous row or not, one row per call.
    rng = np.random.default_rng(seed)
    base = 8
    x = ar1(rng, base * 3001, 1, 0.9) + 2.0
    acc = BlockingAccumulator(1, base=base)
    start = 0
    while start < x.shape[0]:
        size = int(rng.choice([1, 7, 8, 9, 24, 200, 5000]))
        acc.update(x[start : start + size])
        start += size
    d = (x[:, 0] - acc.ref[0]).reshape(-1, base)
    y = np.stack([d.mean(axis=1), (d**2).mean(axis=1), (d**3).mean(axis=1), (d**4).mean(axis=1)], 1)
    k = 0
    while y.shape[0] >= 1:
        scale = np.abs(y).max() ** 2 * y.shape[0]
        lag = y[:-1].T @ y[1:]
        assert acc.count[k] == y.shape[0]
        np.testing.assert_allclose(acc.S[k], y.sum(axis=0), rtol=0, atol=1e-12 * scale)
        np.testing.assert_allclose(acc.Q[k], y.T @ y, rtol=0, atol=1e-12 * scale)
        np.testing.assert_allclose(acc.P[k], 0.5 * (lag + lag.T), rtol=0, atol=1e-12 * scale)
        np.testing.assert_allclose(acc.first[k], y[0], rtol=0, atol=1e-13 * np.abs(y).max())
        np.testing.assert_allclose(acc.last[k], y[-1], rtol=0, atol=1e-13 * np.abs(y).max())
        y = 0.5 * (y[0 : y.shape[0] - 1 : 2] + y[1::2])
        k += 1
    assert acc.count[k] == 0


def expected_blocking_ratio(rho, N, m):
    """E[V_k] / Var(mean) for an exponential ACF (REFERENCES §2)."""

    def f(mm):
        return (1 + rho) / (1 - rho) - 2 * rho * (1 - rho**mm) / (mm * (1 - rho) ** 2)

    true = ar1_mean_variance(rho, N)
    return (f(m) - f(N) * m / N) / (N - m) / true


def test_expected_blocking_curve_table():
    # REFERENCES §2: rho = exp(-0.1), N = 2^14, E[V_k]/Var = 0.8442, 0.9220, 0.9610, 0.9902
    # at block sizes 2^6, 2^7, 2^8, 2^10; true SE 0.034942.
    rho, N = np.exp(-0.1), 2**14
    assert np.sqrt(ar1_mean_variance(rho, N)) == pytest.approx(0.034942, rel=1e-4)
    for k, want in [(0, 0.0499), (4, 0.5018), (6, 0.8442), (7, 0.9220), (8, 0.9610), (10, 0.9902)]:
        assert expected_blocking_ratio(rho, N, 2**k) == pytest.approx(want, abs=6e-5)


@pytest.mark.slow
def test_monte_carlo_blocking_curve_and_lugsail():
    # Monte Carlo of our streaming levels against the exact expected curve (REFERENCES §2), and
    # the lugsail combination 2V_k - V_{k-1} removing the finite-block bias (Vats & Flegal; the
    # REFERENCES simulation found mean V/true 1.004 for it against 0.873 for the plain level).
    rho, N, base, reps = np.exp(-0.1), 2**14, 64, 400
    true = ar1_mean_variance(rho, N)
    ratios = {0: [], 1: [], 2: [], 4: []}
    lugsail = []
    for r in range(reps):
        x = ar1(np.random.default_rng(100 + r), N, 1, rho)
        acc = BlockingAccumulator(1, base=base).update(x)
        c0, n = level_curve(acc)
        v = c0[:5] / (n[:5] - 1)
        for j in ratios:
            ratios[j].append(v[j] / true)
        lugsail.append((2 * v[1] - v[0]) / true)
    for j, arr in ratios.items():
        arr = np.asarray(arr)
        want = expected_blocking_ratio(rho, N, base * 2**j)
        tol = 4 * arr.std() / np.sqrt(reps)
        assert abs(arr.mean() - want) < tol, (j, arr.mean(), want)
    lug = np.asarray(lugsail)
    assert abs(lug.mean() - 1.0) < 4 * lug.std() / np.sqrt(reps) + 0.01


def test_jonsson_chi_square_quantiles():
    # Jonsson (2018), Phys. Rev. E 98:043304: 0.99 quantiles of chi^2 for df = 1..10
    # (REFERENCES §2 list); the M-test compares M_j with the chi^2(d - j) quantile.
    want = [
        6.634897,
        9.210340,
        11.344867,
        13.276704,
        15.086272,
        16.811894,
        18.475307,
        20.090235,
        21.665994,
        23.209251,
    ]
    from eddyvigil.stats.blocking import _chi2_99

    for df, q in enumerate(want, start=1):
        assert _chi2_99(df) == pytest.approx(q, abs=1e-6)


def test_level_choice_white_noise_and_correlated():
    rng = np.random.default_rng(21)
    white = rng.normal(size=(2**16, 1))
    acc = BlockingAccumulator(1, base=16).update(white)
    ch = acc.analyse(unit(acc.D, 0))
    assert ch.level[0] in (1, 2)  # never level 0 (lugsail needs the level below)
    se = np.sqrt(ch.variance[0])
    assert se == pytest.approx(1 / np.sqrt(2**16), rel=0.2)
    slow = ar1(rng, 2**16, 1, np.exp(-1 / 200))
    acc = BlockingAccumulator(1, base=16).update(slow)
    ch2 = acc.analyse(unit(acc.D, 0))
    assert ch2.level[0] >= 4  # 16 * 2^4 = 256 samples, above T_int = 200 samples


def test_too_little_data_is_nan():
    acc = BlockingAccumulator(3).update(np.ones((10, 3)))
    ch = acc.analyse(np.eye(acc.D)[:3])
    assert np.all(np.isnan(ch.variance)) and np.all(ch.level == -1)
    ch = choose_level(np.zeros((2, 0)), np.zeros((2, 0)), np.zeros(0), 64)
    assert np.all(np.isnan(ch.variance))


def test_merge_with_common_reference():
    rng = np.random.default_rng(8)
    x = ar1(rng, 2**16, 2, 0.9) + [3.0, 1.0]
    ref = np.array([3.0, 1.0])
    whole = BlockingAccumulator(2, base=32, ref=ref).update(x)
    a = BlockingAccumulator(2, base=32, ref=ref).update(x[:30_001])
    b = BlockingAccumulator(2, base=32, ref=ref).update(x[30_001:])
    counts_a = a.count.copy()
    merged = a.merge(b)
    assert np.array_equal(a.count, counts_a)  # inputs untouched
    g = np.eye(whole.D)[:2]
    v1, v2 = whole.analyse(g).variance, merged.analyse(g).variance
    # statistically equivalent: the top levels' blocks are aligned differently in the two
    # parts, and a level above with >= 8 blocks may raise the variance to its lower bound
    # (blocking.UPPER_LEVEL_CONFIDENCE), so a looser tolerance than the chosen level's spread
    np.testing.assert_allclose(v2, v1, rtol=0.25)
    np.testing.assert_allclose(merged.S[0], whole.S[0], rtol=1e-9)
    with pytest.raises(ValueError):  # different base blocks cannot be joined
        a.merge(BlockingAccumulator(2, base=64).update(x[:100]))


@pytest.mark.parametrize("m", [1, 3])
def test_recentred_equals_accumulating_about_the_new_reference(m):
    # Monomials of x - b are an affine (binomial) map of those of x - a; every kept sum moves
    # exactly, to rounding. Reference: the same samples accumulated about b directly.
    rng = np.random.default_rng(30 + m)
    x = ar1(rng, 20_000 + 37, m, 0.8) + np.array([12.0, -3.0, 0.5])[:m]
    a_ref = np.array([11.5, -2.0, 0.0])[:m]
    b_ref = np.array([12.3, -3.4, 0.9])[:m]
    about_a = BlockingAccumulator(m, base=16, ref=a_ref).update(x[:7001]).update(x[7001:])
    about_b = BlockingAccumulator(m, base=16, ref=b_ref).update(x)
    moved = about_a.recentred(b_ref)
    assert np.array_equal(about_a.ref, a_ref)  # input untouched
    for name in ("S", "Q", "P", "first", "last", "pending", "carry_sums", "seg_sums", "seg_cur"):
        want, got = getattr(about_b, name), getattr(moved, name)
        scale = max(1.0, float(np.max(np.abs(want))))
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-9 * scale, err_msg=name)
    g = np.eye(about_b.D)[:m]
    np.testing.assert_allclose(moved.analyse(g).variance, about_b.analyse(g).variance, rtol=1e-7)


def test_independent_merge_has_no_lag_pair_across_the_seam():
    # Two records whose block means are identical constants inside each record but differ
    # between them: joined as independent, the lag-1 autocovariance at level 0 counts only
    # the pairs inside each record; numpy over the two series separately is the reference.
    rng = np.random.default_rng(12)
    xa = rng.normal(size=(64 * 40, 1))
    xb = rng.normal(size=(64 * 24, 1)) + 0.7
    a = BlockingAccumulator(1, base=64).update(xa)
    b = BlockingAccumulator(1, base=64).update(xb)
    merged = a.merge(b)  # independent by default; b re-centred to a's reference
    ya = xa.reshape(-1, 64).mean(axis=1)
    yb = xb.reshape(-1, 64).mean(axis=1)
    y = np.concatenate([ya, yb])
    mu = y.mean()
    want_gamma = np.sum((ya[:-1] - mu) * (ya[1:] - mu)) + np.sum((yb[:-1] - mu) * (yb[1:] - mu))
    c0, gamma, n = merged._autocovariances(np.eye(merged.D)[:1])
    np.testing.assert_allclose(gamma[0, 0], want_gamma / y.size, rtol=1e-9)
    np.testing.assert_allclose(c0[0, 0], np.mean((y - mu) ** 2), rtol=1e-9)
    # autocovariances do not depend on the reference: moving the joined state (seams included)
    # elsewhere changes none of them
    g = np.eye(merged.D)[:1]
    c0_moved, gamma_moved, _ = merged.recentred(merged.ref + 0.37)._autocovariances(g)
    np.testing.assert_allclose(c0_moved, c0, rtol=1e-9)
    np.testing.assert_allclose(gamma_moved, gamma, rtol=1e-9, atol=1e-12 * c0.max())
    # joined as one record cut in two, the seam pair is counted (numpy over the concatenation)
    c0, gamma, n = a.merge(b, independent=False)._autocovariances(np.eye(merged.D)[:1])
    want_gamma = np.sum((y[:-1] - mu) * (y[1:] - mu))
    np.testing.assert_allclose(gamma[0, 0], want_gamma / y.size, rtol=1e-9)


def test_reported_relative_error_is_honest():
    # The spread of the estimated SE across replicates should not exceed what is reported
    # (0.5 sqrt(5/(n-1)) for the lugsail variance, derived in blocking.choose_level).
    rho, N = np.exp(-0.1), 2**15
    se, rel = [], []
    for r in range(120):
        x = ar1(np.random.default_rng(900 + r), N, 1, rho)
        acc = BlockingAccumulator(1, base=64).update(x)
        ch = acc.analyse(unit(acc.D, 0))
        se.append(np.sqrt(ch.variance[0]))
        rel.append(ch.relative_error[0])
    se = np.asarray(se)
    spread = se.std() / se.mean()
    assert spread <= 1.3 * np.mean(rel)
    assert spread >= 0.3 * np.mean(rel)
