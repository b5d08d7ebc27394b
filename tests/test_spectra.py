"""Online Welch spectra against scipy, Parseval and an analytic AR(1) spectrum."""

import numpy as np
import pytest
from eddyvigil.stats.spectra import (
    SpectrumAccumulator,
    integral_time_estimate,
    log_bin,
    segment_length,
    welch_dof,
)
from scipy import signal as sps

from tests.processes import ar1


def _feed(acc, x, rng):
    """Feed ``x`` in random block sizes (the estimate must not depend on them)."""
    i = 0
    while i < x.shape[0]:
        j = i + int(rng.integers(1, 3000))
        acc.update(x[i:j])
        i = j
    return acc


def ar1_psd(f_hz, rho, rate_hz, sigma=1.0):
    """One-sided PSD of a unit-variance AR(1): 2 sigma_e^2 dt / |1 - rho e^{-i 2 pi f dt}|^2,
    sigma_e^2 = sigma^2 (1 - rho^2) (Priestley 1981, Spectral Analysis and Time Series, §4.12;
    from memory)."""
    dt = 1.0 / rate_hz
    return (
        2.0 * sigma**2 * (1 - rho**2) * dt / np.abs(1 - rho * np.exp(-2j * np.pi * f_hz * dt)) ** 2
    )


def test_equals_scipy_welch_whatever_the_blocks():
    # reference: scipy.signal.welch (Hann, 50 % overlap, constant detrend, density, one-sided)
    rng = np.random.default_rng(1)
    x = ar1(rng, 40_000, 3, 0.95) * [1.0, 0.5, 0.3] + [10.0, 0.5, 0.0]
    acc = _feed(SpectrumAccumulator(("u", "v", "w"), 5000.0, segment=1024), x, rng)
    snap = acc.snapshot()
    f, p = sps.welch(x, fs=5000.0, window="hann", nperseg=1024, noverlap=512, axis=0)
    np.testing.assert_allclose(snap.f_hz, f, rtol=0, atol=1e-12)
    np.testing.assert_allclose(snap.psd, p, rtol=1e-11, atol=0)
    assert snap.segments == 1 + (40_000 - 1024) // 512


def test_odd_segment_matches_scipy_too():
    rng = np.random.default_rng(2)
    x = rng.normal(size=(9_001, 1))
    snap = _feed(SpectrumAccumulator(("u",), 100.0, segment=301), x, rng).snapshot()
    f, p = sps.welch(x[:, 0], fs=100.0, window="hann", nperseg=301, noverlap=150)
    np.testing.assert_allclose(snap.psd[:, 0], p, rtol=1e-11)


def test_parseval_identity_and_variance():
    # Parseval (exact): integral of S df = mean over segments of sum (h x')^2 / sum h^2
    rng = np.random.default_rng(3)
    x = rng.normal(size=(65_536, 2)) * [2.0, 0.5]
    acc = SpectrumAccumulator(("u", "v"), 1000.0, segment=512).update(x)
    snap = acc.snapshot()
    h = acc.window
    segs = np.lib.stride_tricks.sliding_window_view(x, 512, axis=0)[::256]
    segs = segs - segs.mean(axis=2, keepdims=True)
    direct = np.mean(np.sum((segs * h) ** 2, axis=2), axis=0) / np.sum(h**2)
    np.testing.assert_allclose(snap.variance(), direct, rtol=1e-12)
    # and, statistically, the variance of white noise within 3 %
    np.testing.assert_allclose(snap.variance(), [4.0, 0.25], rtol=0.03)


def test_welch_dof_hann_half_overlap():
    # Percival & Walden 1993 eq. 292b; Hann at 50 %: rho_1 = 1/6 so nu -> 2K/(1 + 2/36) = 1.8947 K
    h = sps.get_window("hann", 1024)
    assert welch_dof(h, 512, 1) == pytest.approx(2.0)
    assert welch_dof(h, 512, 10_000) / 10_000 == pytest.approx(2 / (1 + 2 / 36), rel=1e-3)


