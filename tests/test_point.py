"""PointStatistics: names, snapshot semantics, worked examples, split and merge invariance."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from processes import ar1, turbulence
from scipy import stats as sps

from eddyvigil.stats import PointStatistics, Targets, statistic_names
from eddyvigil.stats.blocking import _chi2_99, choose_level
from eddyvigil.stats.convergence import STOP_MARGIN
from eddyvigil.stats.kernels import integral_scales
from eddyvigil.stats.point import _t_quantiles
from eddyvigil.stats.stationarity import assess, assess_columns, reverse_arrangements


def test_snapshot_lists_every_statistic_in_design_order():
    ps = PointStatistics(("u", "v", "w"), rate_hz=1000.0)
    snap = ps.snapshot()
    assert snap.names == tuple(statistic_names(("u", "v", "w")))
    assert len(snap.names) == 3 + 6 + 1 + 10 + 15 + 3 + 3 + 3 + 3 + 3


def test_too_few_samples_give_nan_and_not_converged():
    ps = PointStatistics(("u", "v"), rate_hz=1000.0)
    snap = ps.snapshot()
    assert snap.samples == 0 and not snap.converged
    for e in snap.estimates:
        assert math.isnan(e.value) and math.isnan(e.stderr)
        assert e.converged in (None, False)
        j = e.to_json()
        assert j["value"] is None and j["stderr"] is None
    ps.update(np.array([[1.0, 2.0]] * 3))
    snap = ps.snapshot()
    assert snap.estimate("U").value == 1.0
    assert math.isnan(snap.estimate("U").stderr)
    assert snap.estimate("U").state == "warming-up"


def test_two_component_k_is_flagged():
    # k from two components, 3/4 (uu + vv), assuming ww = (uu + vv)/2 (common practice;
    # REFERENCES §8 check: uu = 1, vv = 0.5 gives 1.125).
    x = np.array([[1.0, 0.0], [-1.0, np.sqrt(0.5)], [1.0, -np.sqrt(0.5)], [-1.0, 0.0]])
    x = np.tile(x, (256, 1))
    snap = PointStatistics(("u", "v"), rate_hz=100.0).update(x).snapshot()
    uu, vv = snap.estimate("uu").value, snap.estimate("vv").value
    assert snap.estimate("k").value == pytest.approx(0.75 * (uu + vv))
    assert "two components" in snap.k_method


def test_worked_example_error_of_mean_and_time_scale():
    # REFERENCES §1: f_s = 1 kHz, T_int = 10 ms, sigma = 1 m/s, N = 10 000 -> SE 0.0447 m/s,
    # N_eff 500; averaged over seeded replicates, the blocking estimate must sit on these.
    rho = np.exp(-1e-3 / 1e-2)
    se, tint, neff = [], [], []
    for r in range(60):
        x = 10.0 + ar1(np.random.default_rng(r), 40_000, 1, rho)
        snap = PointStatistics(("u",), rate_hz=1000.0).update(x).snapshot()
        se.append(snap.estimate("U").stderr * np.sqrt(4))  # scale the 4x longer record to N = 1e4
        tint.append(snap.estimate("Tint_u").value)
        # Taylor: L_u = |U| Tint_u (common practice; REFERENCES §7 L_u = U T_int)
        assert snap.estimate("L_u").value == pytest.approx(
            abs(snap.estimate("U").value) * tint[-1], rel=1e-12
        )
        neff.append(snap.estimate("Neff_u").value / 4)
    assert np.mean(se) == pytest.approx(0.0447176, rel=0.06)
    assert np.mean(tint) == pytest.approx(0.010, rel=0.08)
    assert np.mean(neff) == pytest.approx(500.08, rel=0.12)


def test_values_match_numpy_reference():
    rng = np.random.default_rng(4)
    x = turbulence(rng, 50_000, 0.9)
    snap = PointStatistics(("u", "v", "w"), rate_hz=2000.0).update(x).snapshot()
    d = x - x.mean(axis=0)
    assert snap.estimate("U").value == pytest.approx(x[:, 0].mean(), rel=1e-13)
    assert snap.estimate("uv").value == pytest.approx((d[:, 0] * d[:, 1]).mean(), rel=1e-10)
    assert snap.estimate("k").value == pytest.approx(0.5 * (d**2).mean(axis=0).sum(), rel=1e-10)
    assert snap.estimate("uvw").value == pytest.approx(
        (d[:, 0] * d[:, 1] * d[:, 2]).mean(), rel=1e-8
    )
    assert snap.estimate("vvww").value == pytest.approx(
        (d[:, 1] ** 2 * d[:, 2] ** 2).mean(), rel=1e-9
    )
    from scipy import stats as sps

    assert snap.estimate("skew_w").value == pytest.approx(sps.skew(x[:, 2]), rel=1e-8)
    assert snap.estimate("flat_v").value == pytest.approx(
        sps.kurtosis(x[:, 1], fisher=False), rel=1e-9
    )
    assert snap.duration_s == pytest.approx(25.0)


@settings(max_examples=25, deadline=None)
@given(cuts=st.lists(st.integers(1, 30_000), min_size=1, max_size=6))
def test_any_block_split_gives_the_same_snapshot(cuts):
    rng = np.random.default_rng(12)
    x = turbulence(rng, 30_000, 0.95).astype(np.float32)
    whole = PointStatistics(("u", "v", "w"), rate_hz=5000.0).update(x).snapshot()
    ps = PointStatistics(("u", "v", "w"), rate_hz=5000.0)
    edges = [0] + sorted(set(cuts)) + [x.shape[0]]
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        ps.update(x[a:b])
    split = ps.snapshot()
    # stated tolerance: values to 1e-9 relative, standard errors to 1e-7 (summation order only)
    for e, f in zip(whole.estimates, split.estimates, strict=True):
        assert e.name == f.name
        np.testing.assert_allclose(f.value, e.value, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(f.stderr, e.stderr, rtol=1e-7, atol=1e-14)
        assert f.blocks == e.blocks


def test_merge_equals_single_pass_values():
    rng = np.random.default_rng(9)
    x = turbulence(rng, 40_000, 0.9)
    ref = np.array([10.0, 0.5, 0.0])
    a = PointStatistics(("u", "v", "w"), 1000.0, ref=ref).update(x[:17_000])
    b = PointStatistics(("u", "v", "w"), 1000.0, ref=ref).update(x[17_000:])
    whole = PointStatistics(("u", "v", "w"), 1000.0, ref=ref).update(x).snapshot()
    merged = a.merge(b).snapshot()
    assert a.n == 17_000 and b.n == 23_000
    for e, f in zip(whole.estimates, merged.estimates, strict=True):
        if e.name.startswith(("Tint_", "Neff_", "L_")):  # derived from the (merged) errors
            np.testing.assert_allclose(f.value, e.value, rtol=0.4)
            continue
        np.testing.assert_allclose(f.value, e.value, rtol=1e-9, atol=1e-12)
        if e.name in ("U", "uu", "uv", "k"):
            np.testing.assert_allclose(f.stderr, e.stderr, rtol=0.2)


def test_random_sampling_duration_and_errors():
    rng = np.random.default_rng(2)
    x = ar1(rng, 20_000, 2, 0.5) + [1.0, 0.0]
    ps = PointStatistics(("u", "v"), rate_hz=None)
    with pytest.raises(ValueError):
        ps.update(x[:10])
    for k in range(0, 20_000, 5000):
        ps.update(x[k : k + 5000], duration_s=2.5)
    snap = ps.snapshot()
    assert snap.duration_s == pytest.approx(10.0)
    assert np.isfinite(snap.estimate("U").stderr)


def test_converges_with_targets_and_reports_eta():
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.01}, "uu": {"relative": 0.05}}})
    rng = np.random.default_rng(1)
    ps = PointStatistics(("u", "v", "w"), rate_hz=2000.0, targets=targets)
    x = turbulence(rng, 400_000, np.exp(-1 / 10))
    saw_eta = False
    for k in range(0, x.shape[0], 4000):
        ps.update(x[k : k + 4000])
        snap = ps.snapshot()
        uu = snap.estimate("uu")
        if uu.eta_s is not None and uu.eta_s > 0:
            saw_eta = True
        if snap.converged:
            break
    assert saw_eta
    assert snap.converged and snap.converged_at_s is not None
    assert snap.converged_at_s <= snap.duration_s
    u = snap.estimate("U")
    assert u.state == "converged" and u.eta_s == 0.0
    assert STOP_MARGIN * u.half_width <= u.target
    assert snap.estimate("vv").state == "untargeted" and snap.estimate("vv").target is None
    assert snap.slowest() is None


@pytest.mark.parametrize(
    "targets",
    [
        None,  # the defaults: means, stresses, k
        {"targets": {"uuv": {"relative": 0.2}, "Tint_w": {"relative": 0.3}}},
        {"targets": {"flat_v": {"relative": 0.1}, "uvww": {"absolute": 0.5}}},
    ],
)
def test_checkpoint_evaluation_is_the_full_one_on_the_rows_it_uses(targets):
    # A checkpoint analyses only the targeted statistics (and the means, for the stationarity
    # guard); on those rows it must be the full evaluation digit for digit, and the verdict
    # the same. The other rows come back NaN, which shows their work was skipped.
    t = Targets.defaults() if targets is None else Targets.from_dict(targets)
    ps = PointStatistics(("u", "v", "w"), rate_hz=2000.0, targets=t)
    x = turbulence(np.random.default_rng(4), 300_000, np.exp(-1 / 20))
    for k in range(0, x.shape[0], 30_000):
        ps.update(x[k : k + 30_000])
        part = ps._evaluate(ps._checkpoint_rows)
        ps._cache = None
        full = ps._evaluate()
        ps._cache = None
        used = sorted({*ps._plan.targeted, 0, 1, 2})
        for field in ("values", "stderr", "half_width", "blocks", "se_rel_err"):
            a, b = getattr(part, field)[used], getattr(full, field)[used]
            np.testing.assert_array_equal(a, b, err_msg=field)
        assert part.suspect == full.suspect
        assert ps._passes(part) == ps._passes(full)
    skipped = [i for i in range(len(ps.table.names)) if not ps._checkpoint_rows[i]]
    assert skipped and np.isnan(part.stderr[skipped]).all()
    assert np.isfinite(full.stderr[skipped]).all()


def test_targeted_snapshot_is_the_snapshot_restricted_to_targets():
    # What the pipeline reads at a checkpoint (history row, converged signal) must be the
    # full snapshot's targeted part, field for field, whether or not a checkpoint was passed.
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.01}, "uw": {"absolute": 0.02}}})
    ps = PointStatistics(("u", "v", "w"), rate_hz=2000.0, targets=targets)
    x = turbulence(np.random.default_rng(6), 400_000, np.exp(-1 / 10))
    seen_converged = False
    for k in range(0, x.shape[0], 7_000):
        ps.update(x[k : k + 7_000])
        part = ps.targeted_snapshot()
        ps._cache = None  # no reuse: the full snapshot evaluates afresh
        full = ps.snapshot()
        want = full.targeted()
        assert [e.name for e in part.estimates] == [e.name for e in want] == ["U", "uw"]
        for a, b in zip(part.estimates, want, strict=True):
            for field, va in a._asdict().items():
                vb = getattr(b, field)
                if isinstance(va, float) and math.isnan(va):
                    assert isinstance(vb, float) and math.isnan(vb), field
                else:
                    assert va == vb, field
        assert (part.converged, part.converged_at_s) == (full.converged, full.converged_at_s)
        assert (part.samples, part.duration_s, part.suspect) == (
            full.samples,
            full.duration_s,
            full.suspect,
        )
        seen_converged |= full.converged
    assert seen_converged


def test_where_a_block_came_from_never_changes_a_digit():
    # A decoded wire buffer is read-only, a script's array is writable, a column slice is not
    # C-ordered: numba would compile one specialisation each, and re-associated sums could then
    # differ in the last bit. Live and replayed runs must agree bit for bit (DESIGN §1).
    rng = np.random.default_rng(5)
    x = (8 + rng.normal(size=(40_000, 3))).astype(np.float32)
    read_only = x.copy()
    read_only.flags.writeable = False
    from_wire = np.frombuffer(x.tobytes(), dtype="<f4").reshape(-1, 3)
    variants = [x, read_only, np.asfortranarray(x), from_wire]
    snaps = [PointStatistics(("u", "v", "w"), 1000.0).update(v).snapshot() for v in variants]
    for other in snaps[1:]:
        for e, f in zip(snaps[0].estimates, other.estimates, strict=True):
            assert e.value == f.value, e.name
            assert e.stderr == f.stderr or (math.isnan(e.stderr) and math.isnan(f.stderr)), e.name


# ------------------------------------------------------------ evaluation kernels and plans


def _numpy_choose_level(c0, gamma, n, base):
    """The numpy version of stats.blocking.choose_level that its kernel replaced."""
    S, _ = c0.shape
    K = int(np.flatnonzero(n >= 4)[-1]) + 1
    with np.errstate(invalid="ignore", divide="ignore"):
        r2 = n[None, :K] * (gamma[:, :K] / c0[:, :K]) ** 2
    r2 = np.where(np.isfinite(r2), r2, np.inf)
    M = np.cumsum(r2[:, ::-1], axis=1)[:, ::-1]
    ok = M < np.array([_chi2_99(K - jj) for jj in range(K)])[None, :]
    found = ok.any(axis=1) & (K >= 2)
    j = np.minimum(np.maximum(np.argmax(ok, axis=1), 1), K - 1)
    nj, nm = n[j], n[j - 1]
    found &= (nj >= 2) & (nm >= 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        vj = c0[np.arange(S), j] / (nj - 1)
        vm = c0[np.arange(S), j - 1] / (nm - 1)
    v = np.maximum(np.maximum(vj, 2.0 * vj - vm), 0.0)
    # a level above with >= 8 blocks raises v to its lower 90 % bound (chi-squared, n_k - 1)
    for k in range(1, K):
        if n[k] >= 8:
            lbf = (n[k] - 1) / sps.chi2.ppf(0.9, n[k] - 1)
            with np.errstate(invalid="ignore"):
                vlb = lbf * c0[:, k] / (n[k] - 1)
                v = np.where((k > j) & (vlb > v), vlb, v)
    level = np.where(found, j, -1).astype(np.int64)
    return (
        np.where(found, v, np.nan),
        level,
        np.where(found, nj, 0).astype(np.int64),
        np.where(level >= 0, base * 2 ** np.maximum(level, 0), 0),
        np.where(found, 0.5 * np.sqrt(5.0 / np.maximum(nj - 1, 1)), np.nan),
    )


def test_level_choice_kernel_matches_numpy():
    rng = np.random.default_rng(4)
    n = np.array([2.0**k for k in range(16, 0, -1)])
    for _ in range(20):
        c0 = rng.gamma(2.0, size=(40, n.size)) * np.linspace(1.0, 30.0, n.size)
        gamma = c0 * rng.uniform(-0.3, 0.9, size=c0.shape) / np.linspace(1.0, 9.0, n.size)
        c0[0, 3], c0[1, :] = 0.0, np.nan  # a zero and a NaN row
        c0[2, 5] = -1e-30  # rounding below zero
        got = choose_level(c0, gamma, n, 64)
        want = _numpy_choose_level(c0, gamma, n, 64)
        for g, w in zip(
            (got.variance, got.level, got.blocks, got.block_samples, got.relative_error),
            want,
            strict=True,
        ):
            np.testing.assert_array_equal(g, w)


def test_stationarity_columns_match_the_numpy_formulas():
    rng = np.random.default_rng(6)
    for n in (20, 33, 63):
        x = rng.standard_normal((n, 3)) + np.outer(np.arange(n), [0.0, 0.02, 0.1])
        se = [0.2, 0.1, math.nan]
        verdicts = assess_columns(x, se)
        for c in range(3):
            m = x[:, c]
            i = np.arange(n) - 0.5 * (n - 1)
            slope = float(i @ (m - m.mean())) / float(i @ i)
            resid = m - m.mean() - slope * i
            t = slope / math.sqrt(float(resid @ resid) / (n - 2) / float(i @ i))
            gt = m[:, None] > m[None, :]
            d = verdicts[c].details
            assert d["trend_t"] == pytest.approx(t, rel=1e-12)
            assert d["reverse_arrangements"] == int(np.count_nonzero(np.triu(gt, k=1)))
            assert reverse_arrangements(m) == d["reverse_arrangements"]
            if c < 2:
                h = n // 2
                z = (m[n - h :].mean() - m[:h].mean()) / (se[c] * math.sqrt(2.0 * n / h))
                assert d["half_z"] == pytest.approx(z, rel=1e-12)
                assert d["drift_se"] == pytest.approx(slope * n / se[c], rel=1e-12)
            assert verdicts[c] == assess(m, se[c])


@pytest.mark.parametrize("m", [1, 2, 3])
def test_target_plan_resolves_as_targets_resolve(m):
    cols = ("u", "v", "w")[:m]
    custom = Targets.from_dict(
        {
            "targets": {
                "U": {"absolute": 0.01},
                "W": {"relative": 0.02},
                "uv": {"absolute": 0.02},
                "uuu": {"relative": 0.15},
                "uuuu": {"relative": 0.2},
                "skew_u": {"relative": 0.1},
                "Tint_u": {"relative": 0.2},
                "Neff_u": {"relative": 0.3},
                "L_u": {"relative": 0.25},
                "k": {"relative": 0.05},
            }
        }
    )
    names = PointStatistics(cols, 1000.0).names
    rng = np.random.default_rng(m)
    for targets in (Targets.defaults(), custom, Targets(targets={})):
        plan = targets.plan(names)
        for trial in range(30):
            v = rng.normal(size=len(names))
            if trial % 3 == 0:
                v[rng.integers(0, len(names), 5)] = np.nan
            if trial % 5 == 0:
                v[names.index("k")] = -abs(v[names.index("k")])
            values = dict(zip(names, v.tolist(), strict=True))
            want = [targets.resolve(name, values) for name in names]
            got = plan.resolve(v.tolist())
            assert [g is None for g in got] == [w is None for w in want]
            for g, w in zip(got, want, strict=True):
                assert g is None or g == w or (math.isnan(g) and math.isnan(w))


@pytest.mark.parametrize("m", [1, 2, 3])
def test_integral_scales_kernel_matches_numpy(m):
    rng = np.random.default_rng(40 + m)
    k = 10
    for trial in range(10):
        values = rng.normal(size=k) * 3.0
        values[m : 2 * m] = rng.gamma(2.0, size=m)  # the normal stresses
        var = rng.gamma(1.0, size=k) * 1e-4
        rel = rng.uniform(0.01, 0.3, size=k)
        if trial == 0:
            values[:m] = 0.0  # zero mean speed
        if trial == 1:
            var[0] = np.nan
        T = 12.5
        out_v = np.concatenate([values, np.empty(3 * m)])
        out_se = np.empty(k + 3 * m)
        integral_scales(T, var, rel, m, out_v, out_se)
        with np.errstate(invalid="ignore", divide="ignore"):
            se = np.sqrt(var)
            sig2, var_mean = values[m : 2 * m], var[:m]
            tint = T * var_mean / (2.0 * sig2)
            neff = sig2 / var_mean
            speed = np.sqrt(np.sum(values[:m] ** 2))
            length = speed * tint
            rel_t = 2 * rel[:m]
            rel_speed = np.sqrt(np.sum((values[:m] * se[:m]) ** 2)) / speed**2
            want_se = np.concatenate(
                [se, rel_t * tint, rel_t * neff, np.sqrt(rel_t**2 + rel_speed**2) * length]
            )
        np.testing.assert_array_equal(out_v, np.concatenate([values, tint, neff, length]))
        np.testing.assert_allclose(out_se, want_se, rtol=1e-15, atol=0.0)


def test_t_quantiles_are_scipy_t_ppf():
    from scipy import stats as sps

    blocks = np.r_[0, 1, 2, 3, 64, 65, 1000, np.unique(np.geomspace(2, 1e7, 300).astype(int))]
    for p in (0.95, 0.975, 0.995):
        # Satterthwaite degrees of freedom of the lugsail variance: 2 (n - 1) / 5 (point.py)
        want = [sps.t.ppf(p, 0.4 * (b - 1)) if b >= 2 else np.nan for b in blocks]
        np.testing.assert_array_equal(_t_quantiles(p, blocks), want)
