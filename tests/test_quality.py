"""Signal-quality checks (stats.quality) against published values and processes of known truth.

Sources: Goring & Nikora 2002, J. Hydraul. Eng. 128(1):117-126 (phase-space despiking,
universal threshold λ_U = √(2 ln N)); Wahl 2003, discussion, ibid. (median/MAD); Vickers &
Mahrt 1997, JAOT 14:512 (dropouts, clipping, amplitude resolution); REFERENCES §6 check values.
"""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pytest

from eddyvigil.stats.quality import SignalQuality, universal_threshold
from processes import ar1, turbulence

STRESS_SIGMA = np.sqrt(np.array([1.0, 0.5, 0.4]))  # diagonal of tests.processes.STRESS


def feed(q: SignalQuality, x: np.ndarray, step: int) -> np.ndarray:
    out = [q.update(x[i : i + step]) for i in range(0, x.shape[0], step)]
    out.append(q.flush())
    return np.concatenate(out)


@pytest.mark.parametrize(
    ("n", "lam"), [(1000, 3.7169), (4096, 4.0787), (10_000, 4.2919), (65536, 4.7096)]
)
def test_universal_threshold_check_values(n, lam):
    # REFERENCES §6 table (Goring & Nikora 2002, λ_U = √(2 ln N))
    assert universal_threshold(n) == pytest.approx(lam, abs=5e-5)


def expected_false_flag_rate(rho: float, n_window: int = 4096, draws: int = 1_000_000) -> float:
    """Probability that a row of a unit Gaussian AR(1) (lag correlation rho) is flagged by the
    spike rule with the true scales, by conditional Monte Carlo integration (our derivation).

    The rule (stats.quality_kernels): e_i = u_i - (u_(i-1) + u_(i+1))/2 beyond λ_U σ_u (a);
    (Δu_i, Δ²u_i) outside the ellipse of semi-axes λ_U σ_Δu, λ_U σ_Δ²u (b; Goring & Nikora
    2002, J. Hydraul. Eng. 128(1):117-126, λ_U = √(2 ln N)); |e_i| the largest within ±2 rows
    (c). Everything is linear in the Gaussian vector (u_(i-3), ..., u_(i+3)) with covariance
    rho^|j-k|, so P = P(a) P(b, c | a): P(a) = 2 Q(λ_U / σ_e) exactly, and the conditional
    part averages the indicator over e_i drawn from its two tails (scipy truncnorm) and the
    rest of the vector from its Gaussian law given e_i (Gaussian conditioning). 1e6 draws:
    about 1 % relative error for the rates used here. (A brute-force count on 5e7 white-noise
    rows gave 2.048e-5, this 2.05e-5.)"""
    from scipy.stats import norm, truncnorm

    lam = math.sqrt(2.0 * math.log(n_window))
    lags = np.arange(7)
    cov = rho ** np.abs(lags[:, None] - lags[None, :])

    def functional(coefs):  # a linear combination of u_(i-3) .. u_(i+3)
        v = np.zeros(7)
        for k, c in coefs.items():
            v[k + 3] += c
        return v

    jumps = [functional({k: 1.0, k - 1: -0.5, k + 1: -0.5}) for k in (-2, -1, 0, 1, 2)]
    d1 = functional({1: 0.5, -1: -0.5})
    d2 = functional({2: 0.25, 0: -0.5, -2: 0.25})
    e = jumps[2]
    var_e = e @ cov @ e
    s1, s2 = math.sqrt(d1 @ cov @ d1), math.sqrt(d2 @ cov @ d2)
    z = lam / math.sqrt(var_e)  # σ_u = 1
    rng = np.random.default_rng(3)
    tail = truncnorm.rvs(z, np.inf, size=draws, random_state=rng) * math.sqrt(var_e)
    tail *= np.where(rng.random(draws) < 0.5, -1.0, 1.0)
    gain = cov @ e / var_e
    cond = cov - np.outer(cov @ e, cov @ e) / var_e
    w, v = np.linalg.eigh(cond)
    u = tail[:, None] * gain + (rng.standard_normal((draws, 7)) * np.sqrt(np.clip(w, 0, None))) @ v.T
    hit = (u @ d1 / (lam * s1)) ** 2 + (u @ d2 / (lam * s2)) ** 2 > 1.0
    own = np.abs(u @ e)
    for j in (0, 1, 3, 4):
        hit &= np.abs(u @ jumps[j]) <= own
    return 2.0 * norm.sf(z) * float(np.mean(hit))


