"""Kernels are prepared before the monitor opens a socket (a first-run compile must not drop
or stall data), and the preparation covers both wire dtypes."""

from __future__ import annotations

import numpy as np
import pytest


def test_prepare_kernels_compiles_both_dtypes():
    from eddyvigil.stats.kernels import ingest_block
    from eddyvigil.stats.warmup import prepare_kernels

    seconds = prepare_kernels()
    assert seconds > 0
    dtypes = {np.dtype(str(sig[0].dtype)) for sig in ingest_block.signatures}
    assert {np.dtype("float32"), np.dtype("float64")} <= dtypes


def test_watch_prepares_kernels_before_opening_its_socket(monkeypatch):
    import eddyvigil.monitor.subscriber as subscriber_module
    import eddyvigil.stats.warmup as warmup_module
    from eddyvigil.monitor import cli

    order = []

    def fake_prepare():
        order.append("prepare")
        return 0.0

    class NoSocket:
        def __init__(self, *a, **k):
            order.append("socket")
            raise subscriber_module.SubscriberError("no socket in this test")

    monkeypatch.setattr(warmup_module, "prepare_kernels", fake_prepare)
    monkeypatch.setattr(subscriber_module, "Subscriber", NoSocket)
    code = cli.main(["watch", "--connect", "tcp://127.0.0.1:9", "--no-dashboard", "--quiet"])
    assert order == ["prepare", "socket"]
    assert code != 0


@pytest.mark.parametrize("quiet", [False, True])
def test_slow_preparation_is_announced_unless_quiet(monkeypatch, capsys, quiet):
    import time

    import eddyvigil.stats.warmup as warmup_module
    from eddyvigil.monitor.watch import prepare_kernels

    monkeypatch.setattr(warmup_module, "prepare_kernels", lambda: time.sleep(0.3) or 0.3)
    prepare_kernels(quiet=quiet, notice_after_s=0.05)
    err = capsys.readouterr().err
    assert ("compiling the statistics kernels" in err) is (not quiet)


def test_a_quick_preparation_says_nothing(monkeypatch, capsys):
    """Loading compiled kernels from the cache is quick: no notice on an ordinary start."""
    import eddyvigil.stats.warmup as warmup_module
    from eddyvigil.monitor.watch import prepare_kernels

    monkeypatch.setattr(warmup_module, "prepare_kernels", lambda: 0.0)
    prepare_kernels(quiet=False)
    assert capsys.readouterr().err == ""
