"""The slow-content guard (blocking._rise_test) and the verdict's memory of it (issue 12).

The rise test pools the Haar detail energies of the coarse blocking levels against a
bias-cancelled fine reference; its level rests on the orthogonal split of each level's sum of
squares (Percival & Walden 2000, Wavelet Methods for Time Series Analysis, ch. 8, from memory),
checked here against numpy, and its false-alarm rate on short-memory data (AR(1), the exact
Ornstein-Uhlenbeck sampling of REFERENCES §10) against the nominal SLOW_ALPHA.
"""

import numpy as np
import pytest
from processes import MEAN, ar1, ar1_mean_variance, two_scale
from scipy import special, stats

from eddyvigil.stats import PointStatistics, Targets, slow_spectrum
from eddyvigil.stats.blocking import SLOW_ALPHA, BlockingAccumulator
from eddyvigil.stats.convergence import STREAK, Checkpoints
from eddyvigil.stats.pointstate import from_state, to_state
from eddyvigil.stats.slow_spectrum import (
    LOOK_ALPHA,
    LOW_BAND_TERMS,
    LOW_BINS,
    REF_START,
    REF_TINTS,
    SPECTRAL_ALPHA,
    low_band_variance,
    low_frequency_rise,
    rise_p_value,
)


def test_detail_energy_is_the_haar_split_of_the_level_sums_of_squares():
    # level k's sum of squares about the grand mean = twice level k+1's + 1/2 sum of squared
    # differences of the pairs + the unpaired block's square (Haar split; numpy reshapes)
    x = np.random.default_rng(5).normal(size=(64 * 1000 + 17, 1))
    acc = BlockingAccumulator(1, base=64).update(x)
    c0, _, n = acc._autocovariances(np.eye(acc.D)[:1])
    y = x[: 64 * 1000, 0].reshape(1000, 64).mean(axis=1)
    mu = y.mean()
    for k in range(5):
        nk = y.size
        pairs = y[: nk // 2 * 2].reshape(-1, 2)
        want = 0.5 * np.sum((pairs[:, 0] - pairs[:, 1]) ** 2)
        if nk % 2:
            want += (y[-1] - mu) ** 2
        got = n[k] * c0[0, k] - 2 * n[k + 1] * c0[0, k + 1]
        assert n[k] == nk
        np.testing.assert_allclose(got, want, rtol=1e-9)
        y = pairs.mean(axis=1)


def _looks(x):
    """Rise-test outcome for U at each checkpoint of a point where U has no target (so no
    memory of a rise)."""
    targets = Targets.from_dict({"targets": {"uu": {"relative": 1e-6}}})
    ps = PointStatistics(("u",), 1000.0, targets=targets)
    out = []
    for k in range(0, x.shape[0], 4096):
        ps.update(x[k : k + 4096])
        if ps._checkpoint_ev is not None:
            out.append(ps._checkpoint_ev.rise_level[0] >= 0)
    return np.array(out)


def test_false_alarm_rate_per_look_on_short_memory_data_is_at_most_nominal():
    # AR(1) with T_int 10 and 50 samples, 60 records of 2^17 samples each, every look at
    # 5 % checkpoints: the share of looks that flag must not exceed SLOW_ALPHA (1 %) beyond
    # three binomial standard errors of the looks (they are correlated: a loose bound)
    for t, seed in ((10.0, 100), (50.0, 200)):
        rho = np.exp(-1 / t)
        looks = np.concatenate(
            [_looks(ar1(np.random.default_rng(seed + r), 2**17, 1, rho)) for r in range(60)]
        )
        bound = SLOW_ALPHA + 3 * np.sqrt(SLOW_ALPHA * (1 - SLOW_ALPHA) / looks.size)
        assert looks.mean() <= bound, (t, looks.mean(), looks.size)


def test_the_rise_is_seen_on_strong_slow_content():
    # w = 0.05 of the variance at T = 5000 samples under T = 5 (REFERENCES §12: N Var(mean)
    # about 500 against 10 for the fast part alone); by 2^18 samples the test must have fired
    # in nearly every record
    seen = [
        _looks(two_scale(np.random.default_rng(300 + r), 2**18, 0.05)[:, :1]).any()
        for r in range(20)
    ]
    assert np.mean(seen) >= 0.9


def test_a_rise_once_seen_holds_until_its_level_has_its_blocks():
    # once a checkpoint's rise test fires, the point keeps the level it asked for: the
    # statistic stays held ("slow content") while fewer than 64 blocks of that length exist,
    # and the memory survives copy and the saved state (REFERENCES §11: 64 blocks per level)
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.05}}})
    x = two_scale(np.random.default_rng(11), 2**18, 0.05)[:, :1]
    ps = PointStatistics(("u",), 1000.0, targets=targets)
    held_after = []
    for k in range(0, x.shape[0], 8192):
        ps.update(x[k : k + 8192])
        if ps.checkpoints.slow_level:
            snap = ps.snapshot()
            e = snap.estimate("U")
            held_after.append((e.blocks, e.state, e.reason, bool(snap.suspect)))
    assert held_after, "the rise was never seen"
    for blocks, state, reason, drift in held_after:
        if blocks < 64:
            # held: by this guard, or by the stationarity guard, which speaks first
            assert state == "suspect", (blocks, state)
            assert drift or reason.startswith("slow content"), (blocks, reason)
    level = ps.checkpoints.slow_level["U"]
    assert ps.copy().checkpoints.slow_level == {"U": level}
    assert from_state(*to_state(ps)).checkpoints.slow_level == {"U": level}


