"""Synthetic facility with known truth: signals, faults, scenarios and a paced publisher."""

from simulator.faults import MALFORMED_KINDS, MessageFaults, SampleFaults, malformed_frames
from simulator.scenario import (
    PointSpec,
    Scenario,
    ScenarioError,
    builtin_scenarios,
    load_scenario,
    moment_names,
    point_truth,
)
from simulator.signals import (
    VON_KARMAN_A,
    OUGenerator,
    RandomSampler,
    Shedding,
    TurbulenceGenerator,
    VonKarmanGenerator,
    cholesky_factor,
    generate,
    skew_moments,
    von_karman_epsilon,
    von_karman_psd,
)

__all__ = [
    "MALFORMED_KINDS",
    "MessageFaults",
    "SampleFaults",
    "malformed_frames",
    "PointSpec",
    "Scenario",
    "ScenarioError",
    "builtin_scenarios",
    "load_scenario",
    "moment_names",
    "point_truth",
    "VON_KARMAN_A",
    "OUGenerator",
    "RandomSampler",
    "Shedding",
    "TurbulenceGenerator",
    "VonKarmanGenerator",
    "cholesky_factor",
    "generate",
    "skew_moments",
    "von_karman_epsilon",
    "von_karman_psd",
]
