"""Synthetic rakes and fields (simulator/fields.py): the truth they claim, through the monitor.

References: a linear combination of independent AR(1) series with one coefficient is an AR(1)
series of that coefficient, and unit-norm weights keep unit variance (common practice; exact
AR(1) sampling of the OU process: Gillespie 1996, Phys. Rev. E 54:2084); the correlation of two
Gaussian-smoothed white fields at distance r is exp(-r^2 / (4 s^2)) (the convolution of two
Gaussians of width s, from memory); numpy's sample moments are the reference for the
generator, and the correlation of the discrete construction is exactly K_i . K_j; the
monitor's 95 % intervals must hold the truth per vector ~95 % of the time.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.simulator.fields import FieldGenerator, field_messages, field_scenario


def _raw(frames):
    return [bytes(memoryview(f).cast("B")) if not isinstance(f, bytes) else f for f in frames]


def test_rake_generator_has_its_stated_moments_and_spatial_correlation():
    sc = field_scenario("rake")
    sc.rate_hz, sc.tint_s = 100.0, 0.001  # independent snapshots: sample moments converge fast
    gen = FieldGenerator(sc, seed=1740)
    x = gen.block(40_000)
    truth = sc.truth()
    np.testing.assert_allclose(x[..., 0].mean(axis=0), truth["U"], atol=0.03)
    cov_uv = ((x[..., 0] - x[..., 0].mean(0)) * (x[..., 1] - x[..., 1].mean(0))).mean(0)
    np.testing.assert_allclose(cov_uv, truth["uv"], atol=0.03)
    np.testing.assert_allclose(x[..., 1].var(axis=0) / truth["vv"], 1.0, atol=0.05)
    # neighbouring probes: the smoothed unit processes are correlated by K_7 . K_8 exactly
    z = np.einsum("pab,npb->npa", np.linalg.inv(gen.chol), x - sc.mean)
    want = float(gen.K[7] @ gen.K[8])
    got = np.corrcoef(z[:, 7, 0], z[:, 8, 0])[0, 1]
    assert 0.2 < want < 0.9 and abs(got - want) < 0.03
    # on a grid fine against the kernel the continuous result holds: exp(-r^2 / (4 s^2))
    piv = FieldGenerator(field_scenario("piv"), seed=0)
    s = piv.sc.corr_length_m / math.sqrt(math.pi)
    r = piv.sc.dx if hasattr(piv.sc, "dx") else piv.sc.grid["dx"]
    centre = piv.sc.grid["nx"] * (piv.sc.grid["ny"] // 2) + piv.sc.grid["nx"] // 2
    assert abs(float(piv.K[centre] @ piv.K[centre + 1]) - math.exp(-(r**2) / (4 * s**2))) < 0.01


@pytest.mark.slow
def test_piv_scenario_through_the_pipeline_covers_the_truth(tmp_path):
    sc = field_scenario("piv")
    summary = tmp_path / "piv.jsonl"
    hits = total = 0
    for seed in range(3):
        pipe = Pipeline(summary=str(tmp_path / f"piv{seed}.jsonl"))
        for _, frames in field_messages(sc, seed=1750 + seed, point_id=f"F{seed}"):
            assert pipe.handle_frames(_raw(frames)) is None
        pipe.close()
        summary = tmp_path / f"piv{seed}.jsonl"
        line = json.loads(summary.read_text().splitlines()[0])
        assert line["samples"] == sc.snapshots and line["field"]["probes"] == sc.P
        with np.load(tmp_path / line["field"]["file"]) as z:
            assert (z["count"] < sc.snapshots).any()  # 2 % invalid vectors were left out
            for name, truth in sc.truth().items():
                lo, hi = z[name + "_ci_low"], z[name + "_ci_high"]
                hits += int(((lo <= truth) & (truth <= hi)).sum())
                total += sc.P
    coverage = hits / total
    print(f"piv scenario: coverage {coverage:.3f} over {total} intervals")
    assert 0.92 <= coverage <= 0.98
