"""Are the 95 % intervals honest? Coverage over seeded replicates of processes with known truth.

Processes: 3-component Gaussian AR(1) (exact sampled Ornstein-Uhlenbeck, REFERENCES §10) mixed by
the Cholesky factor of a prescribed Reynolds-stress tensor (Lund, Wu & Squires 1998,
J. Comput. Phys. 140:233), and the skewed transform y = z + a(z^2 - 1) with known skewness and
flatness (REFERENCES §10: a = 0.1 gives 0.590206 and 3.465975). A 95 % interval must contain the
truth in 0.92-0.99 of the replicates that show one (binomial sd at 400 replicates: 0.011;
the upper bound was 0.98 before intervals were widened by 5 %, point.INTERVAL_INFLATION,
which lifts odd moments, already conservative, to about 0.985).
"""

import numpy as np
import pytest
from processes import MEAN, STRESS, ar1, skewed, turbulence

from eddyvigil.stats import PointStatistics, Targets

pytestmark = pytest.mark.slow

REPS = 400
N = 2**16
RHO = np.exp(-1 / 10)  # T_int = 10 samples


WITHHELD = {}  # name -> share of records without an interval in the last coverage() call


def coverage(make, truth, columns, reps=REPS, targets=None):
    """Coverage among the records that show an interval; the share withheld (state
    ``no-interval``: the tail guard) goes to WITHHELD and is bounded by each test."""
    hits = {name: 0 for name in truth}
    shown = {name: 0 for name in truth}
    for r in range(reps):
        x = make(np.random.default_rng(10_000 + r))
        ps = PointStatistics(columns, rate_hz=1000.0, targets=targets)
        for k in range(0, x.shape[0], 8192):
            ps.update(x[k : k + 8192])
        snap = ps.snapshot()
        assert snap.confidence == 0.95
        for name, want in truth.items():
            e = snap.estimate(name)
            if not np.isfinite(e.ci_low):
                assert e.state == "no-interval"
                continue
            shown[name] += 1
            hits[name] += e.ci_low <= want <= e.ci_high
    WITHHELD.clear()
    WITHHELD.update({name: 1 - shown[name] / reps for name in truth})
    return {name: hits[name] / max(shown[name], 1) for name in truth}


def test_gaussian_stress_tensor_coverage():
    k = 0.5 * np.trace(STRESS)
    truth = {
        "U": MEAN[0],
        "V": MEAN[1],
        "uu": STRESS[0, 0],
        "uv": STRESS[0, 1],
        "vw": STRESS[1, 2],
        "k": k,
        "uuv": 0.0,
        "vvv": 0.0,
        "skew_u": 0.0,
        "flat_u": 3.0,
    }
    cov = coverage(lambda rng: turbulence(rng, N, RHO).astype(np.float32), truth, ("u", "v", "w"))
    for name, c in cov.items():
        assert 0.92 <= c <= 0.99, (name, c, cov)
    # Gaussian tails: the tail guard may withhold the flatness (8th moments) on a few records
    assert max(WITHHELD.values()) <= 0.10, WITHHELD


def test_skewed_process_coverage():
    a = 0.1
    var = 1 + 2 * a**2
    skew = (6 * a + 8 * a**3) / (1 + 2 * a**2) ** 1.5
    assert skew == pytest.approx(0.590206, abs=1e-6)  # REFERENCES §10 check value
    truth = {
        "U": 2.0,
        "uu": var,
        "uv": 0.0,
        "k": 0.75 * 2 * var,
        "uuu": skew * var**1.5,
        "uuv": 0.0,
        "skew_u": skew,
    }

    def make(rng):
        z = ar1(rng, N, 2, RHO)
        return np.column_stack([2.0 + skewed(z[:, 0], a), skewed(z[:, 1], a)])

    # k from (u, v) is the model 3/4 (uu + vv); here the model is exact by construction, so
    # its statistical interval is what is checked (accept_modelled_k opts in)
    cov = coverage(make, truth, ("u", "v"), targets=Targets.from_dict({"accept_modelled_k": True}))
    for name, c in cov.items():
        assert 0.92 <= c <= 0.99, (name, c, cov)
    assert max(WITHHELD.values()) <= 0.10, WITHHELD


def test_skewed_flatness_coverage_on_longer_records():
    # Flatness of a skewed signal needs eighth moments: at N = 2^16 (about 3300 independent
    # samples) its coverage was measured at 0.90 (the estimate and its error are positively
    # correlated, as with any heavy-tailed ratio); from 2^18 on it is nominal (0.955 measured).
    # The README states this limit.
    a = 0.1

    def make(rng):
        return (2.0 + skewed(ar1(rng, 4 * N, 1, RHO)[:, 0], a))[:, None]

    cov = coverage(make, {"flat_u": 3.465975}, ("u",), reps=200)
    assert 0.92 <= cov["flat_u"] <= 0.99, (cov, WITHHELD)
    # the tail guard cannot tell this skewed tail from a heavy one on every record: measured
    # 17.5 % of records without a flatness interval (README, "Before you rely on it")
    assert WITHHELD["flat_u"] <= 0.25, WITHHELD


def test_sequential_stopping_keeps_coverage():
    # REFERENCES §11 simulation: AR(1) rho = 0.95, mean 5, sigma 1, target +-1 % of the mean;
    # with the variance known, the oracle sample count is n* = 59 927. Stopping on the verdict
    # must keep coverage >= 0.92 (iid errors gave 0.23 there) and stop within 2 n* (median).
    rho, mu, reps = 0.95, 5.0, 300
    z = 1.959964
    n_star = z**2 * (1 + rho) / (1 - rho) / (0.01 * mu) ** 2
    assert n_star == pytest.approx(59_927, rel=1e-3)
    targets = Targets.from_dict({"targets": {"U": {"relative": 0.01}}})
    stops, hits = [], 0
    for r in range(reps):
        rng = np.random.default_rng(50_000 + r)
        x = mu + ar1(rng, int(6 * n_star), 1, rho)
        ps = PointStatistics(("u",), rate_hz=1000.0, targets=targets)
        for k in range(0, x.shape[0], 2048):
            ps.update(x[k : k + 2048])
            snap = ps.snapshot()
            if snap.converged:
                break
        assert snap.converged, f"replicate {r} never converged"
        e = snap.estimate("U")
        stops.append(snap.samples)
        hits += e.ci_low <= mu <= e.ci_high
    cov = hits / reps
    assert cov >= 0.92, cov
    assert np.median(stops) <= 2 * n_star, np.median(stops)
    assert np.median(stops) >= 0.8 * n_star  # a rule that stops far too early is not honest
