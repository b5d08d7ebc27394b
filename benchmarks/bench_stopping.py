"""How long does stopping on the verdict take, how good is the ETA, and how often is it wrong?

Closed-loop runs on processes with known truth (tests/processes.py): a 3-component Gaussian
AR(1) with T_int = 10 samples and the default targets. For each run: the stop (first
``converged`` point) against the oracle sample count (the record at which the true 95 %
half-width of the slowest targeted statistic equals its target, from the exact OU variances
of REFERENCES §1 and §5: means sigma^2 (1+rho)/(1-rho), second moments the Hermite-2 factor
(1+rho^2)/(1-rho^2)), the predicted/actual total record at 25 % and 50 % of the stop, and the
share of runs stopping with the truth outside the interval. Prints figures only (no
assertions). Run: ``nice -n 10 .venv/bin/python benchmarks/bench_stopping.py [reps]``.

``... bench_stopping.py [reps] compare``: the default-target runs twice on the same records,
interleaved: as shipped, and as before the short-record work ("former"): every interval
symmetric (the log-scale, skew and kurtosis corrections of uu, vv, ww and k off:
``stats.point.VARIANCE_ROWS`` emptied) and widened by 1.05 whatever the block count
(``stats.point.INFLATION_BLOCKS`` = 2).

``... bench_stopping.py [reps] blocks [4096 1024 ...]``: the default-target runs with updates
of each size on the same records (the stop falls at an update: 4096 samples are 12 % of the
oracle here, while the monitor updates every 0.5 s of data).

``... bench_stopping.py [reps] slow``: the issue-12 slow-content process instead (U within
+-0.025, sqrt(1 - w) AR(1, T = 5) + sqrt(w) AR(1, T = 5000 samples), w = 0.005 and 0.002, no
period stated, records of 2^20 samples): the share stopped and the share stopped wrong, with
the means' low-band floor (stats.slow_spectrum) and without it on the same records; then a
clean control where the mean binds (w = 0, at most 200 runs): stop/oracle and coverage.

Measured at 3 % checkpoints (``stats.convergence.CHECKPOINT_GROWTH`` 1.03) with 1024-sample
updates (``UPDATE``): ``... 600``: median stop/oracle 1.259, mean 1.309, p95 1.798, not
converged by 4x 14, worst coverage at the stop 0.953, ETA at 25 / 50 % 1.055 / 0.989;
``... 2000``: 1.259, mean 1.322, p95 1.978, not converged 34, coverage 0.956, ETA 1.027 /
0.994. The same 600 records at 5 % checkpoints (ETA factor 1.1): median 1.319, ETA 1.141 /
1.075, coverage 0.953. With 5 % checkpoints and 4096-sample updates, the periodogram rise test
(stats.slow_spectrum) cost (before it in brackets): ``... 200`` p95 1.798 (1.678), not
converged 7 (4), median 1.319 and coverage 0.955 both.
``... 400 slow`` before the low-band floor:
w = 0.005 stopped 0.107, wrong 0.030 (0.070 before the periodogram test); w = 0.002 stopped
0.500, wrong 0.0825 (0.1175), 5 % checkpoints.

``... 400 slow`` with the means' low-band floor (10 cosine terms; "no floor" in brackets, same
records, checkpoints 3 % apart): w = 0.005 stopped 0.052 (0.107), wrong 0.0125 (0.030); w =
0.002 stopped 0.427 (0.507, median stop 163 840 samples against 98 304), wrong 0.0475
(0.0825); clean control (U binding, 200 runs): stop/oracle median 1.328 (1.262), mean 1.544
(1.298), p95 2.404 (1.793), not converged within 8.5x 1 (1), coverage at the stop 0.965
(0.940). Tried on the same seeds (w = 0.002 wrong / clean median, p95): 8 terms 0.045 /
1.395, 2.79; 12 terms 0.0525; 16 terms 0.0525 / 1.328, 2.29; the
floor's z quantile instead of t: 0.0525 (8 terms); only where the periodogram p-value is below
0.25: 0.08 on the first 200 records (floor always: 0.055); the t-scaled excess added to
blocking's interval instead of a floor, sqrt(hw^2 + t^2 (V_low - V)): 0.050 (8 terms) / 1.328,
2.21. ``... 200 blocks 1024`` (default targets, means not binding): median 1.289, mean 1.320,
p95 1.798, not converged 4 with and without the floor; coverage of U, V, W at the stop 0.980,
0.970, 0.970 (0.965, 0.960, 0.955).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from processes import MEAN, STRESS, turbulence, two_scale  # noqa: E402
from stopping import run_until_converged  # noqa: E402

from eddyvigil.stats import Targets  # noqa: E402

Z = 1.959964
#: samples per update in the default and ``compare`` modes: 3 % of the oracle record, as the
#: monitor's 0.5 s updates are a small part of a point's record (4096 until 2026-12: 12 %)
UPDATE = 1024


def oracle(rho: float, targets: Targets) -> float:
    f1 = (1 + rho) / (1 - rho)
    f2 = (1 + rho**2) / (1 - rho**2)
    R = STRESS
    k = 0.5 * np.trace(R)
    values = {"U": MEAN[0], "V": MEAN[1], "W": MEAN[2], "k": k}
    nvar = {c.upper(): R[i, i] * f1 for i, c in enumerate("uvw")}
    for i, a in enumerate("uvw"):
        for j, b in enumerate("uvw"):
            if j >= i:
                nvar[a + b] = (R[i, i] * R[j, j] + R[i, j] ** 2) * f2
    nvar["k"] = 0.5 * float(np.sum(R**2)) * f2
    need = [Z**2 * nvar[n] / targets.resolve(n, values) ** 2 for n in targets.targets]
    return max(need)


def _report(label, runs, n_star, truth, t0, block: int = 4096) -> None:
    stops = np.array([s.samples or np.nan for s in runs]) / n_star
    miss = {n: np.mean([s.miss[n] for s in runs]) for n in truth}
    e25 = np.array([s.eta_ratio(0.25) for s in runs])
    e50 = np.array([s.eta_ratio(0.5) for s in runs])
    print(f"[{label}] never converged within 4x: {np.isnan(stops).sum()}")
    print(
        f"[{label}] stop / oracle: median {np.nanmedian(stops):.3f}, mean "
        f"{np.nanmean(stops):.3f}, p95 {np.nanpercentile(stops, 95):.3f} (stops fall on "
        f"{block}-sample blocks: steps of {block / n_star:.2f})"
    )
    print(
        f"[{label}] ETA predicted/actual total: at 25 % median {np.nanmedian(e25):.3f} "
        f"(under in {np.nanmean(e25 < 1):.2f}), at 50 % median {np.nanmedian(e50):.3f} "
        f"(under in {np.nanmean(e50 < 1):.2f})"
    )
    print(
        f"[{label}] share of runs stopping with the truth outside:",
        {n: round(v, 3) for n, v in miss.items()},
    )
    print(
        f"[{label}] worst coverage at the stop: {1 - max(miss.values()):.3f}  "
        f"({time.perf_counter() - t0:.0f} s)"
    )


def default_case():
    """The default-target case: AR(1) rho (T_int = 10 samples), the targets, the oracle
    record and the true value of every targeted statistic."""
    rho = np.exp(-1 / 10)
    targets = Targets.defaults()
    truth = {"U": MEAN[0], "V": MEAN[1], "W": MEAN[2], "k": 0.5 * np.trace(STRESS)}
    for i, a in enumerate("uvw"):
        for j, b in enumerate("uvw"):
            if j >= i:
                truth[a + b] = STRESS[i, j]
    return rho, targets, oracle(rho, targets), truth


def by_block(reps: int, blocks=(4096, 1024)) -> None:
    """The default-target runs with updates of each size in ``blocks``, on the same records:
    the stop can only fall at an update, so coarse updates add up to one update to every stop
    (4096 samples are 12 % of this oracle; the monitor updates every 0.5 s of data)."""
    rho, targets, n_star, truth = default_case()
    t0 = time.perf_counter()
    runs = {b: [] for b in blocks}
    for r in range(reps):
        x = turbulence(np.random.default_rng(300_000 + r), int(4 * n_star), rho)
        for b in blocks:
            runs[b].append(run_until_converged(x, ("u", "v", "w"), targets, truth, block=b))
    print(f"default targets, 3-component Gaussian AR(1), T_int = 10 samples, {reps} runs")
    print(f"oracle {n_star:.0f} samples")
    for b in blocks:
        _report(f"{b}-sample updates", runs[b], n_star, truth, t0, b)


def main(reps: int = 200, compare: bool = False) -> None:
    from eddyvigil.stats import point

    rho, targets, n_star, truth = default_case()
    shipped = (point.VARIANCE_ROWS, point.INFLATION_BLOCKS)
    arms = {"shipped": shipped, "former": (frozenset(), 2)} if compare else {"shipped": shipped}
    t0 = time.perf_counter()
    runs = {a: [] for a in arms}
    for r in range(reps):
        x = turbulence(np.random.default_rng(300_000 + r), int(4 * n_star), rho)
        for arm, (rows, blocks) in arms.items():
            point.VARIANCE_ROWS, point.INFLATION_BLOCKS = rows, blocks
            runs[arm].append(
                run_until_converged(x, ("u", "v", "w"), targets, truth, block=UPDATE)
            )
    point.VARIANCE_ROWS, point.INFLATION_BLOCKS = shipped
    print(f"default targets, 3-component Gaussian AR(1), T_int = 10 samples, {reps} runs")
    print(f"oracle {n_star:.0f} samples")
    for arm in arms:
        _report(arm, runs[arm], n_star, truth, t0, UPDATE)


def slow(reps: int = 400) -> None:
    """The issue-12 cases with the means' low-band floor as shipped and off
    (``stats.slow_spectrum.LOW_BAND_TERMS`` = 0) on the same records, and a clean control
    where the mean binds (w = 0: AR(1), T = 5 samples, U within +-0.025, 4096-sample
    updates, records of 2^19 samples = 8.5x the oracle 61 650 of the exact N Var(mean),
    REFERENCES §1): stop/oracle and coverage at the stop."""
    from eddyvigil.stats import slow_spectrum

    shipped = slow_spectrum.LOW_BAND_TERMS
    arms = {f"floor nu={shipped}": shipped, "no floor": 0}
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.025}}})
    rho = np.exp(-1 / 5)
    n_star = Z**2 * (1 + rho) / (1 - rho) / 0.025**2
    for w, seed in ((0.005, 3), (0.002, 4), (0.0, 7)):
        t0 = time.perf_counter()
        runs = {a: [] for a in arms}
        for r in range(reps if w else min(reps, 200)):
            if w:
                x = two_scale(np.random.default_rng(1000 * seed + r), 2**20, w)[:, :1]
            else:
                x = two_scale(np.random.default_rng(7000 + r), 2**19, 0.0)[:, :1]
            for arm, terms in arms.items():
                slow_spectrum.LOW_BAND_TERMS = terms
                runs[arm].append(
                    run_until_converged(
                        x, ("u",), targets, {"U": MEAN[0]}, block=2**14 if w else 2**12
                    )
                )
        slow_spectrum.LOW_BAND_TERMS = shipped
        for arm in arms:
            stops = np.array([s.samples or np.nan for s in runs[arm]], dtype=float)
            wrong = np.mean([s.miss["U"] for s in runs[arm]])
            if w:
                print(
                    f"[{arm}] slow content w = {w}, {len(stops)} runs: stopped "
                    f"{np.mean(~np.isnan(stops)):.3f} (median {np.nanmedian(stops):.0f} "
                    f"samples), stopped with U outside {wrong:.4f}  "
                    f"({time.perf_counter() - t0:.0f} s)"
                )
            else:
                stopped = np.sum(~np.isnan(stops))
                print(
                    f"[{arm}] clean AR(1) T = 5, U binding, {len(stops)} runs: stop / oracle "
                    f"median {np.nanmedian(stops) / n_star:.3f}, mean "
                    f"{np.nanmean(stops) / n_star:.3f}, p95 "
                    f"{np.nanpercentile(stops, 95) / n_star:.3f}; not converged within "
                    f"8.5x {len(stops) - stopped}; coverage at the stop "
                    f"{1 - wrong * len(stops) / stopped:.3f}  ({time.perf_counter() - t0:.0f} s)"
                )


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 200
    if sys.argv[2:] == ["slow"]:
        slow(n)
    elif sys.argv[2:3] == ["blocks"]:
        by_block(n, tuple(int(b) for b in sys.argv[3:]) or (4096, 1024))
    else:
        main(n, compare=sys.argv[2:] == ["compare"])