def test_a_level_jump_keeps_the_streak():
    # the rule (REFERENCES §11, STREAK consecutive checkpoints): a checkpoint whose only
    # shortfall is the block count of a level that just jumped neither adds to the streak
    # nor restarts it
    cp = Checkpoints()
    for n in (8192, 8602):
        cp.record(n, {"U": True}, 1.0)
    assert cp.is_converged("U")
    cp.record(9033, {"U": None}, 1.0)
    assert cp.streak["U"] == STREAK and cp.is_converged("U")
    cp.record(9485, {"U": False}, 1.0)
    assert cp.streak["U"] == 0


def test_the_verdict_does_not_regress_when_the_level_jumps():
    # a clean AR(1) record (T_int 10 samples, seed chosen so that the chosen level of U jumps
    # three times while U is converged): U stays converged through every jump
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.05}}})
    x = 10.0 + ar1(np.random.default_rng(3), 2**18, 1, np.exp(-1 / 10))
    ps = PointStatistics(("u",), 1000.0, targets=targets)
    prev, jumps = None, 0
    for k in range(0, x.shape[0], 4096):
        ps.update(x[k : k + 4096])
        if ps._checkpoint_ev is None:
            continue
        e = ps.targeted_snapshot().estimate("U")
        if prev is not None and prev.converged and e.blocks < prev.blocks:
            jumps += 1
            assert e.converged, (ps.n, prev.blocks, e.blocks, e.state, e.reason)
        prev = e
    assert jumps >= 2


def _rows(x, rows=4096):
    """Row means as stats.periodic.RowStore keeps them (equal rows, a power of two long)."""
    row_len = 1
    while x.size // row_len > rows:
        row_len *= 2
    n = x.size // row_len
    return x[: n * row_len].reshape(n, row_len).mean(axis=1), row_len


