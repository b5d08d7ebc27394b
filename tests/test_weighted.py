"""Random (laser-Doppler) sampling: weighted moments, time-block errors, slotting, dead time.

Known-truth processes: Gaussian velocities sampled at a rate proportional to |u| (velocity
bias), and an Ornstein-Uhlenbeck process observed exactly at Poisson times (the exact update
for random time steps, Gillespie 1996, from memory), its arrivals thinned in proportion to
|u| where a velocity-biased record is wanted (Lewis & Shedler 1979 thinning, from memory).
"""

from __future__ import annotations

import numba
import numpy as np
import pytest

from eddyvigil.stats.arrivals import ArrivalCheck
from eddyvigil.stats.monomials import layout
from eddyvigil.stats.slotting import SlottedCorrelation
from eddyvigil.stats.weighted import WeightedMoments, sample_weights
from eddyvigil.stats.weighted_point import WeightedPointStatistics


@numba.njit(cache=True)
def _ou_at(t, mean, sigma, tint, xi):
    """Exact OU at times t: x_(k+1) = rho x_k + sigma sqrt(1 - rho^2) xi, rho = exp(-dt/T)."""
    x = np.empty(t.shape[0])
    x[0] = sigma * xi[0]
    for k in range(1, t.shape[0]):
        rho = np.exp(-(t[k] - t[k - 1]) / tint)
        x[k] = rho * x[k - 1] + sigma * np.sqrt(1.0 - rho * rho) * xi[k]
    return x + mean


def poisson_ou(rng, rate_hz, duration_s, mean, sigma, tint, biased=False):
    """(u, t): OU observed at Poisson arrivals; ``biased``: arrival rate ∝ |u| with mean rate
    ``rate_hz`` at the mean speed (candidates at 2.5x, kept with probability |u| / (2.5 |U|))."""
    lam = rate_hz * (2.5 if biased else 1.0)
    n = rng.poisson(lam * duration_s)
    t = np.sort(rng.uniform(0.0, duration_s, n))
    u = _ou_at(t, mean, sigma, tint, rng.standard_normal(n))
    if biased:
        keep = rng.random(n) < np.abs(u) / (2.5 * abs(mean))
        u, t = u[keep], t[keep]
    return u, t


def feed(ps, u, t, w=None, parts=10):
    for idx in np.array_split(np.arange(u.shape[0]), parts):
        ps.update(u[idx], times=t[idx], weights=None if w is None else w[idx])
    return ps.snapshot()


def test_velocity_bias_check_case_arithmetic_and_transit_weighted():
    # McLaughlin & Tiederman 1973 / Buchhave, George & Lumley 1979 (from memory): with
    # arrivals ∝ |u| the arithmetic mean tends to (U^2 + sigma^2)/U = 10.4 and the variance to
    # 3.84 for U = 10, sigma = 2 (moments of the |u|-tilted normal); residence-time weights
    # (∝ 1/|u|) recover U = 10 and sigma^2 = 4.
    rng = np.random.default_rng(13)
    cand = rng.normal(10.0, 2.0, 2_000_000)
    u = cand[rng.random(cand.size) < np.abs(cand) / 20.0][:, None]
    t = np.arange(u.shape[0]) * 1e-3  # times only order the rows here
    w = 1e-4 / np.abs(u[:, 0])
    arith = feed(WeightedPointStatistics(("u",), "none"), u, t)
    transit = feed(WeightedPointStatistics(("u",), "transit"), u, t, w)
    n = u.shape[0]
    se_mean, se_var = 2.0 / np.sqrt(n), 4.0 * np.sqrt(2.0 / n)  # iid sampling errors
    assert arith.estimate("U").value == pytest.approx(10.4, abs=5 * se_mean)
    assert arith.estimate("uu").value == pytest.approx(3.84, abs=5 * se_var)
    assert transit.estimate("U").value == pytest.approx(10.0, abs=5 * se_mean)
    assert transit.estimate("uu").value == pytest.approx(4.0, abs=5 * se_var)
    # numpy's weighted average is the reference for the exact value
    assert transit.estimate("U").value == pytest.approx(np.average(u[:, 0], weights=w), rel=1e-12)


