"""Stationarity guard: exact reverse-arrangement regions, the two SE-based tests, and the
false-flag / power figures that the module docstring promises (seeded simulations)."""

from __future__ import annotations

import itertools
import math
from fractions import Fraction

import numpy as np
import pytest
from scipy import stats as sps

from eddyvigil.stats.stationarity import (
    DEFAULT_ALPHA,
    MIN_SEGMENTS,
    StationarityVerdict,
    assess,
    half_difference_z,
    mahonian_counts,
    reverse_arrangement_acceptance,
    reverse_arrangements,
    trend_t,
)


def _inversions_by_definition(seq) -> int:
    # A = #{i < j : x_i > x_j}, written out literally (Bendat & Piersol 2010, Random Data, §4.5.2).
    return sum(1 for i in range(len(seq)) for j in range(i + 1, len(seq)) if seq[i] > seq[j])


# ------------------------------------------------------------------ reverse arrangements


def test_worked_example():
    # Bendat & Piersol (2010), Random Data, 4th ed., worked example (REFERENCES §6).
    assert reverse_arrangements(np.array([5, 3, 8, 1, 9, 2, 7, 4, 6, 0])) == 26


def test_count_matches_definition_with_ties_and_large_n():
    rng = np.random.default_rng(11)
    for n in (0, 1, 2, 5, 17, 63):
        x = rng.integers(0, 6, size=n).astype(float)  # many ties: ties never count
        assert reverse_arrangements(x) == _inversions_by_definition(list(x))
    x = rng.standard_normal(2100)  # above the vectorised size: the row-by-row path
    tau = sps.kendalltau(x, np.arange(x.size)).statistic
    # No ties: tau = 1 - 4A / (n(n-1)) (Kendall 1938, "A new measure of rank correlation").
    n = x.size
    assert reverse_arrangements(x) == round((1.0 - tau) * n * (n - 1) / 4.0)


@pytest.mark.parametrize(
    ("n", "region"),
    [(10, (11, 33)), (20, (64, 125)), (30, (162, 272)), (100, (2145, 2804))],
)
def test_acceptance_check_values(n, region):
    # Bendat & Piersol (2010), Table A.7, alpha = 0.05, as given in REFERENCES §6.
    assert reverse_arrangement_acceptance(n, 0.05) == region


