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
period stated, records of 2^20 samples): the share stopped and the share stopped wrong.

Measured at 3 % checkpoints (``stats.convergence.CHECKPOINT_GROWTH`` 1.03) with 1024-sample
updates (``UPDATE``): ``... 600``: median stop/oracle 1.259, mean 1.309, p95 1.798, not
converged by 4x 14, worst coverage at the stop 0.953, ETA at 25 / 50 % 1.055 / 0.989;
``... 2000``: 1.259, mean 1.322, p95 1.978, not converged 34, coverage 0.956, ETA 1.027 /
0.994. The same 600 records at 5 % checkpoints (ETA factor 1.1): median 1.319, ETA 1.141 /
1.075, coverage 0.953. With 5 % checkpoints and 4096-sample updates, the periodogram rise test
(stats.slow_spectrum) cost (before it in brackets): ``... 200`` p95 1.798 (1.678), not
converged 7 (4), median 1.319 and coverage 0.955 both. ``... 400 slow``: w = 0.005 stopped 0.107,
wrong 0.030 (0.070); w = 0.002 stopped 0.500, wrong 0.0825 (0.1175).
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
    targets = Targets.from_dict({"targets": {"U": {"absolute": 0.025}}})
    for w, seed in ((0.005, 3), (0.002, 4)):
        t0 = time.perf_counter()
        runs = []
        for r in range(reps):
            x = two_scale(np.random.default_rng(1000 * seed + r), 2**20, w)[:, :1]
            runs.append(run_until_converged(x, ("u",), targets, {"U": MEAN[0]}, block=2**14))
        stops = [s.samples for s in runs if s.samples]
        print(
            f"slow content w = {w}, {reps} runs: stopped {len(stops) / reps:.3f} (median "
            f"{np.median(stops) if stops else float('nan'):.0f} samples), stopped with U "
            f"outside {np.mean([s.miss['U'] for s in runs]):.4f}  "
            f"({time.perf_counter() - t0:.0f} s)"
        )


if __name__ == "__main__":
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 200
    if sys.argv[2:] == ["slow"]:
        slow(n)
    elif sys.argv[2:3] == ["blocks"]:
        by_block(n, tuple(int(b) for b in sys.argv[3:]) or (4096, 1024))
    else:
        main(n, compare=sys.argv[2:] == ["compare"])
