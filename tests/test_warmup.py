"""First start: the kernels compile in the background while the socket is already open; no
message is handed on before they are ready, none is lost or reordered meanwhile, and the
preparation covers both wire dtypes. (Numbers of messages and their order are the reference:
every message sent is counted once, in the order sent; common practice.)"""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest
import zmq
from conftest import StreamWriter, tcp_endpoint, wait_for


def test_prepare_kernels_compiles_both_dtypes():
    from eddyvigil.stats.kernels import ingest_block
    from eddyvigil.stats.warmup import prepare_kernels

    seconds = prepare_kernels()
    assert seconds > 0
    dtypes = {np.dtype(str(sig[0].dtype)) for sig in ingest_block.signatures}
    assert {np.dtype("float32"), np.dtype("float64")} <= dtypes
    from eddyvigil.stats.field_kernels import field_ingest  # rakes and fields too

    assert {np.dtype(str(sig[0].dtype)) for sig in field_ingest.signatures} == dtypes


def test_warmup_sets_its_events_in_order_and_survives_a_failure(monkeypatch):
    import eddyvigil.stats.warmup as warmup_module

    calls = []
    monkeypatch.setattr(warmup_module, "exercise", lambda d, c: calls.append((d, c)))
    w = warmup_module.KernelWarmup().start()
    assert w.done.wait(30)
    assert w.imported.is_set() and w.ready.is_set() and w.error is None
    assert calls == list(warmup_module.PLAN)
    assert w.ready_after_s <= w.done_after_s

    def boom(d, c):
        raise RuntimeError("compiler trouble")

    monkeypatch.setattr(warmup_module, "exercise", boom)
    w = warmup_module.KernelWarmup().start()
    assert w.done.wait(30) and w.ready.is_set()  # nobody waits forever
    assert "compiler trouble" in w.error


@pytest.mark.parametrize("socket", ["sub", "pull"])
def test_messages_arriving_before_ready_are_kept_in_order(socket):
    """The socket is open before the kernels are ready: messages are received (SUB drops
    nothing even when more arrive than its queue holds) and handed on, in order and with
    their receive times, only once ``ready`` is set."""
    from eddyvigil.monitor.subscriber import Subscriber

    ep = tcp_endpoint()
    sub = Subscriber(ep, bind=True, socket=socket, rcvhwm=50)
    ctx = zmq.Context()
    pub = ctx.socket(zmq.PUB if socket == "sub" else zmq.PUSH)
    pub.setsockopt(zmq.LINGER, 0)
    pub.setsockopt(zmq.SNDHWM, 100_000)
    pub.connect(ep)
    ready = threading.Event()
    got: list[tuple[int, float]] = []
    w = StreamWriter()
    messages = [w.point("P1")] + [w.samples(np.zeros((8, 3), "<f4")) for _ in range(400)]
    thread = threading.Thread(
        target=sub.run,
        args=(lambda frames, t: got.append((len(got), t)),),
        kwargs={"ready": ready, "poll_ms": 20},
    )
    thread.start()
    try:
        time.sleep(0.5)  # SUB: the subscription reaches the publisher
        for m in messages:
            pub.send_multipart(m)
        wait_for(lambda: sub.messages == len(messages), timeout=30, what="all received")
        assert got == [] and sub.backlog_messages == len(messages)
        assert sub.backlog_bytes == sum(len(f) for m in messages for f in m)
        ready.set()
        wait_for(lambda: len(got) == len(messages), timeout=30, what="the backlog handed on")
    finally:
        sub.stop()
        thread.join(timeout=10)
        sub.close()
        pub.close(linger=0)
        ctx.term()
    times = [t for _, t in got]
    assert times == sorted(times) and sub.backlog_bytes == 0


def test_watch_opens_its_socket_before_the_kernels_are_ready(monkeypatch):
    """The socket no longer waits for the compile (on a fresh install, ~20 s)."""
    import eddyvigil.monitor.subscriber as subscriber_module
    import eddyvigil.stats.warmup as warmup_module
    from eddyvigil.monitor import cli

    release = threading.Event()
    seen = {}

    def slow_exercise(dtype, columns):
        release.wait(30)

    class NoSocket:
        def __init__(self, *a, **k):
            seen["ready at socket"] = warm_events[0].ready.is_set()
            raise subscriber_module.SubscriberError("no socket in this test")

    warm_events = []
    original = warmup_module.KernelWarmup.start

    def start(self):
        warm_events.append(self)
        return original(self)

    monkeypatch.setattr(warmup_module, "exercise", slow_exercise)
    monkeypatch.setattr(warmup_module.KernelWarmup, "start", start)
    monkeypatch.setattr(subscriber_module, "Subscriber", NoSocket)
    try:
        code = cli.main(["watch", "--connect", "tcp://127.0.0.1:9", "--no-dashboard", "--quiet"])
    finally:
        release.set()
    assert seen == {"ready at socket": False}
    assert code != 0
    warm_events[0].join(30)


@pytest.mark.parametrize("quiet", [False, True])
def test_slow_preparation_is_announced_unless_quiet(monkeypatch, capsys, quiet):
    import eddyvigil.stats.warmup as warmup_module
    from eddyvigil.monitor.watch import start_kernel_warmup

    monkeypatch.setattr(warmup_module, "exercise", lambda d, c: time.sleep(0.3))
    warm = start_kernel_warmup(quiet=quiet, notice_after_s=0.05)
    assert warm.done.wait(30)
    time.sleep(0.1)
    err = capsys.readouterr().err
    assert ("compiling the statistics kernels" in err) is (not quiet)


def test_a_quick_preparation_says_nothing(monkeypatch, capsys):
    """Loading compiled kernels from the cache is quick: no notice on an ordinary start."""
    import eddyvigil.stats.warmup as warmup_module
    from eddyvigil.monitor.watch import start_kernel_warmup

    monkeypatch.setattr(warmup_module, "exercise", lambda d, c: None)
    warm = start_kernel_warmup(quiet=False, notice_after_s=0.5)
    assert warm.done.wait(30)
    time.sleep(0.8)
    assert capsys.readouterr().err == ""
