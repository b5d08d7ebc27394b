"""The scenario key ``skew`` is the skewness itself (``skew_a`` the generator's parameter).

Reference: y = z + a(z^2 - 1) for Gaussian z has skewness (6a + 8a^3)/(1 + 2a^2)^{3/2}
(REFERENCES §10, the check value a = 0.1 -> 0.590206 marked [V] there); the realised sample
skewness is measured with scipy.stats.skew (the common moment estimator g1).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats as sps

from eddyvigil.simulator.scenario import (
    MAX_SKEWNESS,
    ScenarioError,
    load_scenario,
    skew_parameter,
)
from eddyvigil.simulator.signals import skew_moments

TOML = """\
[scenario]
name = "skewed"
rate_hz = 1000.0
point_seconds = 10.0
columns = ["u", "v", "w"]

[[points]]
id = "S1"
mean = [5.0, 0.0, 0.0]
stress = [[0.5, -0.1, 0.0], [-0.1, 0.3, 0.0], [0.0, 0.0, 0.2]]
tint_s = 0.0002     # 0.2 sample steps: nearly independent samples
{key} = {value}
"""


def _scenario(tmp_path, key, value):
    path = tmp_path / "skewed.toml"
    path.write_text(TOML.format(key=key, value=value))
    return load_scenario(str(path))


def test_skew_parameter_inverts_the_published_formula():
    # REFERENCES §10 check value: a = 0.1 gives skewness 0.590206
    assert abs(float(skew_parameter(0.590206)) - 0.1) < 1e-6
    for s in (-2.5, -0.6, 0.0, 0.3, 0.6, 1.9, MAX_SKEWNESS):
        a = float(skew_parameter(s))
        assert abs(float(skew_moments(a)[0]) - s) < 1e-12


@pytest.mark.parametrize("requested", [0.6, -0.4])
def test_requested_skewness_is_realised(tmp_path, requested):
    sc = _scenario(tmp_path, "skew", requested)
    point = sc.points[0]
    gen = sc.make_generator(point, 12345)
    u = np.asarray(gen.next_block(400_000))[:, 0]
    measured = float(sps.skew(u))
    # 400 000 nearly independent samples: the standard error of g1 is about 0.01 here
    assert abs(measured - requested) < 0.05, measured


def test_skew_a_keeps_the_generator_parameter_and_is_not_the_skewness(tmp_path):
    """The issue's case: a = 0.6 gives a skewness of 2.36, not 0.6 (REFERENCES §10 formula)."""
    sc = _scenario(tmp_path, "skew_a", 0.6)
    assert sc.points[0].skew[0] == 0.6
    s, _ = skew_moments(0.6)
    assert abs(float(s) - 2.362) < 1e-3


def test_impossible_skewness_and_both_keys_are_refused(tmp_path):
    with pytest.raises(ScenarioError, match="skewness"):
        _scenario(tmp_path, "skew", 3.5)
    path = tmp_path / "both.toml"
    path.write_text(TOML.format(key="skew", value=0.5) + "skew_a = 0.1\n")
    with pytest.raises(ScenarioError, match="not both"):
        load_scenario(str(path))