def test_segment_length_from_integral_time():
    # resolution rate/N ~ 1/(20 T_int), nearest power of two
    assert segment_length(20_000.0, 0.01) == 4096
    assert segment_length(20_000.0, 0.046) == 16384  # 18400 -> 16384
    assert segment_length(1000.0, 0.001) == 256  # lower clamp
    rng = np.random.default_rng(4)
    rho = np.exp(-1 / 50)  # T_int = 50 samples (analytic: (1+rho)/(2(1-rho)) ~ 50)
    x = ar1(rng, 40_000, 1, rho)
    assert integral_time_estimate(x, 1.0) == pytest.approx(50.0, rel=0.3)



@pytest.mark.parametrize("tint", [12.0, 50.0, 300.0])
def test_probe_on_row_means_keeps_the_integral_time(monkeypatch, tint):
    # A 40 000-row probe is averaged in groups of 4 rows before its ACF: the long-run variance
    # of the group means is that of the rows over 4 (common practice), so the estimate must
    # agree with the one on every row and with the analytic AR(1) value (1 + rho) / (2 (1 - rho))
    # (REFERENCES §1), and pick the same segment length.
    import eddyvigil.stats.spectra as spectra

    rng = np.random.default_rng(int(tint))
    rho = np.exp(-1 / tint)
    truth = (1 + rho) / (2 * (1 - rho))
    ratios, errors = [], []
    for _ in range(10):
        x = ar1(rng, 40_000, 3, rho).astype(np.float32)
        decimated = integral_time_estimate(x, 1.0)
        monkeypatch.setattr(spectra, "PROBE_ROWS", 10**9)
        every_row = integral_time_estimate(x, 1.0)
        monkeypatch.setattr(spectra, "PROBE_ROWS", 8192)
        assert segment_length(1.0, decimated) == segment_length(1.0, every_row)
        ratios.append(decimated / every_row)
        errors.append(decimated / truth - 1)
    assert abs(np.mean(ratios) - 1) < 0.01 and max(abs(r - 1) for r in ratios) < 0.1
    if tint <= 50:  # (at 300 rows, 133 T_int per record, the first zero of the ACF wanders far)
        # the slowest of 3 columns: high by a few %, low by never much
        assert -0.1 < np.mean(errors) < 0.25, errors

def test_segment_chosen_from_probe_samples():
    rng = np.random.default_rng(5)
    rho = np.exp(-1 / 50)  # T_int ~ 50 samples at 1 kHz = 0.05 s -> N >= 1000 -> 1024
    x = ar1(rng, 20_000, 1, rho)
    acc = SpectrumAccumulator(("u",), 1000.0, probe=8000)
    acc.update(x[:5000])
    assert acc.segment is None and acc.snapshot() is None
    acc.update(x[5000:])
    assert acc.segment == 1024
    f, p = sps.welch(x[:, 0], fs=1000.0, nperseg=1024)
    np.testing.assert_allclose(acc.snapshot().psd[:, 0], p, rtol=1e-11)


def test_merge_pools_segments_of_independent_records():
    rng = np.random.default_rng(6)
    a, b = rng.normal(size=(10_000, 1)), rng.normal(size=(7_000, 1))
    ma = SpectrumAccumulator(("u",), 10.0, segment=256).update(a)
    mb = SpectrumAccumulator(("u",), 10.0, segment=256).update(b)
    both = ma.merge(mb)
    _, pa = sps.welch(a[:, 0], fs=10.0, nperseg=256)
    _, pb = sps.welch(b[:, 0], fs=10.0, nperseg=256)
    ka, kb = ma.segments, mb.segments
    np.testing.assert_allclose(
        both.snapshot().psd[:, 0], (ka * pa + kb * pb) / (ka + kb), rtol=1e-12
    )
    assert ma.segments == ka and both.segments == ka + kb  # inputs untouched
    with pytest.raises(ValueError):
        ma.merge(SpectrumAccumulator(("u",), 10.0, segment=512))