@pytest.mark.parametrize("rho", [0.0, math.exp(-1.0 / 0.5)])
def test_false_flag_rate_on_gaussian_data_matches_the_rule_expectation(rho):
    # White noise and AR(1) with T_int = 0.5 rows: expected flags from the integration above
    # (2.05e-5 and 1.15e-5 per row). Stated factor 1.5 both ways: the scales are estimated
    # (median/MAD of 256-value subsamples, averaged over 8 windows: about 3 % scatter each),
    # which raises a rate this far in the tail (measured 1.14-1.16 on the same rows against
    # the true scales); Poisson scatter of >= 140 expected flags is <= 9 %.
    rng = np.random.default_rng(21)
    x = ar1(rng, 4_000_000, 3, rho)  # 977 windows of 4096 rows per component
    q = SignalQuality(("u", "v", "w"))
    feed(q, x, 50_000)
    assert q._windows >= 100
    expected = expected_false_flag_rate(rho) * 3 * q.n_out
    assert expected >= 100
    found = int(q.spikes.sum())
    assert expected / 1.5 <= found <= 1.5 * expected, (found, expected)


@pytest.mark.parametrize("rho", [math.exp(-1.0 / 2.0), math.exp(-1.0 / 40.0),
                                 math.exp(-1.0 / 400.0)])
def test_false_flag_rate_on_smooth_gaussian_ar1_within_the_universal_threshold_bound(rho):
    # Where the expectation is far below one flag per record only a bound can be tested. A
    # clean sample is flagged only if (a) it departs from its neighbours' mean by more than
    # λ_U σ_u and (b) (Δu, Δ²u) lies outside its ellipse. For a unit Gaussian AR(1) with lag
    # correlation ρ, e = u_i - (u_{i-1} + u_{i+1})/2 is Gaussian with variance
    # 1.5 - 2ρ + ρ²/2 (analytic), so P(a) = 2 Q(λ_U / √(1.5 - 2ρ + ρ²/2)); for the
    # uncorrelated Gaussian pair (Δu, Δ²u), P(b) = exp(-λ_U²/2) = 1/N (chi-squared with 2
    # degrees of freedom; Goring & Nikora 2002). Expected false flags per window of N at most
    # N min(P(a), P(b)); stated factor 2 (scales estimated from the data), and one stray flag
    # in the record allowed where the bound is far below one per record.
    from scipy.stats import norm

    rng = np.random.default_rng(12)
    x = ar1(rng, 400_000, 1, rho)
    q = SignalQuality(("u",))
    feed(q, x, 1000)
    n = q.window
    lam = universal_threshold(n)
    bound = n * min(2 * norm.sf(lam / math.sqrt(1.5 - 2 * rho + 0.5 * rho**2)), 1.0 / n)
    per_window = q.spikes[0] / q.n_out * n
    assert per_window <= 2.0 * bound + 1.0 / q._windows, (per_window, bound)


def test_spikes_of_six_sigma_are_found_in_95_percent_of_cases():
    rng = np.random.default_rng(7)
    x = turbulence(rng, 300_000, math.exp(-1.0 / 40.0))
    k = 300
    rows = np.sort(rng.choice(np.arange(5, x.shape[0] - 5, 7), k, replace=False))
    comps = rng.integers(0, 3, k)
    signs = np.where(rng.random(k) < 0.5, -1.0, 1.0)
    y = x.copy()
    y[rows, comps] += 6.0 * signs * STRESS_SIGMA[comps]
    q = SignalQuality(("u", "v", "w"))
    feed(q, y, 777)
    flagged = {(r, c) for r, c, kind, _ in q.marks if kind == 1}
    assert len(q.marks) < 2000  # every flag is still remembered (MARKS_KEPT)
    found = sum((int(r), int(c)) in flagged for r, c in zip(rows, comps, strict=True))
    assert found >= 0.95 * k, found


def test_counts_do_not_depend_on_how_the_stream_is_cut():
    rng = np.random.default_rng(3)
    x = turbulence(rng, 50_000, math.exp(-1.0 / 20.0))
    x[1000, 0] += 8.0
    x[20_000:20_100] = x[19_999]
    a, b = SignalQuality("uvw", "exclude"), SignalQuality("uvw", "exclude")
    out_a, out_b = feed(a, x, 50_000), feed(b, x, 313)
    assert a.summary() == b.summary()
    np.testing.assert_array_equal(out_a, out_b)


