"""Synthetic facility with known truth: signals, faults, scenarios and a paced publisher.

Public names are imported lazily (PEP 562) so that ``import eddyvigil.simulator.cli`` (done by
``eddyvigil --help``) does not pay for numba and scipy.
"""

from __future__ import annotations

from eddyvigil.stats.lazy import lazy_exports

_HOME = {
    "MALFORMED_KINDS": "faults",
    "MessageFaults": "faults",
    "SampleFaults": "faults",
    "malformed_frames": "faults",
    "PointSpec": "scenario",
    "Scenario": "scenario",
    "ScenarioError": "scenario",
    "builtin_scenarios": "scenario",
    "load_scenario": "scenario",
    "moment_names": "scenario",
    "point_truth": "scenario",
    "VON_KARMAN_A": "signals",
    "OUGenerator": "signals",
    "RandomSampler": "signals",
    "Shedding": "signals",
    "TurbulenceGenerator": "signals",
    "VonKarmanGenerator": "signals",
    "cholesky_factor": "signals",
    "generate": "signals",
    "skew_moments": "signals",
    "von_karman_epsilon": "signals",
    "von_karman_psd": "signals",
}

__all__ = list(_HOME)


__getattr__, __dir__ = lazy_exports(
    globals(), {name: f"eddyvigil.simulator.{module}" for name, module in _HOME.items()}
)