def test_log_bins_keep_parseval_and_bound_count():
    rng = np.random.default_rng(7)
    snap = (
        SpectrumAccumulator(("u",), 1000.0, segment=8192)
        .update(rng.normal(size=(100_000, 1)))
        .snapshot()
    )
    lb = snap.log_binned(200)
    assert len(lb.f_hz) <= 200
    assert np.all(np.diff(lb.f_hz) > 0)
    total = (
        np.sum(lb.psd[:, 0] * lb.count) + snap.psd[0, 0] + snap.psd[-1, 0]
    ) * snap.df_hz  # + DC, Nyquist
    assert total == pytest.approx(snap.variance()[0], rel=1e-12)
    assert np.all(lb.dof >= snap.dof[1] - 1e-9)


@pytest.mark.slow
def test_chi2_intervals_cover_ar1_spectrum():
    # truth: analytic AR(1) spectrum; nominal 95 % per bin, fine and log-binned bins
    rho, rate, n = 0.8, 1000.0, 64 * 128
    fine_hits, fine_total, log_hits, log_total = 0, 0, 0, 0
    for seed in range(300):
        rng = np.random.default_rng(100 + seed)
        snap = SpectrumAccumulator(("u",), rate, segment=128).update(ar1(rng, n, 1, rho)).snapshot()
        lo, hi = snap.interval(0.95)
        f = snap.f_hz[2:-1]  # DC removed by the detrend; bin 1 leaks from it
        truth = ar1_psd(f, rho, rate)
        fine_hits += np.sum((lo[2:-1, 0] <= truth) & (truth <= hi[2:-1, 0]))
        fine_total += f.size
        lb = snap.log_binned(30)
        from eddyvigil.stats.spectra import chi2_interval

        llo, lhi = chi2_interval(lb.psd[:, 0], lb.dof)
        # truth of a band: the mean of the analytic spectrum over its fine bins
        t = np.array(
            [
                ar1_psd(snap.f_hz[s : s + c], rho, rate).mean()
                for s, c in zip(lb.first, lb.count, strict=True)
            ]
        )
        keep = lb.first >= 2
        log_hits += np.sum(((llo <= t) & (t <= lhi))[keep])
        log_total += int(keep.sum())
    assert 0.93 <= fine_hits / fine_total <= 0.97, fine_hits / fine_total
    assert 0.92 <= log_hits / log_total <= 0.98, log_hits / log_total


def test_log_bin_independent_when_no_window():
    f = np.arange(11.0)
    lb = log_bin(f, np.ones(11), np.full(11, 2.0), None, max_bins=3)
    assert lb.count.sum() == 10
    np.testing.assert_allclose(lb.dof, 2.0 * lb.count)


def test_stride_uses_every_other_segment_like_scipy_without_overlap():
    # stride 2 at 50 % overlap = adjacent, non-overlapping segments: scipy.signal.welch with
    # noverlap=0
    rng = np.random.default_rng(8)
    x = ar1(rng, 30_000, 2, 0.9)
    acc = _feed(SpectrumAccumulator(("u", "v"), 100.0, segment=1000, stride=2), x, rng)
    _, p = sps.welch(x, fs=100.0, nperseg=1000, noverlap=0, axis=0)
    np.testing.assert_allclose(acc.snapshot().psd, p, rtol=1e-11)
    assert acc.segments == 30
    # no overlap between the used segments: nu = 2K (Percival & Walden 1993, eq. 292b)
    assert acc.snapshot().dof[5] == pytest.approx(60.0)
    # stride 3: every third segment, gaps between them, still exact whatever the blocks
    segs = np.lib.stride_tricks.sliding_window_view(x, 1000, axis=0)[::1500]
    ref = np.mean([sps.welch(s.T, fs=100.0, nperseg=1000, axis=0)[1] for s in segs], axis=0)
    for _ in range(8):  # block sequences that end inside a skipped stretch were once mishandled
        acc3 = _feed(SpectrumAccumulator(("u", "v"), 100.0, segment=1000, stride=3), x, rng)
        np.testing.assert_allclose(acc3.snapshot().psd, ref, rtol=1e-11)