@pytest.mark.parametrize("m", [1, 2, 3])
def test_weighted_moments_match_numpy_and_merge_exactly(m):
    # reference: weighted central co-moments computed directly with numpy (np.average)
    rng = np.random.default_rng(4)
    x = rng.normal([8.0, 0.5, -0.2][:m], [1.0, 0.6, 0.4][:m], size=(5000, m))
    w = rng.uniform(0.1, 2.0, 5000)
    mean = np.average(x, axis=0, weights=w)
    d = x - mean
    lay = layout(m)
    parts = [WeightedMoments(m).update(x[i], w[i]) for i in np.array_split(np.arange(5000), 7)]
    acc = parts[0]
    for p in parts[1:]:
        acc = acc.merge(p)
    whole = WeightedMoments(m).update(x, w)
    loop = WeightedMoments(m).update_loop(x, w)  # the plain loop kernel agrees
    np.testing.assert_allclose(loop.s4, whole.s4, rtol=1e-10)
    np.testing.assert_allclose(loop.s3, whole.s3, rtol=1e-9, atol=1e-9 * np.abs(whole.s4).max())
    np.testing.assert_allclose(acc.mean, mean, rtol=1e-13)
    for p, sums in ((2, acc.s2), (3, acc.s3), (4, acc.s4)):
        ref = np.array([np.sum(w * np.prod(d[:, list(c)], axis=1)) for c in lay.combos[p]])
        np.testing.assert_allclose(sums, ref, rtol=1e-10, atol=1e-9 * np.abs(ref).max())
    np.testing.assert_allclose(acc.s4, whole.s4, rtol=1e-10)
    assert acc.weight == pytest.approx(w.sum(), rel=1e-14) and acc.n == 5000


def test_unit_and_integer_weights_reduce_to_counts():
    # Pébay 2008 check set [2,4,4,4,5,5,7,9]: M2 = 32, M3 = 42, M4 = 356 (worked by hand);
    # a weight of 3 on a value is the value taken three times.
    x = np.array([2, 4, 5, 7, 9], dtype=float)[:, None]
    w = np.array([1.0, 3.0, 2.0, 1.0, 1.0])
    acc = WeightedMoments(1).update(x, w)
    assert acc.mean[0] == pytest.approx(5.0)
    assert (acc.s2[0], acc.s3[0], acc.s4[0]) == pytest.approx((32.0, 42.0, 356.0))


def test_arrival_weights_are_gaps_to_the_previous_sample():
    t = np.array([0.0, 0.1, 0.4, 0.5])
    np.testing.assert_allclose(sample_weights("arrival", t, None, None), [0.5 / 3, 0.1, 0.3, 0.1])
    np.testing.assert_allclose(sample_weights("arrival", t, None, -0.2), [0.2, 0.1, 0.3, 0.1])
    assert sample_weights("none", t, None, None).tolist() == [1.0] * 4
    with pytest.raises(ValueError):
        sample_weights("bogus", t, None, None)


def test_variance_of_the_mean_of_poisson_sampled_ou():
    # Var(mean) = (sigma^2 / N)(1 + 2 n' T_int) for Poisson arrivals at rate n' (elementary
    # derivation; Adrian & Yao 1987 give the random-sampling error, from memory): n' = 200/s,
    # T_int = 10 ms, T = 20 s, sigma = 1 -> 1.25e-3. Both the spread of the mean over seeded
    # records and the time-block estimate must agree with it.
    rng = np.random.default_rng(21)
    means, variances = [], []
    for _ in range(120):
        u, t = poisson_ou(rng, 200.0, 20.0, 5.0, 1.0, 0.01)
        snap = feed(WeightedPointStatistics(("u",), "none"), u[:, None], t, parts=4)
        means.append(snap.estimate("U").value)
        variances.append(snap.estimate("U").stderr ** 2)
    formula = 1.0 / 4000 * (1 + 2 * 200 * 0.01)
    assert formula == pytest.approx(1.25e-3)
    # 120 records: the sample variance has a relative error of about sqrt(2/119) = 0.13
    assert np.var(means, ddof=1) == pytest.approx(formula, rel=0.35)
    assert np.mean(variances) == pytest.approx(formula, rel=0.15)


