"""Stopping on ``converged`` must stay honest on hard signals (issue 12), or say it cannot tell.

Each family is a seeded set of 400 records with known truth. The measure is the one a user
lives with: the share of *all* records that stop converged with the truth outside the 95 %
interval, which must be at most 5 % for every targeted statistic (binomial sd at 400 records
and 5 %: 1.1 %). For heavy tails, an interval must either cover in >= 90 % of the records
that show one, or be withheld in >= 90 % of them.
"""

import numpy as np
import pytest
from processes import MEAN, STRESS, ar1, ar1_flatness, heavy_ar1, turbulence, two_scale
from stopping import run_until_converged

from eddyvigil.stats import PointStatistics, Targets

pytestmark = pytest.mark.slow

REPS = 400


def miss_shares(runs, names):
    return {n: float(np.mean([r.miss[n] for r in runs])) for n in names}


@pytest.mark.parametrize(("w", "seed"), [(0.025, 1), (0.01, 2)])
def test_slow_content_with_the_slowest_period_stated(w, seed):
    # Two time scales, T = 5 and 1000 samples (REFERENCES §12): the slow part's share of the
    # mean's variance, w x 2000 against 10, is that of the w = 0.005 and 0.002 at
    # T = 5000 (kept 5x shorter for CI time). The facility's slowest time scale (1 s at
    # 1 kHz) is stated in the targets file; the guards then ask for blocks of 4 and a record
    # of 100 of it. Without it the record cannot tell (README, "Before you rely on it").
    targets = Targets.from_dict(
        {"targets": {"U": {"absolute": 0.025}}, "slowest_period_s": 1.0}
    )
    runs = []
    for r in range(REPS):
        x = two_scale(np.random.default_rng(1000 * seed + r), 2**19, w, t_slow=1000.0)
        runs.append(
            run_until_converged(x[:, :1], ("u",), targets, {"U": MEAN[0]}, block=2**15)
        )
    share = miss_shares(runs, ["U"])
    stopped = np.mean([r.samples is not None for r in runs])
    assert share["U"] <= 0.05, (share, stopped)
    assert stopped >= 0.5, stopped  # it does stop once the record can tell


@pytest.mark.parametrize(
    ("w", "seed"),
    [
        # measured with the means' low-band floor (stats.slow_spectrum.low_band_variance, 10
        # cosine terms): w = 0.005 1.25 % stopped wrong, w = 0.002 4.75 % (without it 3.0 %
        # and 8.25 %; 7 % and 11.75 % before the periodogram rise test, 17.25 % and 18.5 %
        # before the blocking one)
        (0.005, 3),
        (0.002, 4),
    ],
)
def test_slow_content_without_a_stated_period(w, seed):
    # The process: sqrt(1 - w) AR(1, T = 5) + sqrt(w) AR(1, T = 5000 samples)
    # (REFERENCES §12: N Var(mean) -> 60 for w = 0.005, 30 for w = 0.002, against 10 for the
    # fast part), no period stated: the guards alone must keep the stops honest
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.025}}})
    runs = []
    for r in range(REPS):
        x = two_scale(np.random.default_rng(1000 * seed + r), 2**20, w)
        runs.append(run_until_converged(x[:, :1], ("u",), targets, {"U": MEAN[0]}, block=2**14))
    share = miss_shares(runs, ["U"])
    assert share["U"] <= 0.05, share


@pytest.mark.parametrize("kind", ["t5", "laplace"])
def test_heavy_tails_withhold_or_cover(kind):
    # AR(1), rho = e^-0.1, unit-variance innovations; flatness 3 + excess x (1 - rho^2)^2 /
    # (1 - rho^4) (REFERENCES §12): t5 excess 6, Laplace excess 3. Fourth moments and the
    # flatness need 8th moments: t5 has none (alpha = 5), so their intervals must be withheld
    # or still cover; the mean and the variance (2nd and 4th moments) keep theirs.
    rho = np.exp(-0.1)
    excess = 6.0 if kind == "t5" else 3.0
    flat = ar1_flatness(rho, excess)
    if kind == "t5":
        assert flat == pytest.approx(3.598, abs=1e-3)  # REFERENCES §12 check value
    truth = {"U": 5.0, "uu": 1.0, "uuuu": flat, "flat_u": flat}
    shown = {n: 0 for n in truth}
    hit = {n: 0 for n in truth}
    for r in range(REPS):
        x = 5.0 + heavy_ar1(np.random.default_rng(20_000 + r), 2**16, 1, rho, kind)
        ps = PointStatistics(("u",), 1000.0)
        for k in range(0, x.shape[0], 2**14):
            ps.update(x[k : k + 2**14])
        snap = ps.snapshot()
        for n, want in truth.items():
            e = snap.estimate(n)
            if np.isfinite(e.ci_low):
                shown[n] += 1
                hit[n] += e.ci_low <= want <= e.ci_high
            else:
                assert e.state == "no-interval" and "tails too heavy" in e.reason
    for n in truth:
        withheld = 1 - shown[n] / REPS
        coverage = hit[n] / shown[n] if shown[n] else 1.0
        assert coverage >= 0.90 or withheld >= 0.90, (kind, n, coverage, withheld)
    for n in ("U", "uu"):
        # their moments exist (2nd, 4th < 5): an interval in nearly every record, and it covers
        assert shown[n] >= 0.95 * REPS, (kind, n, shown[n])
        assert hit[n] / shown[n] >= 0.92, (kind, n, hit[n] / shown[n])