@pytest.mark.parametrize("n", range(1, 8))
def test_mahonian_distribution_matches_brute_force(n):
    # Enumerate all n! permutations and count inversions by the definition.
    brute = np.zeros(n * (n - 1) // 2 + 1, dtype=np.int64)
    for perm in itertools.permutations(range(n)):
        brute[_inversions_by_definition(perm)] += 1
    assert mahonian_counts(n) == tuple(int(c) for c in brute)
    # Acceptance regions from the brute-force distribution, for several levels.
    cdf = np.cumsum(brute) / math.factorial(n)
    for alpha in (0.05, 0.1, 0.3, 0.6):
        lo = max([a for a in range(brute.size) if cdf[a] <= alpha / 2 + 1e-12], default=-1)
        sf_above = 1.0 - cdf  # P(A > a)
        hi = min(a for a in range(brute.size) if sf_above[a] <= alpha / 2 + 1e-12)
        assert reverse_arrangement_acceptance(n, alpha) == (lo, hi)


@pytest.mark.parametrize("n", [60, 150, 200])
def test_exact_region_close_to_normal_approximation(n):
    # Kendall's null moments (Kendall 1938; REFERENCES §6):
    # mu = n(n-1)/4, sigma^2 = n(2n+5)(n-1)/72.
    mu = n * (n - 1) / 4.0
    sd = math.sqrt(n * (2 * n + 5) * (n - 1) / 72.0)
    lo, hi = reverse_arrangement_acceptance(n, 0.05)
    z = sps.norm.isf(0.025)
    assert abs(lo - (mu - z * sd)) <= 0.02 * sd + 1.0
    assert abs(hi - (mu + z * sd)) <= 0.02 * sd + 1.0
    counts = mahonian_counts(n)  # exact integers (200! overflows a double)
    total = math.factorial(n)
    assert sum(counts) == total
    mean = Fraction(sum(a * c for a, c in enumerate(counts)), total)
    second = Fraction(sum(a * a * c for a, c in enumerate(counts)), total)
    assert mean == Fraction(n * (n - 1), 4)
    assert second - mean**2 == Fraction(n * (2 * n + 5) * (n - 1), 72)


def test_normal_branch_above_exact_limit():
    n = 401
    mu = n * (n - 1) / 4.0
    sd = math.sqrt(n * (2 * n + 5) * (n - 1) / 72.0)
    lo, hi = reverse_arrangement_acceptance(n, 0.01)
    assert lo + hi + 1 == n * (n - 1) // 2
    assert abs(lo - (mu - sps.norm.isf(0.005) * sd)) <= 1.5  # floor and continuity: 1.5


def test_region_agrees_with_scipy_exact_kendall_test():
    # scipy.stats.kendalltau(method="exact") gives the exact two-sided p-value of the same
    # statistic (A = discordant pairs against the index); rejection must agree.
    rng = np.random.default_rng(5)
    for n in (12, 25, 33):
        for alpha in (0.05, 0.01):
            lo, hi = reverse_arrangement_acceptance(n, alpha)
            for _ in range(60):
                x = np.arange(n) + rng.normal(0.0, rng.choice([2.0, 6.0, 30.0]), n)
                p = sps.kendalltau(np.arange(n), x, method="exact").pvalue
                a = reverse_arrangements(x)
                assert (not lo < a <= hi) == (p <= alpha + 1e-12), (n, alpha, a, p)


# ------------------------------------------------------------------ SE-based tests


def test_half_difference_by_hand():
    # Halves [1, 2] and [4, 5] (middle 3 dropped): difference 3; SE 0.5, N = 5, N1 = N2 = 2:
    # sd = 0.5 * sqrt(5/2 + 5/2) = 1.118034 (hand arithmetic).
    z = half_difference_z(np.array([1.0, 2.0, 3.0, 4.0, 5.0]), 0.5)
    assert z == pytest.approx(3.0 / (0.5 * math.sqrt(5.0)), rel=1e-14)
    assert half_difference_z(np.array([5.0, 4.0, 1.0, 0.0]), 1.0) == pytest.approx(-4.0 / 2.0)
    assert math.isnan(half_difference_z(np.array([1.0, 2.0]), 0.0))
    assert math.isnan(half_difference_z(np.array([1.0, 2.0]), math.nan))
    assert math.isnan(half_difference_z(np.array([1.0]), 1.0))


def test_half_difference_is_standard_normal_with_the_true_se():
    # Independent segment means with the true SE of the whole mean: z ~ N(0, 1) (common practice).
    rng = np.random.default_rng(21)
    n = 41
    x = rng.standard_normal((4000, n))
    z = np.array([half_difference_z(row, 1.0 / math.sqrt(n)) for row in x])
    assert abs(z.mean()) < 0.06
    assert z.var() == pytest.approx(1.0, abs=0.07)


def test_trend_t_matches_scipy_linregress():
    rng = np.random.default_rng(3)
    for n in (3, 20, 63):
        x = rng.standard_normal(n) + 0.05 * np.arange(n)
        r = sps.linregress(np.arange(n), x)
        assert trend_t(x) == pytest.approx(r.slope / r.stderr, rel=1e-10)
    assert math.isnan(trend_t(np.array([1.0, 2.0])))
    assert math.isnan(trend_t(np.arange(10.0)))  # perfect line: no scatter to judge by


# ------------------------------------------------------------------ assess


@pytest.mark.parametrize(
    ("segments", "se", "why"),
    [
        (np.zeros(MIN_SEGMENTS - 1), 0.1, "19 segments"),
        (np.array([]), 0.1, "0 segments"),
        (np.r_[np.zeros(30), np.nan], 0.1, "non-finite"),
        (np.r_[np.zeros(30), np.inf], 0.1, "non-finite"),
        ("not numbers", 0.1, "not numbers"),
        ([[1.0, "x"]], 0.1, "not numbers"),
        (None, 0.1, "1 segments"),  # np.asarray(None) is one object
    ],
)
def test_assess_without_a_verdict_never_raises(segments, se, why):
    v = assess(segments, se)
    assert isinstance(v, StationarityVerdict)
    assert v.stationary is True and v.reason is None
    assert v.details["reason"] == "not enough segments"
    assert why in v.details["why"]


def test_assess_bad_se_and_alpha_do_not_raise():
    rng = np.random.default_rng(8)
    x = rng.standard_normal(40)
    for se in (math.nan, -1.0, 0.0, None, "0.1x", math.inf):
        v = assess(x, se)
        assert v.stationary and math.isnan(v.details["half_z"])
    v = assess(x, 0.15, alpha=2.0)
    assert v.stationary and "alpha" in v.details["why"]


def test_assess_reasons_name_the_failed_tests():
    n = 40
    ramp = np.linspace(-1.0, 1.0, n)
    rng = np.random.default_rng(2)
    v = assess(ramp + 0.05 * rng.standard_normal(n), 0.05)
    assert not v.stationary
    assert set(v.details["failed"]) == {"trend", "reverse_arrangements", "halves"}
    lo, hi = v.details["acceptance"]
    ra = v.details["reverse_arrangements"]
    assert f"trend: {ra} reverse arrangements outside ({lo}, {hi}]" in v.reason
    assert "halves differ by" in v.reason and "standard errors" in v.reason
    # A step in the middle with flat halves: the halves test speaks, in the user's words.
    step = np.r_[np.zeros(20), np.ones(20)] + 0.3 * rng.standard_normal(n)
    v = assess(step, 0.3 / math.sqrt(n))
    assert not v.stationary and "halves" in v.details["failed"]
    assert v.details["half_z"] > v.details["half_z_limit"]
    with pytest.raises(TypeError):
        v.details["x"] = 1  # type: ignore[index]


def _segment_means(rng, reps, n, phi, drift_se):
    """AR(1) segment means (unit variance, lag-1 correlation phi), a linear drift of
    ``drift_se`` true standard errors of the whole-record mean from start to end, and the
    standard error estimated by batch means of the same segments (so the drift inflates it)."""
    e = rng.standard_normal((reps, n))
    x = np.empty_like(e)
    x[:, 0] = e[:, 0]
    for j in range(1, n):
        x[:, j] = phi * x[:, j - 1] + math.sqrt(1.0 - phi * phi) * e[:, j]
    k = np.arange(1, n)
    se_true = math.sqrt((n + 2.0 * np.sum((n - k) * phi**k)) / n**2)  # Var of an AR(1) mean
    x = x + drift_se * se_true * ((np.arange(n) + 0.5) / n - 0.5)
    se_est = x.std(axis=1, ddof=1) / math.sqrt(n)
    return x, se_est


def _flag_rates(seed, reps, phi, alpha=DEFAULT_ALPHA):
    """(false-flag rate, power) over records of three components, N cycling over 32..63."""
    rng = np.random.default_rng(seed)
    false_flags = hits = 0
    for r in range(reps):
        n = (32, 40, 48, 56, 63)[r % 5]
        quiet = [_segment_means(rng, 1, n, phi, 0.0) for _ in range(3)]
        drifting, se_d = _segment_means(rng, 1, n, phi, 15.0)
        flags = [not assess(x[0], s[0], alpha=alpha).stationary for x, s in quiet]
        false_flags += any(flags)
        hits += (not assess(drifting[0], se_d[0], alpha=alpha).stationary) or flags[0] or flags[1]
    return false_flags / reps, hits / reps


@pytest.mark.parametrize("phi", [0.0, 0.05])
def test_false_flags_and_power_quick(phi):
    # Requirement (not a published value): <= 5 % of stationary 3-component records flagged,
    # >= 90 % of records with one component drifting by 15 SE flagged.
    false_rate, power = _flag_rates(seed=100 + int(100 * phi), reps=400, phi=phi)
    print(f"phi={phi}: false {false_rate:.3f}, power {power:.3f} (400 records)")
    assert false_rate <= 0.05
    assert power >= 0.90


@pytest.mark.slow
@pytest.mark.parametrize("phi", [0.0, 0.05])
def test_false_flags_and_power_tuning_figures(phi):
    # The module docstring's tuning, 2000 records each (binomial SE ~0.4 % / 0.6 %): the
    # requirement, and the aim of <= 3 % false flags for independent segment means.
    false_rate, power = _flag_rates(seed=7 + int(100 * phi), reps=2000, phi=phi)
    print(f"phi={phi}: false {false_rate:.4f}, power {power:.4f} (2000 records)")
    assert 0.005 <= false_rate <= (0.03 if phi == 0.0 else 0.05)
    assert power >= 0.90