def test_clipping_at_one_percent_dropout_of_50_ms_and_quantisation_step():
    # 4 kHz sampling: a 50 ms dropout holds the last value for 200 rows (simulator.faults
    # convention: the run's first value is real, the 200 held copies are the dropout).
    rate_hz, q_step = 4000.0, 0.01
    rng = np.random.default_rng(5)
    x = 10.0 + ar1(rng, 200_000, 1, math.exp(-1.0 / 40.0))
    x = np.round(x / q_step) * q_step
    rail = np.quantile(x, 0.99)
    x = np.minimum(x, rail)
    n_clip = int((x == rail).sum())
    assert 0.009 * x.size <= n_clip <= 0.012 * x.size
    length = round(0.050 * rate_hz)
    x[80_000 : 80_000 + length] = x[79_999]
    q = SignalQuality(("u",))
    feed(q, x, 500)
    s = q.summary()["u"]
    assert s["clipped_samples"] == n_clip
    assert s["dropout_samples"] >= length  # the held copies (plus any of an equal neighbour)
    assert s["dropout_samples"] <= length + 2
    # quantisation step recovered within 5 % (REFERENCES §6: smallest non-zero |Δx|)
    assert s["quantisation_step"] == pytest.approx(q_step, rel=0.05)
    assert s["sigma_over_step"] == pytest.approx(np.std(x) / q_step, rel=0.05)
    assert "u" in q.suspect_reasons()  # 1 % clipped > 0.1 %


def test_unquantised_data_report_no_step_and_clean_data_no_dropouts_or_clipping():
    rng = np.random.default_rng(9)
    x = turbulence(rng, 100_000, math.exp(-1.0 / 30.0))
    q = SignalQuality("uvw")
    feed(q, x, 1024)
    for c in "uvw":
        s = q.summary()[c]
        assert s["quantisation_step"] is None and s["sigma_over_step"] is None
        assert s["dropout_samples"] == 0 and s["clipped_samples"] == 0
    assert q.suspect_reasons() == {}


def test_exclude_replaces_only_flagged_samples_by_linear_interpolation():
    rng = np.random.default_rng(11)
    x = turbulence(rng, 40_000, math.exp(-1.0 / 40.0))
    y = x.copy()
    y[10_000, 1] += 8.0 * STRESS_SIGMA[1]
    q = SignalQuality("uvw", "exclude")
    out = feed(q, y, 999)
    assert out.shape == y.shape
    changed = np.argwhere(out != y)
    assert [10_000, 1] in changed.tolist()
    # Goring & Nikora replace by interpolation between the neighbours
    assert out[10_000, 1] == pytest.approx(0.5 * (y[9_999, 1] + y[10_001, 1]))
    assert q.summary()["v"]["replaced"] == int(q.spikes[1] + q.dropout_samples[1])
    assert changed.shape[0] == int(q.replaced.sum())


def _point_line(block, policy):
    from eddyvigil.monitor import Pipeline

    buf = io.StringIO()
    p = Pipeline(summary=buf, quality=policy)
    p.begin_point("s", {"id": "P1"})
    for i in range(0, block.shape[0], 4000):
        assert p.feed("s", block[i : i + 4000], rate_hz=4000.0) is None
    p.end("s")
    p.close()
    return json.loads(buf.getvalue().splitlines()[0])


def test_exclude_statistics_of_a_spiked_stream_agree_with_the_clean_stream():
    rng = np.random.default_rng(21)
    clean = turbulence(rng, 240_000, math.exp(-1.0 / 20.0))
    spiked = clean.copy()
    k = 240  # 1 per 1000 rows: below the 1 % suspect threshold
    rows = rng.choice(np.arange(5, clean.shape[0] - 5, 9), k, replace=False)
    comps = rng.integers(0, 3, k)
    spiked[rows, comps] += 10.0 * STRESS_SIGMA[comps]  # one-signed: biases means and stresses
    ref = {e["name"]: e for e in _point_line(clean, "flag")["statistics"]}
    raw = _point_line(spiked, "flag")
    line = _point_line(spiked, "exclude")
    assert line["quality"]["policy"] == "exclude"
    assert sum(line["quality"][c]["replaced"] for c in "uvw") >= k
    assert raw["quality"]["policy"] == "flag" and raw["quality"]["u"]["replaced"] == 0
    got = {e["name"]: e for e in line["statistics"]}
    bad = {e["name"]: e for e in raw["statistics"]}
    for name in ("U", "V", "W", "uu", "vv", "ww", "uv"):
        half = 0.5 * (got[name]["ci_high"] - got[name]["ci_low"])
        assert abs(got[name]["value"] - ref[name]["value"]) <= half, name
    # and the check is not empty: unreplaced, the spikes either move the variance outside its
    # interval or make its tails so heavy that no honest interval is shown (Hill 1975 tail
    # index, stats/tails.py)
    if bad["uu"]["ci_low"] is None:
        assert bad["uu"]["state"] == "no-interval", bad["uu"]
    else:
        half = 0.5 * (bad["uu"]["ci_high"] - bad["uu"]["ci_low"])
        assert abs(bad["uu"]["value"] - ref["uu"]["value"]) > half