def test_short_records_at_long_integral_times():
    # T_int = 2000 samples (a hot-wire at 50 kHz, T = 40 ms), loose targets that a record of
    # a few tens of T_int would meet: the minimum record (100 T_int) and block length (4 T_int,
    # 64 blocks) must keep the stops honest (REFERENCES §11 safe rule). Records of 2^21
    # samples (1049 T_int): where the estimated T_int exceeds 2048 samples the blocks must be
    # 16384 long, and 64 of them fill a record of 2^20, in which 18.5 % of these records could
    # not stop; 399 of 400 stop within 2^21 (median at 279 T_int; measured: U 2 % outside,
    # uu 4.5 %).
    rho = np.exp(-1 / 2000)
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.3}, "uu": {"relative": 0.3}}})
    truth = {"U": 1.0, "uu": 1.0}
    runs = []
    for r in range(REPS):
        x = 1.0 + ar1(np.random.default_rng(30_000 + r), 2**21, 1, rho)
        runs.append(run_until_converged(x, ("u",), targets, truth, block=2**15))
    share = miss_shares(runs, truth)
    assert all(v <= 0.05 for v in share.values()), share
    stops = [r.samples for r in runs if r.samples]
    assert len(stops) >= 0.9 * REPS
    assert min(stops) >= 100 * 2000  # never before 100 T_int


@pytest.mark.parametrize(
    "columns",
    [
        ("u", "v"),
        ("u",),
        # (u, w): ww's target, 5 % of the modelled k = 1.05, is 13 % of ww = 0.4 itself, so
        # its error bar is relatively wide and rests on the log-scale, skew and kurtosis
        # corrections of point._variance_intervals (measured on these seeds: ww 5.0 %
        # outside, 20 of 400, at the limit; 5.5 % with symmetric intervals, 17 of its 22
        # misses below; U 1.75 %, W 1.25 %, uu 3.25 %, uw 4.25 %; measured again with 3 %
        # checkpoints and the means' low-band floor: ww still 5.0 %)
        ("u", "w"),
    ],
)
def test_k_from_missing_components_is_never_a_converged_wrong_answer(columns):
    # Anisotropic stresses (uu 1, vv 0.5, ww 0.4, k = 0.95): k from (u, v) models 1.125,
    # from (u) 1.5, from (u, w) 1.05 (hand arithmetic). Such a k gets no interval (by default),
    # and the other targeted statistics stop honestly.
    idx = ["uvw".index(c) for c in columns]
    names = [c.upper() for c in columns] + [a + b for i, a in enumerate(columns) for b in columns[i:]]
    truth = {c.upper(): MEAN["uvw".index(c)] for c in columns}
    for i, a in enumerate(columns):
        for b in columns[i:]:
            truth[a + b] = STRESS["uvw".index(a), "uvw".index(b)]
    runs = []
    for r in range(REPS):
        x = turbulence(np.random.default_rng(40_000 + r), 2**17, np.exp(-1 / 10))[:, idx]
        runs.append(run_until_converged(x, columns, Targets.defaults(), {**truth, "k": 0.95}))
    assert all(r.withheld["k"] for r in runs)
    assert all(r.snap.estimate("k").state == "no-interval" for r in runs)
    share = miss_shares(runs, names)
    assert all(v <= 0.05 for v in share.values()), share
    assert np.mean([r.samples is not None for r in runs]) >= 0.9


def test_near_zero_mean_stops_honestly():
    # A recirculation zone: U = 0.02 m/s under u' = 1 m/s. With the scale sqrt(|U|^2 + 2k/3)
    # = 0.80 m/s a 5 % target on the means is 0.04 m/s, reached at about 46 000 samples
    # (3.84 x 19 / 0.04^2, REFERENCES §1); against |U| it would be 0.001 m/s and 29 million.
    # (The default 1 % is 1 % of u' here: about 1.1 million samples, honest but long.)
    # 3 x REPS records (binomial sd 0.6 % at 5 %): on the first 400, uv stopped outside in
    # 5.0 % of them without the means' low-band floor and 5.5 % with it (its interval is not
    # touched by the floor, only the stops move: the means bind here); on the 800 after them
    # 2.1 % with and without it (measured)
    mean = np.array([0.02, 0.0, 0.0])
    truth = {"U": 0.02, "V": 0.0, "W": 0.0, "uu": 1.0, "uv": -0.3, "k": 0.95}
    spec = {n: {"relative": 0.05} for n in truth}
    targets = Targets.from_dict({"targets": spec})
    runs = []
    for r in range(3 * REPS):
        x = turbulence(np.random.default_rng(50_000 + r), 2**18, np.exp(-1 / 10), mean=mean)
        runs.append(run_until_converged(x, ("u", "v", "w"), targets, truth))
    share = miss_shares(runs, truth)
    assert all(v <= 0.05 for v in share.values()), share
    assert np.mean([r.samples is not None for r in runs]) >= 0.9
