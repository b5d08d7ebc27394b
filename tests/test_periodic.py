"""Periodic content: the row store, the line test and the error of a mean with a line taken out.

Checks against numpy (row means), the exponential/F distribution of periodogram ordinates of
Gaussian noise (Priestley 1981, Spectral Analysis and Time Series, from memory: the false-alarm
rate),
the variance of the mean of white noise sigma^2 / N (common practice), and the rule that a point
with no line keeps its blocking errors bit for bit.
"""

import numpy as np
import pytest
from processes import ar1

from eddyvigil.stats import PointStatistics, slow_spectrum
from eddyvigil.stats.periodic import ALPHA, RowStore, find_lines, line_mean_error
from eddyvigil.stats.pointstate import from_state, to_state


def test_rows_are_numpys_row_means_whatever_the_split():
    # numpy reshape-and-mean (common practice); 40000 samples: rows of 16 after three halvings
    x = np.random.default_rng(1).normal(5.0, 2.0, size=(40_000, 3))
    a = RowStore(3).update(x)
    b = RowStore(3)
    for part in np.array_split(x, 7):
        b.update(part)
    assert (a.full, a.row_len, a.carry_n, a.seen) == (b.full, b.row_len, b.carry_n, b.seen)
    np.testing.assert_allclose(a.rows + a.ref, b.rows + b.ref, rtol=0, atol=1e-12)
    assert a.row_len == 16 and a.full == 2500 and a.carry_n == 0
    want = x.reshape(2500, 16, 3).mean(axis=1)
    np.testing.assert_allclose(a.rows[: a.full] + a.ref, want, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(a.times[: a.full], np.arange(2500) * 16 + 7.5)


def test_any_split_of_the_stream_gives_the_same_state():
    # the searches happen at fixed sample counts (next_search), rows are aligned on the stream
    rng = np.random.default_rng(4)
    t = np.arange(50_000)[:, None]
    x = rng.normal(size=(50_000, 2)) + 0.4 * np.sin(2 * np.pi * t / 900.0)
    a = RowStore(2, ref=[0.0, 0.0]).update(x)
    b = RowStore(2, ref=[0.0, 0.0])
    for part in np.array_split(x, 13):
        b.update(part)
    assert a == b
    assert not np.isnan(a.lines[:, 0]).any()  # the line was found in both components


def test_merge_of_a_record_cut_on_a_row_boundary_equals_one_pass():
    x = np.random.default_rng(2).normal(size=(30_000, 2))
    whole = RowStore(2).update(x)
    cut = 16_384  # a multiple of the final row length (8)
    left, right = RowStore(2).update(x[:cut]), RowStore(2).update(x[cut:])
    joined = left.merge(right, independent=False)
    assert joined.clock and joined.row_len == whole.row_len and joined.full == whole.full
    np.testing.assert_allclose(joined.rows[: joined.full] + joined.ref,
                               whole.rows[: whole.full] + whole.ref, atol=1e-12)
    np.testing.assert_allclose(joined.times[: joined.full], whole.times[: whole.full])
    # independent records share no clock: no line is ever fitted on their union
    assert not left.merge(right).clock
    assert left.merge(right).mean_errors(1e-3, [1.0, 1.0], 4.0) == {}


def test_false_lines_in_noise_at_most_alpha():
    # white and AR(1) noise: Priestley 1981, the line test's level is ALPHA (Bonferroni:
    # at most); 300 records each, binomial sd of a 1 % rate: 0.6 %
    for rho in (0.0, np.exp(-1 / 20)):
        hits = sum(
            bool(find_lines(ar1(np.random.default_rng(r), 2048, 1, rho)[:, 0], np.arange(2048.0)))
            for r in range(300)
        )
        assert hits / 300 <= ALPHA + 0.02


def test_a_line_between_bins_is_found_and_its_frequency_refined():
    # Cramer-Rao bound of the frequency of A sin(w n + phi) in white noise of variance s^2:
    # var(w) >= 24 s^2 / (A^2 N (N^2 - 1)) (Rife & Boorstyn 1974, IEEE Trans. Inf. Theory
    # 20:591; from memory); the least-squares estimate attains it at this SNR. RMS over 40
    # records within 1.5 x the bound.
    N, A = 4096, 0.3
    f = 137.37 / N  # cycles per row, between natural bins
    err = []
    for r in range(40):
        rng = np.random.default_rng(300 + r)
        y = rng.normal(size=N) + A * np.sin(2 * np.pi * f * np.arange(N) + rng.uniform(0, 6.28))
        (got,) = find_lines(y, np.arange(float(N)))
        err.append(got - f)
    bound = np.sqrt(24.0 / (A**2 * N * (N**2 - 1.0))) / (2 * np.pi)
    assert np.sqrt(np.mean(np.square(err))) < 1.5 * bound


def test_mean_error_of_white_noise_with_a_line_is_sigma_over_sqrt_n():
    # sigma^2 / N (common practice) for the remainder; averaged over 200 records the estimated
    # variance is within 5 % of it (its own scatter: 5/(n - 1) per record at ~64 blocks), less
    # the slow-content guard's upper-level bound (blocking.choose_level: an upper level's lower
    # 90 % bound where higher), which by design leans a few per cent high: at most +10 %
    N = 4096
    tau = np.arange(float(N))
    ratio = []
    for r in range(200):
        rng = np.random.default_rng(100 + r)
        y = rng.normal(size=N) + 2.0 * np.sin(2 * np.pi * 0.031 * tau + rng.uniform(0, 6.28))
        err = line_mean_error(y, tau, [0.031], row_len=1)
        ratio.append((err.variance - err.partial_mean**2) / err.inflation * N)
    assert -0.05 < np.mean(ratio) - 1.0 < 0.10


def _ou_with_line(seed, n=65_536, tint=50.0, period=1000.0, amp=0.5):
    rng = np.random.default_rng(seed)
    z = ar1(rng, n, 2, np.exp(-1 / tint))
    t = np.arange(n)[:, None]
    return z + amp * np.sin(2 * np.pi * t / period + rng.uniform(0, 2 * np.pi, 2))


def _snapshots(x, blocks=8192):
    ps = PointStatistics(("u", "v"), rate_hz=1000.0)
    for k in range(0, x.shape[0], blocks):
        ps.update(x[k : k + blocks])
    with_rows = ps.snapshot()
    ps.periodic, ps._cache = None, None
    return with_rows, ps.snapshot()


def test_no_line_leaves_every_error_exactly_as_blocking_gives_it(monkeypatch):
    # the means' low-band floor also reads the rows (stats.slow_spectrum): off here, so
    # that the comparison is of the line correction alone
    monkeypatch.setattr(slow_spectrum, "LOW_BAND_TERMS", 0)
    x = ar1(np.random.default_rng(7), 65_536, 2, np.exp(-1 / 50))
    a, b = _snapshots(x)
    assert a.statistics_json() == b.statistics_json()  # every estimate, bit for bit
    assert [e.stderr for e in a.estimates] == [e.stderr for e in b.estimates] or np.array_equal(
        [e.stderr for e in a.estimates], [e.stderr for e in b.estimates], equal_nan=True
    )
    assert all("error_method" not in e for e in a.statistics_json())


def test_a_line_corrects_the_means_and_second_moments_only_and_says_so():
    a, b = _snapshots(_ou_with_line(11, amp=1.0))
    # the means carry the line at 1 Hz (period 1000 samples at 1 kHz), the second moments its
    # double (sin^2 = (1 - cos 2 w t) / 2, from memory)
    for name, line_hz in (("U", 1.0), ("V", 1.0), ("uu", 2.0), ("vv", 2.0), ("uv", 2.0)):
        e, plain = a.estimate(name), b.estimate(name)
        assert e.value == plain.value  # the statistic itself never changes
        assert e.error_method is not None
        hz = float(e.error_method.split(" Hz")[0].split()[-1])
        assert abs(hz - line_hz) < 0.01 * line_hz
        assert e.stderr != plain.stderr and e.blocks > 0
        assert e.to_json()["error_method"] == e.error_method
    for e in a.estimates:
        if e.name not in ("U", "V", "uu", "vv", "uv", "k"):
            assert e.to_json() == b.estimate(e.name).to_json()


def test_second_order_rows_are_numpys_row_means_of_the_products_whatever_the_split():
    # numpy reshape-and-mean of (x - ref)_a (x - ref)_b, a <= b (common practice)
    x = np.random.default_rng(12).normal(5.0, 2.0, size=(40_000, 3))
    ref = x[:100].mean(axis=0)
    a = RowStore(3, ref=ref).update(x)
    b = RowStore(3, ref=ref)
    for part in np.array_split(x, 7):
        b.update(part)
    assert a == b  # one sequential sum per row whatever the split: bit for bit
    d = x - a.ref
    i, j = np.triu_indices(3)
    want = (d[:, i] * d[:, j]).reshape(2500, 16, 6).mean(axis=1)
    np.testing.assert_allclose(a.rows2[: a.full], want, rtol=1e-12, atol=1e-12)


def test_a_second_moments_rows_are_its_influence_series_row_means():
    # the influence series of uv is (u - U)(v - V) - uv (delta method, common practice); its
    # row means from the store's rows with the point's gradient equal numpy's, given U, V
    x = _ou_with_line(13, n=32_768)
    ps = PointStatistics(("u", "v"), rate_hz=1000.0).update(x)
    st = ps.periodic
    _, grad = ps.table.values_and_gradient(ps.moments.raw_about(st.ref), st.ref)
    r = ps.table.names.index("uv")
    y = st.rows[: st.full] @ grad[r, :2] + st.rows2[: st.full] @ grad[r, 2:5]
    mu = x.mean(axis=0)
    infl = (x[:, 0] - mu[0]) * (x[:, 1] - mu[1])
    want = infl.reshape(st.full, st.row_len).mean(axis=1)
    np.testing.assert_allclose(y - y.mean(), want - want.mean(), rtol=0, atol=1e-9)


def test_merge_of_records_with_different_references_keeps_the_second_order_rows():
    # the rows about the left part's reference (the products re-centred exactly: the binomial
    # expansion, common practice) equal one pass's on the same reference
    x = np.random.default_rng(14).normal(3.0, 1.0, size=(30_000, 2))
    whole = RowStore(2, ref=x[:4096].mean(axis=0)).update(x)
    cut = 16_384
    left, right = RowStore(2, ref=x[:4096].mean(axis=0)).update(x[:cut]), RowStore(2)
    right.update(x[cut:])
    assert not np.array_equal(left.ref, right.ref)
    joined = left.merge(right, independent=False)
    assert joined.full == whole.full and joined.carry_n == whole.carry_n
    np.testing.assert_allclose(joined.rows2[: joined.full], whole.rows2[: whole.full],
                               rtol=0, atol=1e-12)
    np.testing.assert_allclose(joined.carry2, whole.carry2, rtol=0, atol=1e-9)
    # the same split merged twice: the same state, bit for bit
    assert joined == left.merge(right, independent=False)


def test_state_round_trip_keeps_the_rows():
    ps = PointStatistics(("u", "v"), rate_hz=1000.0).update(_ou_with_line(5, n=20_000))
    back = from_state(*to_state(ps))
    assert back == ps and back.periodic == ps.periodic
    assert back.snapshot().statistics_json() == ps.snapshot().statistics_json()


def test_version_1_state_loads_without_a_clock():
    ps = PointStatistics(("u", "v"), rate_hz=1000.0).update(_ou_with_line(6, n=20_000))
    meta, arrays = to_state(ps)
    meta["version"] = 1
    del meta["periodic"]
    arrays = {k: v for k, v in arrays.items() if not k.startswith("periodic.")}
    back = from_state(meta, arrays)
    assert not back.periodic.clock


def test_state_saved_without_second_order_rows_corrects_the_means_only():
    x = _ou_with_line(15, amp=1.0)
    ps = PointStatistics(("u", "v"), rate_hz=1000.0).update(x)
    meta, arrays = to_state(ps)
    assert "periodic.rows2" in arrays and meta["periodic"]["orders"] == 2
    del meta["periodic"]["orders"]
    arrays = {k: v for k, v in arrays.items() if k not in ("periodic.rows2", "periodic.carry2")}
    back = from_state(meta, arrays)
    assert back.periodic.orders == 1
    new, old = ps.snapshot(), back.snapshot()
    assert old.estimate("U").to_json() == new.estimate("U").to_json()
    assert old.estimate("uu").error_method is None and new.estimate("uu").error_method


def test_a_constant_record_has_no_line():
    # nothing varies: no power anywhere, so no line and no correction (no 0/0 either: numpy
    # warnings are errors in the tests)
    st = RowStore(2).update(np.full((20_000, 2), 3.0))
    assert np.isnan(st.lines).all() and st.mean_errors(1e-3, [1.0, 1.0], 4.0) == {}


@pytest.mark.parametrize("n", [0, 1, 63])
def test_short_records_have_no_correction(n):
    ps = PointStatistics(("u",), rate_hz=1000.0)
    if n:
        ps.update(np.random.default_rng(n).normal(size=(n, 1)))
    assert ps.periodic.mean_errors(1e-3, [1.0], 4.0) == {}
