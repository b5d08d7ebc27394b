"""Online Welch spectra: Hann-windowed, 50 %-overlapped segments, one-sided PSD in (m/s)^2/Hz.

Welch (1967, IEEE Trans. Audio Electroacoust. 15:70) averages the periodograms of windowed,
overlapping segments. Here the average is kept as a *sum* of periodograms and a count, so a
point's spectrum is updated block by block and two records merge exactly (sums add). Each
segment is detrended by its own mean (as ``scipy.signal.welch``'s default) and windowed with a
periodic Hann window in one numba pass (``spectral_kernels.window_pairs``); complete segments
go through ``scipy.fft.fft`` two per complex transform (real and imaginary parts), in batches of
:data:`FFT_BATCH` segments per column (a snapshot adds the rest to a copy of the sums): no
per-sample Python.

Uncertainty: the Welch average of ``K`` segments at 50 % overlap is ~ ``S chi2_nu / nu`` with
the equivalent degrees of freedom (Percival & Walden 1993, *Spectral Analysis for Physical
Applications*, CUP, eq. 292b)

    nu = 2 K / (1 + 2 sum_{m=1}^{K-1} (1 - m/K) rho_m^2),
    rho_m = sum_t h_t h_{t+m D} / sum_t h_t^2,

(only ``rho_1`` is non-zero for Hann at 50 %: 1/6, so ``nu ~ 1.89 K``); half that at 0 Hz and at
Nyquist. Averaging ``M`` adjacent bins (log-binning) multiplies ``nu`` by
``M / (1 + 2 sum_j (1 - j/M) r_j)``, ``r_j`` the squared correlation of periodogram bins ``j``
apart, ``|sum h_t^2 e^{-2 pi i j t/N}|^2 / (sum h_t^2)^2`` (Percival & Walden 1993, §6.6; 4/9
and 1/36 for Hann).

The segment length is chosen so the resolution is well below ``1/T_int``:
``N ~ RESOLUTION_FACTOR * T_int * rate`` (20), the nearest power of two (:func:`segment_length`).
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass

import numpy as np
import scipy.fft
from eddyvigil.stats.segment_groups import (
    SEGMENTS_PER_GROUP,
    GroupStore,
    SegmentGroups,
    band_layout,
)
from eddyvigil.stats.spectral_kernels import (
    accumulate_pair_groups,
    accumulate_pairs,
    window_pairs,
)
from scipy import signal as sps
from scipy import stats as sst

__all__ = [
    "RESOLUTION_FACTOR",
    "LogSpectrum",
    "SpectrumAccumulator",
    "SpectrumSnapshot",
    "chi2_interval",
    "integral_time_estimate",
    "log_bin",
    "segment_length",
    "welch_dof",
]

#: segment length >= this many integral times, so the bin width is <= 1/(RESOLUTION_FACTOR T_int);
#: more would sharpen the lowest bins (L_u from S(0)) but leave too few segments for the inertial
#: fit
RESOLUTION_FACTOR = 20.0
MIN_SEGMENT = 256
MAX_SEGMENT = 1 << 16
#: segments transformed per column in one scipy.fft call (a multiple of it), two per complex
#: transform: pocketfft runs complex64 transforms 4 at a time in SIMD lanes, so 8 segments
#: per column (4 packed pairs; 12 pairs for 3 columns) cost ~10 us per 8192-point float32
#: segment, where real transforms in batches of 4 cost ~12.5 us and packed pairs in batches of
#: 4 segments ~14 us (float64: ~19 against ~24.5 us; scipy 1.17, this project's CI machine,
#: benchmarks/bench_spectra.py); the others wait in the buffer for the next block
FFT_BATCH = 8


def segment_length(rate_hz: float, tint_s: float | None) -> int:
    """Power-of-two segment length for a rate and an integral time scale (None: 1 s of data).

    >>> segment_length(20000.0, 0.01)   # 20 * 0.01 s * 20 kHz = 4000 -> 4096 (nearest power of two)
    4096
    """
    if tint_s is None or not math.isfinite(tint_s) or tint_s <= 0:
        want = rate_hz
    else:
        want = RESOLUTION_FACTOR * tint_s * rate_hz
    n = 1 << max(0, round(math.log2(max(want, 1.0))))  # nearest power of two (factor 14-28)
    return int(min(max(n, MIN_SEGMENT), MAX_SEGMENT))


#: the probe's integral time comes from means of consecutive rows, at most this many of them
PROBE_ROWS = 8192


def integral_time_estimate(x: np.ndarray, rate_hz: float) -> float:
    """Integral time scale (s) of the slowest column: the ACF integrated to its first zero.

    Used only to pick the segment length, so a rough value is enough: float32 samples take the
    float32 transform (about 20 % cheaper; its rounding moves the estimate by ~1e-8 relative).
    More than 2 :data:`PROBE_ROWS` rows are first averaged in groups of ``D`` consecutive rows
    (a transform ``D`` times shorter). The long-run variance of the group means is that of the
    rows over ``D`` (common practice), so ``T = D (c_0 / 2 + sum_{k >= 1} c_k) / sigma^2`` with
    ``c_k`` the means' autocovariance and ``sigma^2`` the rows' own variance. On AR(1) records
    of 40 000 rows x 3, T_int 3-1000 rows, its mean ratio to the estimate on every row was
    0.9997-1.005 (sd <= 2.3 %, at most 10 % at T_int 9) with the same segment length in 160 of
    160 records (tests/test_spectra.py checks T_int 12, 50, 300).
    """
    x = np.asarray(x)
    if x.ndim == 1:
        x = x[:, None]
    n = x.shape[0]
    if n < 16:
        return float("nan")
    ftype = np.float32 if x.dtype == np.float32 else np.float64
    d = max(1, n // PROBE_ROWS)
    centred = x - x.mean(axis=0, dtype=np.float64)
    if d > 1:
        sigma2 = np.mean(centred**2, axis=0)
        n //= d
        centred = centred[: n * d].reshape(n, d, -1).mean(axis=1)
    # each column's transform on contiguous rows, the mean removed in float64
    y = np.ascontiguousarray(centred.T, dtype=ftype)
    nfft = scipy.fft.next_fast_len(2 * n - 1, real=True)
    spec = scipy.fft.rfft(y, nfft, axis=1, overwrite_x=True)
    acf = scipy.fft.irfft(spec.real**2 + spec.imag**2, nfft, axis=1, overwrite_x=True)[:, :n]
    out = 0.0
    for j in range(acf.shape[0]):
        if acf[j, 0] <= 0:
            continue
        r = acf[j] / acf[j, 0]
        neg = np.flatnonzero(r <= 0)
        stop = int(neg[0]) if neg.size else n
        area = float(r[:stop].sum(dtype=np.float64)) - 0.5
        if d > 1:  # on the rows' variance, in rows
            area *= d * float(acf[j, 0]) / n / float(sigma2[j])
        out = max(out, area / rate_hz)
    return out if out > 0 else float("nan")


def welch_dof(window: np.ndarray, hop: int, segments: int) -> float:
    """Equivalent chi^2 degrees of freedom of a Welch average (Percival & Walden 1993, eq. 292b)."""
    if segments <= 0:
        return 0.0
    h = np.asarray(window, dtype=np.float64)
    n = h.size
    denom = float(np.dot(h, h))
    acc = 0.0
    m = 1
    while m < segments and m * hop < n:
        rho = float(np.dot(h[: n - m * hop], h[m * hop :])) / denom
        acc += (1.0 - m / segments) * rho * rho
        m += 1
    return 2.0 * segments / (1.0 + 2.0 * acc)


def _bin_correlations(window: np.ndarray, reach: int = 4) -> np.ndarray:
    """Squared correlation of periodogram ordinates j = 1..reach bins apart (smooth spectrum):
    ``|sum_t h_t^2 e^{-2 pi i j t/N}|^2 / (sum h_t^2)^2`` (4/9, 1/36, 0, 0 for Hann)."""
    h = np.asarray(window, dtype=np.float64)
    size = h.size
    total = float((h**2).sum())
    # the few coefficients wanted, by a direct sum over a strided sample of the phases: h^2 of a
    # periodic Hann window is a trigonometric polynomial of degree 2, so 16 points per period are
    # exact (only the sampled points are squared and given a phase)
    step = max(1, size // 64) if size % max(1, size // 64) == 0 else 1
    hs = h[::step] ** 2
    ts = np.arange(0, size, step) * (2.0 * np.pi / size)
    scale = size / hs.size
    out = np.empty(reach)
    for j in range(1, reach + 1):
        c = scale * float(np.dot(hs, np.cos(j * ts)))
        s_ = scale * float(np.dot(hs, np.sin(j * ts)))
        out[j - 1] = (c * c + s_ * s_) / total**2
    return out


def chi2_interval(psd, dof, confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Interval ``[nu S / chi2_{nu,1-a/2}, nu S / chi2_{nu,a/2}]`` for the true spectrum per bin.

    Bendat & Piersol 2010, *Random Data*, 4th ed., §8.5.4 (from memory): a spectral estimate with
    ``nu`` degrees of freedom is distributed as ``S chi2_nu / nu``.
    """
    psd = np.asarray(psd, dtype=np.float64)
    dof = np.asarray(dof, dtype=np.float64)
    a = 1.0 - confidence
    with np.errstate(invalid="ignore", divide="ignore"):
        low = dof * psd / sst.chi2.ppf(1.0 - a / 2.0, dof)
        high = dof * psd / sst.chi2.ppf(a / 2.0, dof)
    bad = ~(dof > 0)
    low[bad] = np.nan
    high[bad] = np.nan
    return low, high


