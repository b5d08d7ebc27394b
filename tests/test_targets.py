"""Targets file (DESIGN §5): parsing, refusal of malformed files, resolving relative scales.

Expected values are computed by hand from the scale definitions of DESIGN §5
(|U| = sqrt(U^2 + V^2 + W^2); second moments scale with k, third with k^(3/2), fourth with k^2).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from eddyvigil.stats.names import statistic_names
from eddyvigil.stats.targets import DEFAULT_TARGETS, Target, Targets, TargetsError

DESIGN_EXAMPLE = """\
confidence = 0.95
[targets]
U   = { relative = 0.01 }     # ±1 % of the velocity scale
V   = { relative = 0.01 }
uu  = { relative = 0.05 }     # ±5 % of k
uv  = { absolute = 0.02 }     # m²/s²
uuv = { relative = 0.15 }     # ±15 % of k^(3/2)
"""

# U = 3, V = 4 gives |U| = 5 exactly; k = 4 gives k^(3/2) = 8, k^2 = 16 (hand arithmetic).
VALUES = {"U": 3.0, "V": 4.0, "k": 4.0, "uu": 2.5, "uv": -0.7}


@pytest.fixture
def example(tmp_path):
    p = tmp_path / "targets.toml"
    p.write_text(DESIGN_EXAMPLE, encoding="utf-8")
    return p


def test_design_example_parses_and_resolves_to_hand_values(example):
    t = Targets.from_toml(example)
    assert t.confidence == 0.95
    assert list(t.targets) == ["U", "V", "uu", "uv", "uuv"]
    assert t.targets["uv"] == Target("uv", absolute=0.02)
    # means: 1 % of sqrt(|U|^2 + 2k/3) = sqrt(25 + 8/3) (hand arithmetic)
    assert t.resolve("U", VALUES) == pytest.approx(0.01 * np.sqrt(25 + 8 / 3), rel=1e-15)
    assert t.resolve("V", VALUES) == pytest.approx(0.05 * np.sqrt(25 + 8 / 3) / 5, rel=1e-15)
    assert t.resolve("uu", VALUES) == pytest.approx(0.05 * 4.0, rel=1e-15)
    assert t.resolve("uv", VALUES) == 0.02
    assert t.resolve("uuv", VALUES) == pytest.approx(0.15 * 8.0, rel=1e-15)
    # A file replaces the default list: W and k are not targeted by this one.
    assert t.resolve("W", VALUES) is None
    assert t.resolve("k", VALUES) is None


def test_mean_speed_uses_only_the_components_present():
    t = Targets.from_dict({"targets": {"U": {"relative": 0.02}}})
    assert t.resolve("U", {"U": -6.0}) == pytest.approx(0.12)  # one component: |U|
    # 2^2 + 3^2 + 6^2 = 49, plus 2k/3 = 2 (hand arithmetic)
    assert t.resolve("U", {"U": 2.0, "V": -3.0, "W": 6.0, "k": 3.0}) == pytest.approx(
        0.02 * np.sqrt(51.0)
    )


@pytest.mark.parametrize(
    ("name", "scale"),
    [
        ("U", float(np.sqrt(25.0 + 8.0 / 3.0))),
        ("uu", 4.0),
        ("k", 4.0),
        ("vw", 4.0),
        ("uvw", 8.0),
        ("www", 8.0),
        ("uuvv", 16.0),
        ("skew_u", 1.0),
        ("flat_w", 1.0),
        ("Tint_u", 0.003),
        ("Neff_v", 1200.0),
        ("L_u", 0.05),
    ],
)
def test_scales_by_family(name, scale):
    # means: sqrt(|U|^2 + 2k/3) = sqrt(9 + 16 + 8/3), covered by the "U" case below
    values = {
        "U": 3.0,
        "V": 4.0,
        "k": 4.0,
        "Tint_u": 0.003,
        "Neff_v": 1200.0,
        "L_u": -0.05,
        "eps": 12.5,
        "eta": 1.2e-4,
    }
    t = Targets.from_dict({"targets": {name: {"relative": 0.1}}})
    assert t.scale(name, values) == pytest.approx(scale, rel=1e-14)
    assert t.resolve(name, values) == pytest.approx(0.1 * scale, rel=1e-14)


def test_unknown_scale_gives_nan_and_absolute_needs_no_scale():
    t = Targets.from_dict(
        {
            "targets": {
                "uu": {"relative": 0.05},
                "uv": {"absolute": 0.01},
                "U": {"relative": 0.01},
                "Tint_u": {"relative": 0.1},
            }
        }
    )
    assert math.isnan(t.resolve("uu", {"k": math.nan}))
    assert math.isnan(t.resolve("uu", {}))
    assert math.isnan(t.resolve("uu", {"k": 0.0}))  # zero scale: a tolerance that can never be met
    assert math.isnan(t.resolve("U", {"U": math.nan, "V": 1.0}))
    assert math.isnan(t.resolve("Tint_u", {"Tint_u": math.nan}))
    assert t.resolve("uv", {"k": math.nan}) == 0.01


def test_defaults_are_the_documented_ones():
    t = Targets.defaults()
    assert t.confidence == 0.95
    assert dict((n, x.relative) for n, x in t.targets.items()) == {
        "U": 0.01,
        "V": 0.01,
        "W": 0.01,
        "uu": 0.05,
        "vv": 0.05,
        "ww": 0.05,
        "uv": 0.05,
        "uw": 0.05,
        "vw": 0.05,
        "k": 0.05,
    }
    assert all(x.absolute is None for x in t.targets.values())
    assert dict(DEFAULT_TARGETS) == {n: x.relative for n, x in t.targets.items()}
    text = t.describe()
    for name in t.targets:
        assert f"  {name} " in text
    assert "±1 % of the velocity scale" in text and "±5 % of k" in text and "95 %" in text
    # DESIGN §5 values: |U| = 5 m/s; with k = 0.375 the scale is sqrt(25 + 0.25) (see
    # _scales: it stays positive where |U| vanishes).
    assert t.resolve("W", {"U": 3.0, "V": 4.0, "W": 0.0, "k": 0.375}) == pytest.approx(
        0.01 * np.sqrt(25.25)
    )
    # Every untargeted name of a full 3-component stream resolves to None.
    for name in statistic_names(("u", "v", "w")):
        assert (t.resolve(name, VALUES) is None) == (name not in t.targets)


def test_file_without_targets_table_keeps_defaults(tmp_path):
    p = tmp_path / "c.toml"
    p.write_text("confidence = 0.99\n", encoding="utf-8")
    t = Targets.from_toml(p)
    assert t.confidence == 0.99
    assert t.targets == Targets.defaults().targets


def test_round_trip_and_read_only(example):
    t = Targets.from_toml(example)
    assert Targets.from_dict(t.to_dict()) == t
    with pytest.raises(TypeError):
        t.targets["U"] = Target("U", relative=0.5)  # type: ignore[index]
    with pytest.raises(AttributeError):
        t.confidence = 0.5  # type: ignore[misc]
    assert "±0.02 m^2/s^2" in t.describe() and "±15 % of k^(3/2)" in t.describe()


@pytest.mark.parametrize(
    ("text", "must_say"),
    [
        ("confidence = 0.95\n[targets]\nU = { relative = 0.01 \n", ["not valid TOML", "line 3"]),
        ("[targets]\nUVW = { relative = 0.01 }\n", ["UVW", "unknown statistic name"]),
        ("[targets]\nUV = { relative = 0.01 }\n", ["UV", "unknown statistic name", "'uv'"]),
        ("[targets]\nuuvvw = { relative = 0.01 }\n", ["uuvvw", "unknown statistic name"]),
        ("[targets]\nuv = { relativ = 0.01 }\n", ["uv", "unknown key 'relativ'", "'relative'"]),
        ("[targets]\nuv = { relative = 0.1, absolute = 0.02 }\n", ["uv", "exactly one"]),
        ("[targets]\nuv = {}\n", ["uv", "exactly one"]),
        ("[targets]\nuv = { relative = -0.05 }\n", ["uv", "positive and finite"]),
        ("[targets]\nuv = { relative = 0 }\n", ["uv", "positive and finite"]),
        ("[targets]\nuv = { absolute = inf }\n", ["uv", "positive and finite"]),
        ("[targets]\nuv = { absolute = nan }\n", ["uv", "positive and finite"]),
        ("[targets]\nuv = { relative = '5 %' }\n", ["uv", "must be a number", "str"]),
        ("[targets]\nuv = { relative = true }\n", ["uv", "must be a number", "bool"]),
        ("[targets]\nuv = 0.05\n", ["uv", "inline table"]),
        ("confidence = 1.0\n", ["confidence", "between 0 and 1"]),
        ("confidence = 0\n", ["confidence", "between 0 and 1"]),
        ("confidence = 95\n", ["confidence", "between 0 and 1"]),
        ("confidence = '95 %'\n", ["confidence", "between 0 and 1"]),
        ("confidense = 0.9\n", ["unknown setting 'confidense'", "'confidence'"]),
        ("targets = 3\n", ["'targets' must be a table"]),
        ("[targets]\n", ["[targets] table is empty"]),
    ],
)
def test_malformed_files_are_refused_with_a_reason(tmp_path, text, must_say):
    p = tmp_path / "bad.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(TargetsError) as info:
        Targets.from_toml(p)
    msg = str(info.value)
    assert str(p) in msg
    for piece in must_say:
        assert piece in msg, (piece, msg)


def test_unreadable_files_are_refused(tmp_path):
    with pytest.raises(TargetsError, match="cannot read the targets file"):
        Targets.from_toml(tmp_path / "missing.toml")
    p = tmp_path / "latin1.toml"
    p.write_bytes(b"# caf\xe9\nconfidence = 0.9\n")
    with pytest.raises(TargetsError, match="not valid TOML"):
        Targets.from_toml(p)
    with pytest.raises(TargetsError, match="cannot read"):
        Targets.from_toml(tmp_path)  # a directory


def test_from_dict_refuses_non_mappings_and_bad_direct_construction():
    with pytest.raises(TargetsError, match="expected a table"):
        Targets.from_dict([("U", 0.01)])  # type: ignore[arg-type]
    with pytest.raises(TargetsError, match="exactly one"):
        Target("U")
    with pytest.raises(TargetsError, match="positive and finite"):
        Target("U", relative=-1.0)
    with pytest.raises(TargetsError, match="between 0 and 1"):
        Targets(confidence=1.5)
    with pytest.raises(TargetsError, match="must be a Target named"):
        Targets(targets={"U": Target("V", relative=0.1)})


@pytest.mark.parametrize("name", ["eta"])
def test_targets_on_statistics_not_estimated_are_refused(name):
    # a target that nothing computes could never be met; it must not be silently ignored
    with pytest.raises(TargetsError, match="does not estimate it yet"):
        Targets.from_dict({"targets": {name: {"relative": 0.1}}})


def test_mean_scale_stays_positive_where_the_mean_speed_vanishes():
    # A recirculation zone: |U| ~ 0 while k is not. The scale sqrt(|U|^2 + 2k/3) is then the
    # rms of one component of isotropic turbulence (Pope 2000, Turbulent Flows, k = 3/2 u'^2),
    # so a 1 % target on U is 1 % of u' instead of 1 % of nearly nothing.
    t = Targets.from_dict({"targets": {"U": {"relative": 0.01}}})
    assert t.resolve("U", {"U": 1e-4, "k": 1.5}) == pytest.approx(0.01 * np.sqrt(1e-8 + 1.0))
    plan = t.plan(("U", "k"))
    assert plan.resolve([0.0, 1.5]) == [pytest.approx(0.01), None]


def test_a_target_on_eps_is_accepted():
    # eps is judged beside the moments (stats/eps_target.py), relative to k^(3/2)/L_u
    t = Targets.from_dict({"targets": {"eps": {"relative": 0.05}, "U": {"relative": 0.01}}})
    assert t.targets["eps"].relative == 0.05
