"""The ``eddyvigil`` command runs with one BLAS thread unless the environment says otherwise.

Common practice for small dense products: OpenBLAS's idle worker threads spin, and the
blocking matrices (34 x 34) gain nothing from a second thread. The setting only works if it
is made before numpy loads its BLAS, so importing ``eddyvigil.monitor.cli`` must not load numpy.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

pytestmark = pytest.mark.integration  # real sockets or child processes

PROBE = """
import os, sys
from eddyvigil.monitor import cli
print("numpy-before-main", "numpy" in sys.modules)
try:
    cli.main(["export", "--help"])
except SystemExit:
    pass
print("numpy-after-main", "numpy" in sys.modules)
print("blas-threads", os.environ.get("OPENBLAS_NUM_THREADS"))
"""


def _probe(env_blas: str | None) -> dict[str, str]:
    env = {k: v for k, v in os.environ.items() if k != "OPENBLAS_NUM_THREADS"}
    if env_blas is not None:
        env["OPENBLAS_NUM_THREADS"] = env_blas
    out = subprocess.run(
        [sys.executable, "-c", PROBE], env=env, capture_output=True, text=True, timeout=120
    )
    assert out.returncode == 0, out.stderr
    keys = ("numpy-before-main", "numpy-after-main", "blas-threads")
    pairs = (line.split(" ", 1) for line in out.stdout.splitlines() if " " in line)
    return {k: v for k, v in pairs if k in keys}


def test_cli_sets_one_blas_thread_before_numpy_loads():
    got = _probe(None)
    assert got["numpy-before-main"] == "False"
    assert got["numpy-after-main"] == "True"  # the sub-command modules did load it, after
    assert got["blas-threads"] == "1"


def test_cli_keeps_the_users_blas_setting():
    assert _probe("2")["blas-threads"] == "2"
