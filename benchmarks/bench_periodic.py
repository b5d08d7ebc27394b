"""Cost of the periodic correction (stats.periodic), measured side by side in one run.

The same 3-component float32 blocks of 16384 rows go through ``PointStatistics.update`` (with
its geometric checkpoints) and a final snapshot, with and without the row store
(``ps.periodic = None``) and with the first-order rows only (the means' correction alone), in
interleaved rounds; prints each round's rates and their ratios (range, median, and the ratio
of the best rounds, the least disturbed by other load), and the cost of the corrections
of the means and of the second moments at one evaluation on a full store (a checkpoint's or
snapshot's extra work where a line was found). Two processes: broadband AR(1) (no line: the
row store and the searches alone) and the same with a line on u and v (1 Hz at 20 kHz,
0.5 sigma).

    python benchmarks/bench_periodic.py [--blocks 400] [--repeat 5]
"""

from __future__ import annotations

import argparse
import os
import sys
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # one core, before numpy loads BLAS

import numpy as np  # noqa: E402
from scipy.signal import lfilter  # noqa: E402

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))

from eddyvigil.stats import PointStatistics  # noqa: E402

ROWS = 16384


def make_blocks(n_blocks, line):
    rng = np.random.default_rng(0)
    n = n_blocks * ROWS
    rho = np.exp(-1 / 50)
    x = lfilter([np.sqrt(1 - rho**2)], [1.0, -rho], rng.normal(size=(n, 3)), axis=0)
    if line:
        t = np.arange(n)[:, None]
        x[:, :2] += 0.5 * np.sin(2 * np.pi * t / 20000.0 + np.array([0.3, 1.9]))
    x += np.array([10.0, 0.5, 0.0])
    return [b.astype(np.float32) for b in np.split(x, n_blocks)]


def run(blocks, rows, second=True):
    ps = PointStatistics(("u", "v", "w"), rate_hz=20000.0)
    if not rows:
        ps.periodic = None
    elif not second:  # the first-order rows alone (the means' correction only)
        ps.periodic.rows2 = np.zeros((ps.periodic.rows.shape[0], 0))
        ps.periodic.carry2 = np.zeros(0)
        ps.periodic.orders = 1
    t = time.perf_counter()
    for b in blocks:
        ps.update(b)
    snap = ps.snapshot()
    return time.perf_counter() - t, ps, snap


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--blocks", type=int, default=400)
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args()
    for line in (False, True):
        blocks = make_blocks(a.blocks, line)
        n = a.blocks * ROWS
        run(blocks[:4], True)  # compile / load the kernels
        ratios, firsts, best = [], [], {"with": [], "first": [], "without": []}
        print(f"{'AR(1) + line on u, v' if line else 'AR(1), no line'}: {n / 1e6:.1f} M samples")
        for r in range(a.repeat):
            with_rows, ps, snap = run(blocks, True)
            without, _, _ = run(blocks, False)
            first, _, _ = run(blocks, True, second=False)
            best["with"].append(with_rows)
            best["first"].append(first)
            best["without"].append(without)
            ratios.append(without / with_rows)
            firsts.append(without / first)
            print(
                f"  round {r}: with rows {n / with_rows / 1e6:6.1f} M samples/s, first-order "
                f"rows only {n / first / 1e6:6.1f}, without {n / without / 1e6:6.1f}: ratios "
                f"{without / with_rows:.3f}, {without / first:.3f}"
            )
        t = time.perf_counter()
        k = 20
        for _ in range(k):
            ps.periodic.mean_errors(1 / 20000.0, [2.5e-3] * 3, 4.0)
        per = (time.perf_counter() - t) / k
        t = time.perf_counter()
        for _ in range(k):
            ps._periodic_second([2.5e-3] * 3)
        per2 = (time.perf_counter() - t) / k
        corrected = [e.name for e in snap.estimates if e.error_method]
        st = ps.periodic
        size = st.rows.nbytes + st.rows2.nbytes + st.times.nbytes
        print(
            f"  rate ratio with/without rows: {min(ratios):.3f}-{max(ratios):.3f} "
            f"(median {np.median(ratios):.3f}; first-order rows only {min(firsts):.3f}-"
            f"{max(firsts):.3f}, median {np.median(firsts):.3f}); of the best rounds (least "
            f"disturbed by other load) {min(best['without']) / min(best['with']):.3f} "
            f"(first-order only {min(best['without']) / min(best['first']):.3f}); at one "
            f"evaluation (fit + blocking of the remainder; 0 without a line) the means' "
            f"correction {1e3 * per:.2f} ms, the second moments' {1e3 * per2:.2f} ms; "
            f"corrected: {corrected}; store {size} B"
        )


if __name__ == "__main__":
    main()