def test_slotted_autocorrelation_of_poisson_sampled_ou():
    # Mayo, Shay & Riter 1974 slotting with Tummers & Passchier 1996 local normalisation (from
    # memory): for OU, rho(tau) = exp(-tau / T_int); at 10 ms with T_int = 10 ms, e^-1 = 0.368.
    rng = np.random.default_rng(8)
    u, t = poisson_ou(rng, 200.0, 200.0, 5.0, 1.0, 0.01)
    sc = SlottedCorrelation(1, dtau=1e-3, nslots=60)
    for idx in np.array_split(np.arange(u.size), 9):
        sc.update(u[idx, None], np.ones(idx.size), t[idx])
    rho = sc.rho(np.array([u.mean()]))[0]
    assert rho[10] == pytest.approx(np.exp(-1.0), abs=0.03)
    # about n'^2 T dtau = 8000 pairs per slot
    assert sc.pairs()[10] == pytest.approx(200.0**2 * 200.0 * 1e-3, rel=0.1)
    # the integral to the first zero crossing is T_int within its noise
    assert sc.integral_times(np.array([u.mean()]))[0] == pytest.approx(0.01, rel=0.2)


def test_slots_see_pairs_across_block_ends():
    rng = np.random.default_rng(3)
    u, t = poisson_ou(rng, 500.0, 10.0, 0.0, 1.0, 0.005)
    one = SlottedCorrelation(1, dtau=1e-3, nslots=20).update(u[:, None], np.ones(u.size), t)
    many = SlottedCorrelation(1, dtau=1e-3, nslots=20)
    for idx in np.array_split(np.arange(u.size), 37):
        many.update(u[idx, None], np.ones(idx.size), t[idx])
    np.testing.assert_allclose(many.sums, one.sums, rtol=1e-9, atol=1e-9)


def test_dead_time_check():
    # Poisson gaps are exponential: a fraction 1 - e^-0.1 of them lies below 0.1 x the mean
    # (common practice); a processor dead time of half the mean gap removes all of those.
    rng = np.random.default_rng(5)
    gaps = rng.exponential(1e-3, 20_000)
    ok = ArrivalCheck()
    ok.update(np.cumsum(gaps))
    dead = ArrivalCheck()
    dead.update(np.cumsum(gaps + 0.5e-3))
    assert ok.dead_time()["suspected"] is False
    assert ok.dead_time()["short_gaps"] == pytest.approx(0.0952 * 20_000, rel=0.1)
    assert dead.dead_time()["suspected"] is True
    assert dead.dead_time()["shortest_gap_s"] >= 0.5e-3


def test_low_data_rate_said_plainly():
    # fewer than about 10 samples per integral time: inter-arrival weighting and the slotted
    # ACF are unreliable (Barnett & Bentley 1974; REFERENCES-style rule of thumb, common practice)
    rng = np.random.default_rng(2)
    u, t = poisson_ou(rng, 200.0, 20.0, 5.0, 1.0, 0.01)  # 2 samples per T_int
    ps = WeightedPointStatistics(("u",), "arrival")
    feed(ps, u[:, None], t)
    fields = ps.random_sampling_fields()
    assert fields["weighting"] == "arrival"
    assert any("data rate too low" in n for n in fields["random_sampling"]["notes"])
    u, t = poisson_ou(rng, 2000.0, 5.0, 5.0, 1.0, 0.02)  # 40 per T_int
    ps = WeightedPointStatistics(("u",), "arrival")
    feed(ps, u[:, None], t)
    assert not any("too low" in n for n in ps.random_sampling_fields()["random_sampling"]["notes"])


@pytest.mark.slow
def test_weighted_interval_coverage_on_velocity_biased_records():
    # 400 seeded velocity-biased OU records (U = 10, sigma = 2, T_int = 10 ms, ~1000 arrivals/s,
    # 20 s): the transit-weighted 95 % interval of U must hold the true mean 10 in 0.92-0.98
    # of them (binomial 2-sigma band about 0.95 for 400 records is +-0.022).
    rng = np.random.default_rng(2024)
    hits = 0
    runs = 400
    for _ in range(runs):
        u, t = poisson_ou(rng, 1000.0, 20.0, 10.0, 2.0, 0.01, biased=True)
        w = 1e-4 / np.abs(u)
        snap = feed(WeightedPointStatistics(("u",), "transit"), u[:, None], t, w, parts=5)
        e = snap.estimate("U")
        hits += e.ci_low <= 10.0 <= e.ci_high
    assert 0.92 <= hits / runs <= 0.98


