"""Stopping on a budget term vs on plain per-statistic targets, the same traverses.

The plane wake of tests/test_budget_coverage.py (17 uneven points, truth known), each traverse
run through the Pipeline in process twice with the same seeds, rounds interleaved: once with
a ``[budget]`` production tolerance of ±H (plus the loose plain targets), once with the loose
plain targets only. Printed: how often the production is within ±H of the truth, the
record per traverse (seconds of data, which the data alone decide: no timing here) and the
half-width / H of the budget's intervals.

    python benchmarks/bench_budget_targets.py [--traverses 20] [--h 0.15 0.25]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from test_budget_coverage import SCENARIO  # noqa: E402
from test_budget_targets_coverage import PLAIN, _traverse  # noqa: E402

from eddyvigil.monitor.budget_cmd import budget_line  # noqa: E402
from eddyvigil.simulator.scenario import load_scenario, point_truth  # noqa: E402
from eddyvigil.stats import Targets  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--traverses", type=int, default=20)
    ap.add_argument("--h", type=float, nargs="+", default=[0.15, 0.25])
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "wake-fine.toml"
        path.write_text(SCENARIO, encoding="utf-8")
        sc = load_scenario(str(path))
    truth = np.array([point_truth(sc, pt)["budget"]["production"] for pt in sc.points])
    positions = [pt.wire_point(sc.nu)["y"] for pt in sc.points]
    for h in args.h:
        runs = {"budget": Targets.from_dict({"targets": PLAIN, "budget": {
                    "production": {"absolute": h}, "positions": positions}}),
                "plain": Targets.from_dict({"targets": PLAIN})}
        got = {k: {"met": [], "seconds": [], "ratio": []} for k in runs}
        for seed in range(args.traverses):  # interleaved: the same seed for both
            for name, targets in runs.items():
                points, seconds, _ = _traverse(sc, targets, seed)
                b = budget_line("probe-a", points)["production"]
                value = np.array(b["value"], dtype=float)
                half = (np.array(b["ci_high"], dtype=float) - np.array(b["ci_low"], dtype=float))
                got[name]["met"] += (np.abs(value - truth) <= h).tolist()
                got[name]["seconds"].append(sum(seconds))
                got[name]["ratio"] += (half / 2 / h).tolist()
        for name, g in got.items():
            s, r = np.array(g["seconds"]), np.array(g["ratio"])
            print(f"H = {h:g} m^2/s^3, {name:6s}: |P - truth| <= H at {np.mean(g['met']):.3f} "
                  f"of {len(g['met'])} points; record per traverse {np.mean(s):.0f} s (range "
                  f"{s.min():.0f}-{s.max():.0f}); half-width/H median {np.nanmedian(r):.2f}, "
                  f"90th percentile {np.nanquantile(r, 0.9):.2f}")


if __name__ == "__main__":
    main()