def _fold_pairs(sums: np.ndarray) -> np.ndarray:
    """``(S_f + S_{n-f}) / 2`` for f = 0 .. n // 2 of the sums (m, n) of packed pairs
    (``spectral_kernels.accumulate_pairs``): the sums of the segments' ``|X_f|^2``, (m, n//2+1)."""
    n = sums.shape[1]
    nf = n // 2 + 1
    out = np.empty((sums.shape[0], nf))
    out[:, 0] = sums[:, 0]
    out[:, 1:] = 0.5 * (sums[:, 1:nf] + sums[:, n - 1 : n - nf : -1])
    return out


@dataclass(frozen=True)
class LogSpectrum:
    """A spectrum averaged over logarithmically spaced frequency bands (DESIGN §8)."""

    f_hz: np.ndarray
    psd: np.ndarray  # (bins,) or (bins, m)
    dof: np.ndarray
    first: np.ndarray  # index of the first fine bin of each band
    count: np.ndarray  # fine bins per band


def log_bin(f_hz, psd, dof, window: np.ndarray | None = None, max_bins: int = 200) -> LogSpectrum:
    """Average fine bins 1.. (DC left out) into at most ``max_bins`` log-spaced bands.

    Each band's ``dof`` is the fine-bin dof times the effective number of independent bins it holds
    (adjacent Hann bins are correlated, see the module docstring); ``window`` None means
    independent bins.
    """
    f = np.asarray(f_hz, dtype=np.float64)
    p = np.asarray(psd, dtype=np.float64)
    d = np.broadcast_to(np.asarray(dof, dtype=np.float64), f.shape)
    if f.size < 2:
        empty = np.zeros(0)
        return LogSpectrum(empty, p[:0], empty, empty.astype(np.int64), empty.astype(np.int64))
    f1, fn = f[1], f[-1]
    span = math.log(fn / f1) if fn > f1 else 1.0
    width = span / max(max_bins - 1, 1)
    ids = np.floor(np.log(f[1:] / f1) / width + 1e-9).astype(np.int64)
    # bands narrower than one fine bin collapse: renumber the distinct ids
    starts = np.flatnonzero(np.r_[True, ids[1:] != ids[:-1]])
    count = np.diff(np.r_[starts, ids.size])
    first = starts + 1
    r = _bin_correlations(window) if window is not None else np.zeros(0)
    fb = np.add.reduceat(f[1:], starts) / count
    pb = np.add.reduceat(p[1:], starts, axis=0) / (count if p.ndim == 1 else count[:, None])
    db = np.add.reduceat(d[1:], starts) / count
    # the factor depends on the band's bin count M only: sum_{j=1}^{min(M-1, reach)} (1 - j/M) r_j,
    # for every distinct M at once (terms with j >= M are zeros)
    sizes, which = np.unique(count, return_inverse=True)
    js = np.arange(1, r.size + 1)
    terms = np.where(js < sizes[:, None], (1.0 - js / sizes[:, None]) * r, 0.0)
    corr = terms.sum(axis=1) if r.size else np.zeros(sizes.size)
    factor = (sizes / (1.0 + 2.0 * corr))[which]
    return LogSpectrum(fb, pb, db * factor, first, count)


