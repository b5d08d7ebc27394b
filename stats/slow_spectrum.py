"""Slow content seen in the lowest frequencies of the record: a periodogram rise test.

The blocking levels see slow content (a facility's speed control hunting, a pump pulsing:
time scales far above the turbulence's) only in their few coarsest blocks, where a rise
has few degrees of freedom. The whole record's row means (stats.periodic.RowStore, at most
4096 equal-length rows) resolve it better: the periodogram of a short-memory series is flat
near zero frequency, its ordinates at the Fourier frequencies k / N independent S(f_k)
chi-squared(2) / 2 variables (Priestley 1981, Spectral Analysis and Time Series, §6.1, from
memory), and slow content raises the lowest ordinates above that flat level. The test: the
mean of the LOW_BINS lowest ordinates, weighted 1 / k (a rise whose corner frequency is
unknown), against the mean of the ordinates from REF_START up to the band edge 1 / (REF_TINTS
T_int), where the turbulence's own spectrum is still flat (an exponential correlation's
spectrum is 1 / (1 + (2 pi f T)^2): 1 % low at the edge). Under the null the numerator is a
weighted sum of independent exponentials (exact tail: rise_p_value) over a reference
chi-squared with 2 degrees of freedom per bin. Measured false alarms per look on AR(1) and
the rise's power on the issue-12 process: tests/test_slow_guard.py. PointStatistics._guards
runs it on
each targeted mean at every checkpoint: below SPECTRAL_ALPHA it is a rise (held and
remembered as a blocking one); below LOOK_ALPHA it only keeps a mean that has not yet
converged from converging at that look.

The same rows also give a low-band estimate of the mean's variance (low_band_variance): the
equal-weighted cosine estimator of the long-run variance from the record's LOW_BAND_TERMS
lowest cosine transforms (Mueller 2007, "A theory of robust long-run variance estimation",
J. Econometrics 141; Lazarus, Lewis, Stock & Watson 2018, "HAR inference: recommendations for
practice", J. Business & Economic Statistics 36). Where the spectrum is flat over its band
(frequencies up to LOW_BAND_TERMS / (2 N) cycles per sample) the transforms are independent
normals of variance N Var(mean), so the estimate is Var(mean) chi-squared(nu) / nu, nu =
LOW_BAND_TERMS, and the mean's error over its square root is Student-t on nu degrees of
freedom. Its band reaches periods of 2 N / nu samples, far longer than the blocks blocking
can use (tens of them in the record), so it sees slow content that blocking only hints at: on
the issue-12 process at its first stops (N ~ 20 slow time scales) about 0.63 of the slow
part's variance (tests/test_slow_guard.py). Where the spectrum is flat it costs time instead:
chi-squared noise on nu degrees of freedom and t's wider quantile. PointStatistics uses the
t interval as a floor of each mean's interval (_low_band_floor); LOW_BAND_TERMS = 10 is the
measured trade (benchmarks/bench_stopping.py, slow mode; README "Before you rely on it").
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy.fft import dct, rfft

__all__ = [
    "SPECTRAL_ALPHA",
    "LOOK_ALPHA",
    "LOW_BINS",
    "REF_START",
    "REF_TINTS",
    "MIN_REF_BINS",
    "LOW_BAND_TERMS",
    "EXCESS_ALPHA",
    "low_band_variance",
    "low_frequency_rise",
    "rise_p_value",
]

#: ordinates k = 1 .. LOW_BINS form the numerator (periods of the record / k)
LOW_BINS = 8
#: the reference starts at this bin (well above the numerator's band)
REF_START = 4 * LOW_BINS
#: ... and ends at the frequency 1 / (REF_TINTS T_int), below the turbulence's roll-off
REF_TINTS = 60.0
#: fewest reference bins for a test
MIN_REF_BINS = 16
#: cosine transforms (and degrees of freedom) of the low-band variance estimate
LOW_BAND_TERMS = 10
#: the low-band variance's excess over blocking's is published as the unresolved part of a
#: mean's error only where it is this unlikely on a flat spectrum (the estimate is then
#: blocking's variance times chi-squared(nu) / nu): the floor widens the interval whenever
#: it is wider, which on clean records is often (noise of 10 degrees of freedom), but the
#: board and the summary name slow content in 5 % of clean points only
EXCESS_ALPHA = 0.05

#: false-alarm rate per look (per targeted mean and checkpoint); half the blocking test's
#: SLOW_ALPHA: each false alarm costs a clean record a doubling of its blocks
SPECTRAL_ALPHA = 0.005
#: below this p-value (and above SPECTRAL_ALPHA) a mean not yet converged waits one look
LOOK_ALPHA = 0.05


@lru_cache(maxsize=1)
def _weights() -> tuple[np.ndarray, np.ndarray]:
    """The numerator's weights w_k (1/k, summing to 1) and the coefficients c_k = prod_{j != k}
    w_k / (w_k - w_j) of the tail of sum w_k E_k, E_k independent unit exponentials:
    P(sum > y) = sum_k c_k exp(-y / w_k) (the hypoexponential law, distinct rates; Ross 2010,
    Introduction to Probability Models, §5.2.4, from memory)."""
    w = 1.0 / np.arange(1, LOW_BINS + 1)
    w /= w.sum()
    c = np.array(
        [
            np.prod([w[k] / (w[k] - w[j]) for j in range(LOW_BINS) if j != k])
            for k in range(LOW_BINS)
        ]
    )
    return w, c


def rise_p_value(ratio: float, ref_dof: float) -> float:
    """P(sum w_k E_k / (chi2_nu / nu) > ratio) under a flat spectrum: the hypoexponential
    tail averaged over the reference's chi-squared(nu) law, E exp(-t chi2_nu / nu) = (1 +
    2 t / nu)^(-nu / 2) (its moment-generating function)."""
    w, c = _weights()
    return float(np.sum(c * (1.0 + 2.0 * ratio / (ref_dof * w)) ** (-0.5 * ref_dof)))


def low_frequency_rise(y: np.ndarray, row_len: int, tint_samples: float) -> float:
    """p-value of the rise of the lowest periodogram ordinates of the row means ``y`` (n,)
    of ``row_len`` samples each, for a series of integral time ``tint_samples``; NaN when the
    record is too short against T_int for a flat reference band."""
    n = int(y.shape[0])
    if n < 4 * REF_START or not (math.isfinite(tint_samples) and tint_samples > 0):
        return math.nan
    edge = min(int(n * row_len / (REF_TINTS * tint_samples)), n // 4)
    if edge - REF_START < MIN_REF_BINS:
        return math.nan
    z = rfft(y - y.mean())
    power = z.real**2 + z.imag**2
    ref = float(power[REF_START:edge].mean())
    if not ref > 0.0:
        return math.nan
    w, _ = _weights()
    low = float(w @ power[1 : LOW_BINS + 1])
    return rise_p_value(low / ref, 2.0 * (edge - REF_START))


def low_band_variance(y: np.ndarray, terms: int = LOW_BAND_TERMS) -> float:
    """Variance of the mean of the row means ``y`` (n,) from their ``terms`` lowest cosine
    transforms (equal weights; see the module text): mean(A_j^2) / n with A_j = sqrt(2 / n)
    sum_t y_t cos(pi j (t + 1/2) / n), j = 1 .. terms (DCT-II, orthonormal; orthogonal to
    the constant, so the reference of the rows does not matter). NaN with fewer than 4 x
    ``terms`` rows."""
    n = int(y.shape[0])
    if n < 4 * terms:
        return math.nan
    a = dct(np.asarray(y, dtype=np.float64), type=2, norm="ortho")[1 : terms + 1]
    return float(a @ a) / (terms * n)