def test_low_frequency_rise_ordinates_are_numpys_periodogram():
    # the statistic is the 1/k-weighted mean of the lowest ordinates over the mean of the
    # reference band, rebuilt here from numpy's FFT
    y = np.random.default_rng(8).normal(size=4096)
    tint = 4.0
    p = low_frequency_rise(y, 8, tint)
    power = np.abs(np.fft.rfft(y - y.mean())) ** 2
    edge = min(int(4096 * 8 / (REF_TINTS * tint)), 4096 // 4)
    w = 1.0 / np.arange(1, LOW_BINS + 1)
    low = np.sum(w * power[1 : LOW_BINS + 1]) / w.sum()
    ratio = low / power[REF_START:edge].mean()
    assert p == pytest.approx(rise_p_value(ratio, 2 * (edge - REF_START)), rel=1e-12)
    # too short a record against T_int: no flat reference band, no test
    assert np.isnan(low_frequency_rise(y[:512], 1, 50.0))


def test_rise_p_value_is_the_tail_of_weighted_exponentials_over_a_chi_squared():
    # the null law (a flat spectrum: independent unit exponentials, Priestley 1981 §6.1, from
    # memory) simulated with numpy: 400 000 seeded draws of sum w_k E_k / (chi2_nu / nu),
    # w_k proportional to 1/k; the exact tail within 4 binomial standard errors
    rng = np.random.default_rng(12)
    w = 1.0 / np.arange(1, LOW_BINS + 1)
    w /= w.sum()
    draws = 400_000
    for nu in (32.0, 200.0):
        x = rng.exponential(size=(draws, LOW_BINS)) @ w / (rng.chisquare(nu, draws) / nu)
        for ratio in (1.5, 2.0, 2.5, 3.0):
            want = np.mean(x > ratio)
            se = np.sqrt(want * (1 - want) / draws)
            assert abs(rise_p_value(ratio, nu) - want) <= 4 * se, (nu, ratio, want)


def test_low_frequency_rise_false_alarms_per_look_on_short_memory_data():
    # AR(1) (REFERENCES §10) at T_int 5, 10 and 50 samples, one look at each of 2^15 .. 2^18
    # samples of 100 records: the share of looks below SPECTRAL_ALPHA stays within three
    # binomial standard errors of it (periodogram ordinates of a short-memory series are
    # independent exponentials near zero frequency; Priestley 1981, §6.1, from memory)
    # (measured: 5 of 900 looks below 0.005; T 5: 2 / 400, T 10: 2 / 400, T 50: 1 / 100); the
    # same for the looser LOOK_ALPHA, which only delays a stop by a look (51 of 900 below 0.05)
    ps = []
    for t, seed in ((5.0, 500), (10.0, 600), (50.0, 700)):
        for r in range(100):
            x = ar1(np.random.default_rng(seed + r), 2**18, 1, np.exp(-1 / t))[:, 0]
            for n in (2**15, 2**16, 2**17, 2**18):
                ps.append(low_frequency_rise(*_rows(x[:n]), t))
    ps = np.array(ps)
    ps = ps[np.isfinite(ps)]
    assert ps.size >= 900
    for alpha in (SPECTRAL_ALPHA, LOOK_ALPHA):
        bound = alpha + 3 * np.sqrt(alpha * (1 - alpha) / ps.size)
        assert np.mean(ps < alpha) <= bound, (alpha, np.mean(ps < alpha), ps.size)


def test_low_frequency_rise_sees_the_slow_content_the_blocks_miss():
    # the issue-12 process at w = 0.005 (N Var(mean) 60 against 10 for the fast part, REFERENCES
    # §12): by 2^17 samples the periodogram test fires in most records at one look
    fired = [
        low_frequency_rise(
            *_rows(two_scale(np.random.default_rng(900 + r), 2**17, 0.005)[:, 0]), 6.0
        )
        < SPECTRAL_ALPHA
        for r in range(50)
    ]
    assert np.mean(fired) >= 0.7, np.mean(fired)


def test_a_low_frequency_rise_holds_a_targeted_mean():
    # wiring: at every checkpoint, the periodogram test on the point's own rows (recomputed
    # here) holds U when it fires at SPECTRAL_ALPHA, and keeps U from converging at that look
    # when its p-value is below LOOK_ALPHA; both cases occur on the issue-12 process at w =
    # 0.005 (REFERENCES §12)
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.025}}})
    seen = {"rise": 0, "look": 0}
    for r in range(6):
        x = two_scale(np.random.default_rng(1200 + r), 2**18, 0.005)[:, :1]
        ps = PointStatistics(("u",), 1000.0, targets=targets)
        for k in range(0, x.shape[0], 2**14):
            ps.update(x[k : k + 2**14])
            if ps._checkpoint_ev is None:
                continue
            e = ps.targeted_snapshot().estimate("U")
            tint = ps._checkpoint_ev.values[ps.names.index("Tint_u")] * 1000.0
            st = ps.periodic
            p = low_frequency_rise(st.rows[: st.full, 0], st.row_len, tint)
            if p < SPECTRAL_ALPHA:
                # held (this guard or the stationarity guard speaks) and remembered
                seen["rise"] += 1
                assert e.state == "suspect" and "U" in ps.checkpoints.slow_level, e
            elif p < LOOK_ALPHA and e.reason is not None and e.reason.startswith("slow content?"):
                seen["look"] += 1
                # a look's wait: not converged, and no alarm (clean records see it at 5 %)
                assert not e.converged and e.state != "suspect", e
            elif p < LOOK_ALPHA:
                # another guard speaks first, or U had converged before this look
                assert e.state == "suspect" or ps.checkpoints.is_converged("U"), e
    assert seen["rise"] and seen["look"], seen


