"""Convergence on eps (stats/eps_target.py): scale, states, ETA, and through PointSpectra."""

from __future__ import annotations

import math

import numpy as np
import pytest
from eddyvigil.simulator.signals import PopeGenerator, generate
from eddyvigil.stats import PointStatistics, Targets
from eddyvigil.stats.dissipation import Quantity
from eddyvigil.stats.eps_target import MIN_SEGMENTS, STREAK, EpsTarget, eps_scale
from eddyvigil.stats.point_spectra import PointSpectra, summary_fields


def test_scale_is_k_to_three_halves_over_L():
    # eps ~ k^{3/2}/L: the large-eddy estimate of the cascade rate (Taylor 1935; Pope 2000,
    # Turbulent Flows, §6.1, from memory); it cannot vanish while there is turbulence
    assert eps_scale(2.0, 0.1) == pytest.approx(2.0**1.5 / 0.1, rel=1e-15)
    assert math.isnan(eps_scale(0.0, 0.1)) and math.isnan(eps_scale(1.0, float("nan")))
    t = EpsTarget(relative=0.05)
    assert t.tolerance(2.0, 0.1) == pytest.approx(0.05 * 2.0**1.5 / 0.1)
    assert EpsTarget(absolute=0.3).tolerance(float("nan"), 0.1) == 0.3
    with pytest.raises(ValueError):
        EpsTarget(relative=0.1, absolute=0.2)


def test_states_streak_and_eta():
    t = EpsTarget(absolute=0.1)
    kw = dict(k=1.0, length_m=0.1)
    none = t.evaluate(Quantity.missing("no flat range"), segments=100, duration_s=5, **kw)
    assert none.state == "no-interval" and none.reason == "no flat range" and not none.converged
    q = Quantity(1.0, 0.1, 0.8, 1.2)  # half-width 0.2 = twice the target
    assert t.evaluate(q, segments=MIN_SEGMENTS - 1, duration_s=5, **kw).state == "warming-up"
    s = t.evaluate(q, segments=MIN_SEGMENTS, duration_s=10.0, **kw)
    # half-width ~ 1/sqrt(T) (Welch 1967: independent segments): 4x the record, 30 s more
    assert s.state == "converging" and s.eta_s == pytest.approx(30.0)
    ok = Quantity(1.0, 0.04, 0.92, 1.08)
    states = [t.evaluate(ok, segments=MIN_SEGMENTS + i, duration_s=20, **kw).state
              for i in range(1, STREAK + 1)]
    assert states == ["confirming"] * (STREAK - 1) + ["converged"]
    # the same segments again is no new evidence
    assert t.evaluate(ok, segments=MIN_SEGMENTS + STREAK, duration_s=20, **kw).converged
    # a miss resets the streak
    assert t.evaluate(q, segments=MIN_SEGMENTS + STREAK + 1, duration_s=21, **kw).state == (
        "converging")


def test_eps_target_through_point_spectra_on_pope_turbulence():
    """A Pope-spectrum stream (Pope 2000, Turbulent Flows, §6.5; REFERENCES §7): with eps
    targeted at 10 % of k^{3/2}/L_u the row reaches "converged" and the interval holds the
    model's eps; with an impossible target it stays "converging" with a finite ETA."""
    rate, nu = 20_000.0, 1.5e-5
    gen = PopeGenerator([5.0, 0.0, 0.0], 0.6, 2.0, nu, rate, seed=11)
    truth = gen.truth()["eps"]
    cols = ("u", "v", "w")
    states = {}
    for name, spec in (("loose", {"relative": 0.1}), ("tight", {"absolute": 1e-4})):
        targets = Targets.from_dict({"targets": {"eps": spec, "U": {"relative": 0.01}}})
        ps = PointSpectra(cols, rate, targets=targets)
        st = PointStatistics(cols, rate, targets=targets)
        seen = []
        gen = PopeGenerator([5.0, 0.0, 0.0], 0.6, 2.0, nu, rate, seed=11)
        for _ in range(8):
            x = generate(gen, 50_000)
            st.update(x)
            ps.update(x)
            snap = st.snapshot()
            ps.evaluate(snap, nu)
            seen.append(ps.eps_status.state)
        _, rows = summary_fields(ps, snap, {"nu": nu})
        eps_row = rows[0]
        assert eps_row["name"] == "eps" and eps_row["target"] is not None
        states[name] = (seen, eps_row)
    seen, row = states["loose"]
    assert seen[-1] == "converged" and row["converged"] is True
    assert row["ci_low"] <= truth <= row["ci_high"]
    seen, row = states["tight"]
    assert set(seen) <= {"warming-up", "converging"} and row["state"] == "converging"
    assert row["eta_s"] > 0 and np.isfinite(row["eta_s"])