def test_early_eta_of_the_mean_from_the_slotted_integral_time():
    # before enough time blocks exist (< 16), the ETA of U follows from Var(mean) =
    # (sigma^2/N)(1 + 2 n' T_int) (Poisson arrivals; elementary result): sigma = 1, n' = 200/s,
    # T_int = 10 ms, target 0.02 -> T = (margin z / 0.02)^2 (1 + 4) / 200, then the rest of
    # the checkpoint streak (the stopping rule's constants, stats/convergence.py). From 0.3 s
    # of data the inputs are rough: the median of 9 seeded records must be within 50 % (about
    # 60 samples: T_int comes out low).
    from eddyvigil.stats.convergence import CHECKPOINT_GROWTH, STOP_MARGIN, STREAK
    from eddyvigil.stats.targets import Targets

    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.02}}})
    etas = []
    for seed in range(9):
        u, t = poisson_ou(np.random.default_rng(seed), 200.0, 0.3, 5.0, 1.0, 0.01)
        snap = feed(WeightedPointStatistics(("u",), "none", targets=targets), u[:, None], t)
        assert snap.estimate("U").blocks < 16  # the blocking error cannot predict yet
        etas.append(snap.estimate("U").eta_s)
    expected = (
        (STOP_MARGIN * 1.96 / 0.02) ** 2 * 5.0 / 200.0 * CHECKPOINT_GROWTH ** (STREAK - 1) - 0.3
    )
    assert np.median(etas) == pytest.approx(expected, rel=0.5)


@pytest.mark.slow
def test_integral_time_interval_coverage_on_velocity_biased_records():
    # 300 seeded velocity-biased OU records (U = 10, sigma = 2, exact T_int = 10 ms: the OU
    # process's ACF exp(-tau/T_int), Gillespie 1996; ~1000 arrivals/s, 4 s = 400 T_int, the
    # record the stopping rule asks for with margin), transit-weighted: the 95 % interval of
    # Tint_u must hold 10 ms in 0.92-0.98 of them (binomial 2-sigma band about 0.95 for 300
    # records is +-0.025); and an interval must be given for nearly all (>= 0.97).
    rng = np.random.default_rng(2025)
    hits = given = 0
    runs = 300
    for _ in range(runs):
        u, t = poisson_ou(rng, 1000.0, 4.0, 10.0, 2.0, 0.01, biased=True)
        snap = feed(WeightedPointStatistics(("u",), "transit"), u[:, None], t, 1e-4 / np.abs(u))
        e = snap.estimate("Tint_u")
        if np.isfinite(e.stderr):
            given += 1
            hits += e.ci_low <= 0.01 <= e.ci_high
    assert given / runs >= 0.97
    assert 0.92 <= hits / given <= 0.98


def test_integral_time_and_its_error_on_a_long_record():
    # one 30 s record (3000 T_int) of Poisson-sampled OU, exact T_int = 10 ms (Gillespie 1996):
    # T_int within 3 standard errors of the truth, and the standard error near the spread of
    # the ACF integral over a window of 5 T_int, sqrt(2 * 5 T_int / T) * T_int for an
    # exponential ACF (Bartlett's variance of the ACF, integrated: from memory), within 2x.
    u, t = poisson_ou(np.random.default_rng(8), 1000.0, 30.0, 5.0, 1.0, 0.01)
    snap = feed(WeightedPointStatistics(("u",), "none"), u[:, None], t)
    e = snap.estimate("Tint_u")
    assert abs(e.value - 0.01) < 3 * e.stderr
    rough = np.sqrt(2 * 5 * 0.01 / 30.0) * 0.01
    assert rough / 2 < e.stderr < 2 * rough
    length = snap.estimate("L_u")  # L = |U| T_int; its error at least T_int's, scaled
    assert length.value == pytest.approx(5.0 * e.value, rel=0.01)
    assert length.stderr >= 0.99 * abs(snap.estimate("U").value) * e.stderr