@dataclass(frozen=True)
class SpectrumSnapshot:
    """Welch estimate at one moment: fine bins, all columns."""

    columns: tuple[str, ...]
    rate_hz: float
    segment: int
    segments: int
    f_hz: np.ndarray  # (nfreq,)
    psd: np.ndarray  # (nfreq, m), one-sided, units^2/Hz
    dof: np.ndarray  # (nfreq,)
    window: np.ndarray
    #: per-group band sums for batch-means errors of spectral integrals (stats/segment_groups.py)
    groups: SegmentGroups | None = None

    @property
    def df_hz(self) -> float:
        return self.rate_hz / self.segment

    def variance(self) -> np.ndarray:
        """Integral of the PSD over frequency (Parseval): the windowed within-segment variance."""
        return self.psd.sum(axis=0) * self.df_hz

    def interval(self, confidence: float = 0.95):
        return chi2_interval(self.psd, self.dof[:, None], confidence)

    def log_binned(self, max_bins: int = 200) -> LogSpectrum:
        """Log-spaced bands of bins 1 .. below Nyquist (the Nyquist ordinate of an even segment
        holds half the one-sided density, as in scipy, so it is no density estimate and is
        left out)."""
        stop = self.f_hz.size - 1 if self.segment % 2 == 0 else self.f_hz.size
        return log_bin(self.f_hz[:stop], self.psd[:stop], self.dof[:stop], self.window, max_bins)


