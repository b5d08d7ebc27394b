"""Coverage of the eps intervals on simulated streams with Pope's model spectrum (known truth)."""

import numpy as np
import pytest
from eddyvigil.simulator.signals import PopeGenerator, generate
from eddyvigil.stats.dissipation import dissipation
from eddyvigil.stats.spectra import SpectrumAccumulator


@pytest.mark.slow
def test_eps_inertial_and_iso_cover_the_truth():
    # truth: eps of Pope's model spectrum (Pope 2000, Turbulent Flows, §6.5); Re_lambda = 500,
    # U = 5 m/s, 20 kHz, 52 s per point; nominal 95 %, required >= 90 % over 100 points.
    # The mean speed converts time to space (Taylor) and is itself uncertain: its standard error
    # sqrt(2 u'^2 T_int / T) (REFERENCES §1, large-T form) enters the intervals.
    U, rate, nu, eps = 5.0, 20_000.0, 1.5e-5, 4.0
    hit_in, hit_iso, n_in, errors = 0, 0, 0, []
    points = 100
    for seed in range(points):
        gen = PopeGenerator([U], 1.5, eps, nu, rate, 7000 + seed)
        x = generate(gen, 1 << 20)
        spec = SpectrumAccumulator(("u",), rate, segment=16384).update(x).snapshot()
        se_u = np.sqrt(2 * gen.stress[0, 0] * gen.integral_time_s()[0] / (x.shape[0] / rate))
        d = dissipation(spec, float(x[:, 0].mean()), nu=nu, speed_stderr=se_u)
        assert d.eps_iso.stderr is not None
        hit_iso += d.eps_iso.ci_low <= eps <= d.eps_iso.ci_high
        if d.eps_inertial.value is not None:
            n_in += 1
            hit_in += d.eps_inertial.ci_low <= eps <= d.eps_inertial.ci_high
        errors.append(d.eps.value / eps - 1.0)
    assert hit_iso / points >= 0.90, hit_iso
    assert n_in >= 0.9 * points, n_in  # an inertial range is found at Re_lambda = 500
    assert hit_in / n_in >= 0.90, (hit_in, n_in)
    # the goal: eps within 10 % of truth at this point length
    assert np.max(np.abs(errors)) < 0.10