def test_float32_blocks_take_the_float32_transform_and_match_scipy():
    # scipy.signal.welch (Hann, 50 % overlap, mean detrend) of the same float32 samples in
    # float64 is the reference; the float32 FFT's rounding is ~1e-7 of a bin's amplitude
    rng = np.random.default_rng(21)
    x = (
        rng.standard_normal((60_000, 3)).cumsum(axis=0) * 0.01 + rng.standard_normal((60_000, 3))
    ).astype(np.float32)
    acc = SpectrumAccumulator(("u", "v", "w"), 1000.0, segment=512)
    for i in range(0, x.shape[0], 7001):
        acc.update(x[i : i + 7001])
    assert acc._buf.dtype == np.float32  # the cheaper path was taken
    f, ref = sps.welch(x.astype(np.float64), fs=1000.0, nperseg=512, axis=0)
    snap = acc.snapshot()
    np.testing.assert_allclose(snap.f_hz, f)
    np.testing.assert_allclose(snap.psd, ref, rtol=2e-5, atol=1e-12 * ref.max())
    # a float64 block later switches the buffer to float64 for good
    acc.update(x[:100].astype(np.float64))
    assert acc._buf.dtype == np.float64


@pytest.mark.parametrize("segment", [1024, 301])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_same_bits_whatever_the_blocks_and_the_snapshots(dtype, segment):
    # live = replay (common practice: block-splitting invariance): segments wait for a batch of
    # FFT_BATCH, a snapshot flushes them, and neither the blocks nor when snapshots are taken
    # (the dashboard's wall clock) may change a bit of the sums
    rng = np.random.default_rng(23)
    x = (ar1(rng, 50_000, 3, 0.9) + [5.0, 0.0, 0.0]).astype(dtype)
    whole = SpectrumAccumulator(("u", "v", "w"), 1000.0, segment=segment).update(x).snapshot()
    acc = SpectrumAccumulator(("u", "v", "w"), 1000.0, segment=segment)
    i = 0
    while i < x.shape[0]:
        j = i + int(rng.integers(1, 4000))
        acc.update(x[i:j])
        if rng.random() < 0.3:
            acc.snapshot()
        i = j
    snap = acc.snapshot()
    hop = segment - segment // 2
    assert snap.segments == whole.segments == 1 + (50_000 - segment) // hop
    np.testing.assert_array_equal(snap.psd, whole.psd)


def test_float32_blocks_with_a_large_mean_keep_float32_precision_in_every_bin():
    # scipy.signal.welch in float64 of the same float32 samples is the reference. The segment
    # mean is removed before the float32 transform, so a mean of 10 sigma costs no accuracy in
    # the weakest bins (5.5e5 below the strongest here): ~1e-6, where removing it after the
    # transform left 3e-5
    rng = np.random.default_rng(22)
    x = (ar1(rng, 60_000, 3, 0.99) * [1.0, 0.5, 0.3] + [10.0, 1.0, 0.0]).astype(np.float32)
    acc = SpectrumAccumulator(("u", "v", "w"), 1000.0, segment=1024)
    for i in range(0, x.shape[0], 7001):
        acc.update(x[i : i + 7001])
    _, ref = sps.welch(x.astype(np.float64), fs=1000.0, nperseg=1024, axis=0)
    np.testing.assert_allclose(acc.snapshot().psd, ref, rtol=5e-6, atol=0)