def test_flagged_fraction_above_threshold_makes_the_point_suspect_never_converged():
    rng = np.random.default_rng(4)
    x = turbulence(rng, 120_000, math.exp(-1.0 / 5.0))
    rows = rng.choice(np.arange(5, x.shape[0] - 5, 4), 2400, replace=False)  # 2 % of rows
    x[rows, 0] += 9.0
    line = _point_line(x, "flag")
    assert line["converged"] is False
    assert "signal quality" in line["suspect"]["u"]
    assert line["quality"]["u"]["spikes"] >= 0.95 * rows.size
    u = next(e for e in line["statistics"] if e["name"] == "U")
    assert u["state"] == "suspect" and u["converged"] is False


def test_random_sampling_judges_no_spikes_but_keeps_every_row_and_the_duration():
    # arrival order is not a time series: no spike is called there (the summary says why);
    # a dropout (held value) is still found and, under exclude, replaced. The duration is the
    # span of the t column (DESIGN §10) whatever the policy holds back.
    from eddyvigil.monitor import Pipeline

    rng = np.random.default_rng(17)
    t = np.cumsum(rng.exponential(1e-3, 20_000))
    u = 10.0 + ar1(rng, 20_000, 1, math.exp(-1.0 / 5.0))
    u[5000, 0] += 9.0  # would be a spike in a uniformly sampled record
    u[9000:9050, 0] = u[8999, 0]  # 50 held copies
    out = {}
    for policy in ("flag", "exclude"):
        buf = io.StringIO()
        p = Pipeline(summary=buf, quality=policy)
        for i in range(0, 20_000, 700):
            assert p.feed("lda", u[i : i + 700], columns=("u",), times=t[i : i + 700]) is None
        p.end("lda")
        p.close()
        out[policy] = json.loads(buf.getvalue().splitlines()[0])
    for line in out.values():
        assert line["samples"] == 20_000
        assert line["duration_s"] == pytest.approx(t[-1] - t[0], rel=1e-12)
        assert line["quality"]["u"]["spikes"] is None
        assert "arrival order" in line["quality"]["spikes_note"]
        assert 50 <= line["quality"]["u"]["dropout_samples"] <= 52
    assert out["exclude"]["quality"]["u"]["replaced"] == out["exclude"]["quality"]["u"][
        "dropout_samples"
    ]
    assert out["flag"]["quality"]["u"]["replaced"] == 0


def test_merge_of_two_flushed_parts_matches_the_whole():
    # counts add; pile-up at a rail and the r.m.s. combine exactly (Chan, Golub & LeVeque 1979
    # pairwise update, checked against numpy on the whole record)
    rng = np.random.default_rng(23)
    x = turbulence(rng, 16_384, math.exp(-1.0 / 10.0))
    x[:, 2] = np.minimum(x[:, 2], np.quantile(x[:, 2], 0.99))
    x[3000, 0] += 8.0
    x[12_000, 1] += 8.0
    a, b, whole = SignalQuality("uvw"), SignalQuality("uvw"), SignalQuality("uvw")
    feed(a, x[:8192], 1000)
    feed(b, x[8192:], 1000)
    feed(whole, x, 1000)
    both = a.merge(b)
    assert a.n == 8192 and b.n == 8192  # inputs untouched
    np.testing.assert_array_equal(both.clipped_samples(), whole.clipped_samples())
    assert both.clipped_samples()[2] == int((x[:, 2] == x[:, 2].max()).sum())
    np.testing.assert_array_equal(both.spikes, a.spikes + b.spikes)
    np.testing.assert_allclose(both.sigma(), np.std(x, axis=0), rtol=1e-12)
    assert {(r, c) for r, c, k, _ in both.marks if k == 1} >= {(3000, 0), (12_000, 1)}
