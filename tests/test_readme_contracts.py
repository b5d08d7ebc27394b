"""The README states what the code does: the one exit-code table, every rejection reason, the
HDF5 point attributes and every scenario key (so a reader of the README is never misled)."""

from __future__ import annotations

import re

from conftest import REPO_DIR

from eddyvigil.monitor import wire
from eddyvigil.monitor.exitcodes import table_markdown
from eddyvigil.monitor.pipeline import PIPELINE_REJECTION_REASONS

README = (REPO_DIR / "README.md").read_text(encoding="utf-8")


def test_readme_holds_the_exit_code_table_once():
    assert README.count(table_markdown()) == 1


def test_readme_lists_every_rejection_reason():
    for reason in (*wire.REJECTION_REASONS, *PIPELINE_REJECTION_REASONS):
        assert f"`{reason}`" in README, reason


def test_readme_documents_every_scenario_key():
    from eddyvigil.simulator.faults import _KEYS as FAULT_KEYS
    from eddyvigil.simulator.scenario import PlaneWake

    section = README.split("## Scenario files", 1)[1].split("\n## ", 1)[0]
    keys = set(re.findall(r"`([A-Za-z_0-9]+)`", section))
    for k in PlaneWake.PARAMS:
        assert k in keys, k
    for k in FAULT_KEYS:
        assert k in keys, k
    for k in ("rate_hz", "point_seconds", "spectrum", "columns", "dtype", "nu", "c1",
              "sampling", "data_rate_hz", "probe_diameter_m", "stream", "mean", "stress",
              "tint_s", "length_m", "skew", "skew_a", "shedding", "note"):
        assert k in keys, k


def test_ci_script_names_only_files_in_the_repository():
    """`.ci/run` runs from a fresh clone: every file it names must be part of the repository."""
    import subprocess

    text = (REPO_DIR / ".ci" / "run").read_text(encoding="utf-8")
    tracked = set(
        subprocess.run(["git", "ls-files"], cwd=REPO_DIR, capture_output=True, text=True,
                       check=True).stdout.split()
    )
    named = set(re.findall(r"[\w./-]+\.(?:md|py|toml|txt|cfg|ini|json)\b", text))
    assert named, "the check must see the file names in .ci/run"
    for name in named:
        assert name in tracked, f".ci/run names {name}, which is not in the repository"