def test_a_float64_block_after_float32_ones_gives_the_same_bits_with_or_without_snapshots():
    # live = replay (common practice) across the switch to float64: segments complete before it
    # are transformed in float32 whether or not a snapshot flushed them first
    rng = np.random.default_rng(24)
    x = ar1(rng, 30_000, 2, 0.9) + [3.0, 0.0]
    parts = [x[:9_700].astype(np.float32), x[9_700:].astype(np.float64)]
    plain = SpectrumAccumulator(("u", "v"), 1000.0, segment=1024)
    watched = SpectrumAccumulator(("u", "v"), 1000.0, segment=1024)
    for part in parts:
        for i in range(0, part.shape[0], 1500):
            plain.update(part[i : i + 1500])
            watched.update(part[i : i + 1500])
            watched.snapshot()
    np.testing.assert_array_equal(watched.snapshot().psd, plain.snapshot().psd)
    # and the result is Welch's (scipy.signal.welch of the float64 samples) within float32
    # rounding for the segments that were float32
    _, ref = sps.welch(x, fs=1000.0, nperseg=1024, axis=0)
    np.testing.assert_allclose(plain.snapshot().psd, ref, rtol=1e-5)


def test_merge_and_snapshots_leave_the_inputs_later_bits_unchanged():
    # live = replay (common practice): two segments share one complex transform, so adding a
    # waiting odd segment to the sums early would shift every later pair; a snapshot or a merge
    # must not do that to the accumulators they read
    rng = np.random.default_rng(25)
    x = ar1(rng, 20_000, 2, 0.9).astype(np.float32)
    plain = SpectrumAccumulator(("u", "v"), 1000.0, segment=512).update(x[:4_800])
    read = SpectrumAccumulator(("u", "v"), 1000.0, segment=512).update(x[:4_800])
    assert read._complete() % 2 == 1  # an odd segment waits for its pair
    read.snapshot()
    other = SpectrumAccumulator(("u", "v"), 1000.0, segment=512).update(x[4_800:8_800])
    both = read.merge(other)
    assert both.segments == read.segments + other.segments
    plain.update(x[4_800:])
    read.update(x[4_800:])
    np.testing.assert_array_equal(read.snapshot().psd, plain.snapshot().psd)
    # and the merged record is Welch's of both records pooled (scipy.signal.welch)
    _, pa = sps.welch(x[:4_800].astype(np.float64), fs=1000.0, nperseg=512, axis=0)
    _, pb = sps.welch(x[4_800:8_800].astype(np.float64), fs=1000.0, nperseg=512, axis=0)
    ka, kb = 1 + (4_800 - 512) // 256, 1 + (4_000 - 512) // 256
    np.testing.assert_allclose(both.snapshot().psd, (ka * pa + kb * pb) / (ka + kb), rtol=2e-5)


def test_worker_transforms_match_inline_and_surface_their_errors(monkeypatch):
    # With a one-worker executor the transforms run in the background: the same sums to the
    # bit as inline (scipy.signal.welch as the outside reference), and an error there is raised
    # by the next call, never lost.
    from concurrent.futures import ThreadPoolExecutor

    rng = np.random.default_rng(12)
    x = rng.normal(size=(70_000, 2)).astype(np.float32)
    with ThreadPoolExecutor(max_workers=1) as pool:
        bg = SpectrumAccumulator(("u", "v"), 100.0, segment=512, executor=pool)
        fg = SpectrumAccumulator(("u", "v"), 100.0, segment=512)
        for i in range(0, x.shape[0], 3000):
            bg.update(x[i : i + 3000])
            fg.update(x[i : i + 3000])
        assert bg.segments == fg.segments
        assert np.array_equal(bg.snapshot().psd, fg.snapshot().psd)
        _, p = sps.welch(x[:, 0].astype(np.float64), fs=100.0, nperseg=512)
        np.testing.assert_allclose(bg.snapshot().psd[:, 0], p, rtol=1e-5)

        def broken(self, flush):
            raise RuntimeError("transform failed")

        monkeypatch.setattr(SpectrumAccumulator, "_transform", broken)
        bg.update(x[:5000])  # 8 more segments: handed to the worker, which fails
        with pytest.raises(RuntimeError, match="transform failed"):
            bg.snapshot()