class SpectrumAccumulator:
    """Welch spectrum of every column of a point, updated block by block, mergeable.

    Parameters
    ----------
    columns : names of the velocity columns (``("u", "v", "w")``)
    rate_hz : sampling rate
    segment : samples per segment (a power of two is fastest); None chooses it from the
        integral time scale ``tint_s`` or, when that is None too, from the first ``probe`` samples.
    stride : transform only every ``stride``-th segment of the 50 %-overlapped sequence (1: all,
        Welch's estimator proper). A larger stride costs ``1/stride`` of the FFT work and gives
        fewer degrees of freedom, which the dof and intervals account for
        (benchmarks/bench_spectra.py).
    executor : a ``concurrent.futures`` executor with one worker (the pipeline's), or None.
        With one, :meth:`update` copies the block in and hands the windowing and transforms to
        the worker, so they run beside the caller's other work (scipy.fft and the kernels
        release the GIL); every reader, and the next update, first waits for it
        (:meth:`_settle`). The same operations run in the same order: the sums are the same
        bits with or without it.
    """

    def __init__(
        self,
        columns,
        rate_hz: float,
        *,
        segment: int | None = None,
        tint_s: float | None = None,
        probe: int | None = None,
        stride: int = 1,
        executor=None,
    ):
        self.columns = tuple(columns)
        self._executor = executor
        self._pending = None  # the Future of a transform running on the executor
        self.stride = int(stride)
        if self.stride < 1:
            raise ValueError(f"stride must be >= 1, got {stride!r}")
        self._skip = 0
        self.rate_hz = float(rate_hz)
        if not (self.rate_hz > 0 and math.isfinite(self.rate_hz)):
            raise ValueError(f"rate must be positive, got {rate_hz!r}")
        self._m = len(self.columns)
        self._probe = (
            int(probe)
            if probe is not None
            else int(min(max(4 * MIN_SEGMENT, 2 * rate_hz), 1 << 18))
        )
        self._buf = np.zeros((self._m, 0))  # column-major samples not yet past a segment start
        self._head = 0  # the first held sample's column in _buf
        self._fill = 0  # samples held, from _head on
        self._work = np.empty(0)  # windowed segments of one batch, reused
        self.segment = None
        self._sum = None
        self._done = 0  # segments in the sums
        if segment is not None:
            self._set_segment(int(segment))
        elif tint_s is not None:
            self._set_segment(segment_length(self.rate_hz, tint_s))

    @classmethod
    def empty(cls, columns, rate_hz, **kw) -> SpectrumAccumulator:
        return cls(columns, rate_hz, **kw)

    def _set_segment(self, n: int) -> None:
        if n < 8:
            raise ValueError(f"segment must hold at least 8 samples, got {n}")
        self.segment = n
        self.hop = n - n // 2  # scipy.signal.welch's default overlap n // 2
        self.window = sps.get_window("hann", n)  # periodic Hann, as scipy.signal.welch
        self._scale = 1.0 / (self.rate_hz * float(np.dot(self.window, self.window)))
        # per column, all n bins of the packed pairs' |Z|^2, folded by snapshot()
        self._sum = np.zeros((self._m, n))
        self._bands = band_layout(n)
        self._groups = GroupStore(self._m, self._bands.edges)

    @property
    def n(self) -> int:
        """Samples that entered complete segments (overlap counted once)."""
        return 0 if not self.segments else self.segment + (self.segments - 1) * self.hop

    def _settle(self) -> None:
        """Wait for the transform running on the executor, if any (its error is raised here)."""
        pending, self._pending = self._pending, None
        if pending is not None:
            pending.result()

    def __deepcopy__(self, memo):
        """A copy of the settled state; the copy shares the executor (a thread pool cannot be
        copied, and one worker serves every accumulator of a pipeline)."""
        self._settle()
        new = object.__new__(type(self))
        memo[id(self)] = new
        for key, value in self.__dict__.items():
            shared = key == "_executor"
            setattr(new, key, value if shared else copy.deepcopy(value, memo))
        return new

    def update(self, block) -> SpectrumAccumulator:
        self._settle()
        x = np.asarray(block)
        if x.ndim == 1:
            x = x[:, None]
        if x.shape[1] != self._m:
            raise ValueError(f"block has {x.shape[1]} columns, expected {self._m}")
        if self._skip:
            drop = min(self._skip, x.shape[0])
            x, self._skip = x[drop:], self._skip - drop
        self._append(x)
        if self.segment is None:
            if self._fill < self._probe:
                return self
            held = self._buf[:, self._head : self._head + self._fill].T
            self._set_segment(
                segment_length(self.rate_hz, integral_time_estimate(held, self.rate_hz))
            )
        if self._executor is None:
            self._transform(flush=False)
        elif self._complete() >= FFT_BATCH:  # a batch to transform, on the worker (handing
            # over 4 batches at a time measured worse: 0.86x the rate without spectra, not 0.89x)
            self._pending = self._executor.submit(self._transform, False)
        return self

    def _complete(self) -> int:
        """Complete segments held in the buffer, not yet in the sums."""
        n, step = self.segment, self.hop * self.stride
        return 0 if self._fill < n else 1 + (self._fill - n) // step

    def _add_power(self, k: int, out: np.ndarray, groups: bool = False) -> None:
        """Window and transform the first ``k`` complete segments held, two per complex
        transform (segments 0 and 1, 2 and 3, ...), and add their power to ``out``; with
        ``groups``, their band sums go to the segment groups too (stats/segment_groups.py)."""
        n, step = self.segment, self.hop * self.stride
        pairs = (k + 1) // 2
        size = self._m * pairs * n
        ctype = np.complex64 if self._buf.dtype == np.float32 else np.complex128
        if self._work.size < size or self._work.dtype != ctype:
            self._work = np.empty(size, dtype=ctype)
        work = self._work[:size].reshape(self._m, pairs, n)
        window_pairs(self._buf, self._head, step, k, self.window, work)
        # one batched transform for the whole batch (m pairs complex rows, contiguous)
        spec = scipy.fft.fft(work, axis=2, overwrite_x=True)
        if not groups:
            accumulate_pairs(spec, out)
            return
        per = SEGMENTS_PER_GROUP // 2
        g = -(-pairs // per)
        bands = np.zeros((g, self._m, self._groups.edges.size))
        lay = self._bands
        accumulate_pair_groups(spec, out, per, lay.lo, lay.hi, lay.weight, bands)
        counts = np.full(g, SEGMENTS_PER_GROUP, dtype=np.int64)
        counts[-1] = k - SEGMENTS_PER_GROUP * (g - 1)
        self._groups.add(counts, bands)

    def _transform(self, flush: bool) -> None:
        """Add the complete segments held to the sums (``flush`` False: a multiple of
        :data:`FFT_BATCH` of them, the rest wait for the next block)."""
        if self.segment is None:
            return
        k = self._complete()
        if not flush:
            k -= k % FFT_BATCH
        if k == 0:
            return
        step, have = self.hop * self.stride, self._fill
        self._add_power(k, self._sum, groups=True)
        self._done += k
        self._skip = max(0, k * step - have)  # a stride may step past the data held
        keep = max(0, have - k * step)
        self._head = self._head + have - keep if keep else 0  # no copy: _append compacts
        self._fill = keep

    def flush(self) -> SpectrumAccumulator:
        """Add every complete segment still waiting for a full batch to the sums.

        An odd last segment then goes alone, and the pairs after it start one segment later:
        the sums' last bits depend on where flushes happened, so only a change in the data
        (a float64 block after float32 ones) or a merge flushes; a snapshot does not (it adds
        the waiting segments to a copy of the sums, see :meth:`_sums`).
        """
        self._settle()
        self._transform(flush=True)
        return self

    def _sums(self) -> np.ndarray:
        """The sums with the complete segments still waiting added, pair by pair in order as a
        later batch will add them, in a copy (the state does not change: live = replay)."""
        k = self._complete() if self.segment is not None else 0
        if k == 0:
            return self._sum
        out = self._sum.copy()
        self._add_power(k, out)
        return out

    @property
    def segments(self) -> int:
        """Complete segments seen (those waiting for a full batch included)."""
        self._settle()
        return self._done + (self._complete() if self.segment is not None else 0)

    def _append(self, x: np.ndarray) -> None:
        """Copy rows into the column-major buffer (growing it by doubling).

        The buffer, and so the windowed segments and their FFT, are float32 while every block
        has been float32 (what the wire carries from most acquisitions: the transform then
        costs about half, and its rounding, ~1e-7 of the segment's r.m.s. per bin, sits below
        the data's own float32 rounding); float64 from the first float64 block on. Segment
        means, the windowing and the sums of periodograms are float64 either way.
        """
        if self._buf.dtype != np.float64 and x.dtype != np.float32:
            # complete segments still waiting go in float32 (a change in the data, so the pairs
            # after it start where they would whatever the blocks and snapshots)
            self._transform(flush=True)
            head, fill = self._head, self._fill
            self._buf, self._head = self._buf[:, head : head + fill].astype(np.float64), 0
        elif self._fill == 0 and self._done == 0 and x.dtype == np.float32:
            self._buf, self._head = self._buf[:, :0].astype(np.float32), 0
        head, fill = self._head, self._fill
        need = fill + x.shape[0]
        if head + need > self._buf.shape[1]:
            # held samples move to the front, into a buffer of twice what is needed: they move
            # once per several blocks, not at every block
            if 2 * need > self._buf.shape[1]:
                grown = np.empty((self._m, 2 * need), dtype=self._buf.dtype)
                grown[:, :fill] = self._buf[:, head : head + fill]
                self._buf = grown
            else:
                self._buf[:, :fill] = self._buf[:, head : head + fill]  # numpy minds the overlap
            self._head = head = 0
        self._buf[:, head + fill : head + need] = x.T
        self._fill = need

    def merge(self, other: SpectrumAccumulator) -> SpectrumAccumulator:
        """Pool the segments of two records.

        ``other`` follows ``self``; the partial segment at the seam is lost.
        """
        if self.columns != other.columns or self.rate_hz != other.rate_hz:
            raise ValueError("spectra of different columns or rates cannot be merged")
        if self.segment is None or other.segment is None or self.segment != other.segment:
            raise ValueError(
                "spectra with different (or undecided) segment lengths cannot be merged"
            )
        if self.stride != other.stride:
            raise ValueError("spectra taken with different strides cannot be merged")
        # other's waiting segments go in, its incomplete tail goes on (a flushed copy: the
        # inputs are untouched); self's waiting segments count, its tail is the lost seam
        tail = copy.deepcopy(other).flush()
        out = SpectrumAccumulator(
            self.columns, self.rate_hz, segment=self.segment, stride=self.stride
        )
        head = copy.deepcopy(self).flush()  # self's waiting segments too (same bits as _sums())
        out._sum = head._sum + tail._sum
        out._groups = head._groups.extend(tail._groups)
        out._done = head._done + tail._done
        other = tail
        out._buf = other._buf[:, other._head : other._head + other._fill].copy()
        out._fill = other._fill
        out._skip = other._skip
        return out

    def snapshot(self) -> SpectrumSnapshot | None:
        """The current estimate, or None before the first complete segment."""
        self._settle()
        if not self.segments:
            return None
        n = self.segment
        folded = np.ascontiguousarray(_fold_pairs(self._sums()).T)
        psd = folded * (self._scale / self.segments)  # (nfreq, m)
        psd[1 : (n + 1) // 2] *= 2.0  # one-sided: all but DC (and Nyquist for even n)
        dof = np.full(psd.shape[0], welch_dof(self.window, self.hop * self.stride, self.segments))
        dof[0] /= 2.0
        if n % 2 == 0:
            dof[-1] /= 2.0
        f = np.arange(psd.shape[0]) * (self.rate_hz / n)
        for a in (f, psd, dof):
            a.flags.writeable = False
        return SpectrumSnapshot(
            self.columns, self.rate_hz, n, self.segments, f, psd, dof, self.window,
            self._groups.snapshot(),
        )