def test_low_band_variance_is_the_mean_of_the_lowest_squared_cosine_transforms():
    # the equal-weighted cosine estimator (Mueller 2007, J. Econometrics 141, eq. for the
    # cosine weights, from memory) rebuilt with numpy's cosines: mean over j = 1 .. nu of
    # (sqrt(2 / n) sum_t y_t cos(pi j (t + 1/2) / n))^2, over n; a constant does not enter
    y = np.random.default_rng(14).normal(size=3000)
    n, t = y.size, np.arange(3000) + 0.5
    for nu in (4, LOW_BAND_TERMS, 16):
        a = [np.sqrt(2 / n) * np.sum(y * np.cos(np.pi * j * t / n)) for j in range(1, nu + 1)]
        want = np.mean(np.square(a)) / n
        assert low_band_variance(y, nu) == pytest.approx(want, rel=1e-10)
        assert low_band_variance(y + 7.0, nu) == pytest.approx(want, rel=1e-9)
    assert np.isnan(low_band_variance(y[: 4 * LOW_BAND_TERMS - 1]))


def test_low_band_variance_is_chi_squared_and_its_t_interval_covers_on_short_memory_data():
    # AR(1), T_int 10 samples, records of 2^16 in rows of 16 (the RowStore's 4096): the
    # estimate over the exact Var(mean) (REFERENCES §1) has mean 1 and variance 2 / nu
    # (chi-squared on nu = LOW_BAND_TERMS degrees of freedom, Mueller 2007), and the mean's
    # t interval on nu degrees of freedom covers 95 % (Lazarus et al. 2018, JBES 36); 2000
    # records, limits at about 4 standard errors
    rho, n, reps = np.exp(-1 / 10), 2**16, 2000
    exact = ar1_mean_variance(rho, n)
    q = stats.t.ppf(0.975, LOW_BAND_TERMS)
    ratio, hit = [], []
    for r in range(reps):
        x = ar1(np.random.default_rng(5000 + r), n, 1, rho)[:, 0]
        v = low_band_variance(x.reshape(4096, 16).mean(axis=1))
        ratio.append(v / exact)
        hit.append(abs(x.mean()) <= q * np.sqrt(v))
    assert abs(np.mean(ratio) - 1) <= 4 * np.sqrt(2 / LOW_BAND_TERMS / reps)
    assert np.var(ratio) == pytest.approx(2 / LOW_BAND_TERMS, rel=0.15)
    assert abs(np.mean(hit) - 0.95) <= 4 * np.sqrt(0.05 * 0.95 / reps)


def _u_point(seed, n, w, targets):
    """A point of u alone fed the issue-12 process (REFERENCES §12) in updates of 2^14."""
    x = two_scale(np.random.default_rng(seed), n, w)[:, :1]
    ps = PointStatistics(("u",), 1000.0, targets=targets)
    for k in range(0, n, 2**14):
        ps.update(x[k : k + 2**14])
    return ps


def test_the_low_band_floor_widens_a_mean_and_sizes_its_unresolved_part():
    # wiring: each mean's half-width is the wider of blocking's and t_nu(0.975) x the
    # low-band standard error of the point's own rows (recomputed here); where the floor
    # decides, the unresolved part is sqrt(max(V_low - stderr^2, 0)). On the issue-12 process
    # at w = 0.002 and 98 304 samples (the fast part's first chance to meet +-0.025; the true
    # N Var(mean) about 29 against 10, REFERENCES §12) the floored interval covers U in
    # most of 200 records, blocking's alone in fewer. Expected (hand arithmetic, nu = 10): the
    # cosine band reaches nu / (2 N) = 5 / N, where the slow part's spectrum 1 / (1 + (2 pi f
    # 5000)^2) has fallen to 0.28; its mean over the band, atan(1.60) / 1.60 = 0.63 of the
    # slow part's zero-frequency level, puts the estimate at about 22.7 / 29 = 0.78 of the
    # truth, and the t interval's coverage near P(|t_10| < 2.228 sqrt(0.78)) = 0.92 (measured
    # 0.93, blocking's alone 0.87; the floor decides in 157 of 200 records): the
    # limit is 0.89, 1.5 binomial sd below
    q = stats.t.ppf(0.975, LOW_BAND_TERMS)
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.025}}})
    n, reps = 98_304, 200
    hit_floor, hit_blocking, floored = 0, 0, 0
    for r in range(reps):
        ps = _u_point(1300 + r, n, 0.002, targets)
        e = ps.snapshot().estimate("U")
        st = ps.periodic
        lb = np.sqrt(low_band_variance(st.rows[: st.full, 0]))
        # blocking's own interval: the same point with the floor off
        ps._cache = None
        terms = slow_spectrum.LOW_BAND_TERMS
        try:
            slow_spectrum.LOW_BAND_TERMS = 0
            b = ps.snapshot().estimate("U")
        finally:
            slow_spectrum.LOW_BAND_TERMS = terms
        assert e.half_width == pytest.approx(max(b.half_width, q * lb), rel=1e-12)
        assert b.stderr == e.stderr  # the resolved part stays blocking's
        # published only where significant: above the 95 % point of chi2_10 / 10 (1.831,
        # scipy.special.chdtri) times blocking's variance
        big = q * lb > b.half_width and lb**2 > special.chdtri(10, 0.05) / 10 * e.stderr**2
        excess = np.sqrt(lb**2 - e.stderr**2) if big else 0.0
        assert e.unresolved == pytest.approx(max(b.unresolved, excess), rel=1e-9, abs=1e-15)
        floored += q * lb > b.half_width
        hit_floor += abs(e.value - MEAN[0]) <= e.half_width
        hit_blocking += abs(b.value - MEAN[0]) <= b.half_width
    assert floored >= 0.5 * reps, floored
    assert hit_floor / reps >= 0.89, (hit_floor, hit_blocking)
    assert hit_blocking < hit_floor, (hit_floor, hit_blocking)


def test_a_held_mean_says_unresolved_only_when_something_is_shown_unresolved():
    # the hold's words and the board's "unresolved σ" column must not contradict each other:
    # where the chosen blocking level already holds the rise (the error is sized, by fewer
    # than 64 blocks) nothing is unresolved and the reason says it rests on too few blocks;
    # "not yet resolved" (blocking's rise) comes with an unresolved part above 0. The
    # issue-12 process at w = 0.005 (REFERENCES §12), records of 2^17 samples
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.025}}})
    words = {"too few": 0, "unresolved": 0}
    for r in range(12):
        e = _u_point(1300 + r, 2**17, 0.005, targets).snapshot().estimate("U")
        if not (e.reason or "").startswith("slow content: the error of U"):
            continue
        if "rests on too few blocks" in e.reason:
            words["too few"] += 1
        elif "blocking curve" in e.reason:
            words["unresolved"] += 1
            assert e.unresolved > 0, e.reason
    assert words["too few"] >= 1 and words["unresolved"] >= 1, words  # measured: 5 and 6
