"""CURVE authentication (DESIGN §7, §12): ``eddyvigil keys``, ``watch --curve-*``, ``simulate
--curve-*``, over real sockets on 127.0.0.1.

The outside reference is ZeroMQ's CURVE/ZAP behaviour (RFC 26 CurveZMQ, RFC 27 ZAP, as
implemented by libzmq and pyzmq's ``zmq.auth``): a peer with an allowed key completes the
handshake, any other never delivers a message. Checked: messages of an unauthenticated
publisher (no CURVE, or a key not in KEYDIR) never reach a statistic, an authenticated one's
do, with SUB and PULL, whether the monitor binds or connects; refusals are counted
(``refused_peers`` in the run line) and shown; without the options nothing changes.
"""

from __future__ import annotations

import io
import json
import threading
import time

import numpy as np
import pytest
import zmq
from conftest import StreamWriter, tcp_endpoint, wait_for

from eddyvigil.monitor import cli
from eddyvigil.monitor.keys import (
    Gatekeeper,
    KeyFileError,
    client_options,
    load_public,
    load_secret,
    write_keys,
)
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.monitor.subscriber import Subscriber


@pytest.fixture
def keys(tmp_path):
    """Our monitor's and publisher's keys, an allow folder holding the publisher's public key,
    and a stranger's key pair (made by the same command, so well-formed but not allowed)."""
    write_keys(tmp_path / "k")
    write_keys(tmp_path / "stranger")
    allow = tmp_path / "allow"
    allow.mkdir()
    (allow / "publisher.key").write_bytes((tmp_path / "k" / "publisher.key").read_bytes())
    return tmp_path / "k", allow, tmp_path / "stranger"


# ----------------------------------------------------------------------- key files


def test_keys_command_writes_four_files_and_never_overwrites(tmp_path, capsys):
    d = tmp_path / "keys"
    assert cli.main(["keys", str(d)]) == 0
    names = sorted(p.name for p in d.iterdir())
    assert names == ["monitor.key", "monitor.key_secret", "publisher.key", "publisher.key_secret"]
    pub, sec = load_secret(d / "monitor.key_secret")
    assert load_public(d / "monitor.key") == pub and len(sec) == 40
    assert (d / "publisher.key_secret").stat().st_mode & 0o077 == 0  # owner only
    before = (d / "monitor.key_secret").read_bytes()
    assert cli.main(["keys", str(d)]) == 5  # exit code table: an output exists
    assert (d / "monitor.key_secret").read_bytes() == before
    assert "never overwritten" in capsys.readouterr().err
    assert cli.main(["keys", str(tmp_path / "missing" / "keys")]) == 8  # cannot write there


def test_bad_key_files_are_refused_with_a_reason(keys, tmp_path):
    k, allow, _ = keys
    with pytest.raises(KeyFileError, match="no secret key"):
        load_secret(k / "monitor.key")
    (tmp_path / "junk.key").write_text("not a certificate\n")
    with pytest.raises(KeyFileError):
        load_public(tmp_path / "junk.key")
    with pytest.raises(KeyFileError, match="no such folder"):
        Gatekeeper(k / "monitor.key_secret", tmp_path / "nothing")
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(KeyFileError, match="no public key"):
        Gatekeeper(k / "monitor.key_secret", empty)


def test_watch_and_simulate_refuse_half_or_bad_curve_options(keys, tmp_path):
    k, allow, _ = keys
    ep = tcp_endpoint()
    base = ["watch", "--connect", ep, "--no-dashboard", "--quiet"]
    assert cli.main(base + ["--curve-secret", str(k / "monitor.key_secret")]) == 2
    assert cli.main(base + ["--curve-secret", str(k / "monitor.key"),
                            "--curve-allow", str(allow)]) == 4
    sim = ["simulate", "--connect", ep, "--quiet"]
    assert cli.main(sim + ["--curve-server-key", str(k / "monitor.key")]) == 2
    assert cli.main(sim + ["--curve-secret", str(tmp_path / "none.key_secret"),
                           "--curve-server-key", str(k / "monitor.key")]) == 4


# ----------------------------------------------------------------------- in one process


def _peer(ctx, kind, endpoint, bind, options):
    s = ctx.socket(kind)
    s.setsockopt(zmq.LINGER, 0)
    for opt, value in options.items():
        s.setsockopt(opt, value)
    (s.bind if bind else s.connect)(endpoint)
    return s


def _blocks(stream, seed, count=6):
    w = StreamWriter(stream=stream, session=f"{stream}-s")
    rng = np.random.default_rng(seed)
    msgs = [w.point("P1")]
    data = []
    for _ in range(count):
        b = (5.0 + rng.standard_normal((512, 3))).astype("<f4")
        data.append(b)
        msgs.append(w.samples(b))
    msgs.append(w.end())
    return msgs, np.concatenate(data)


@pytest.mark.parametrize("socket", ["sub", "pull"])
@pytest.mark.parametrize("monitor_binds", [True, False])
def test_only_the_allowed_publisher_reaches_the_statistics(keys, socket, monitor_binds):
    """Three publishers: ours (allowed key), a stranger (CURVE, key not allowed), one without
    CURVE. Only ours is counted; the other two are refused and counted as refused peers."""
    k, allow, stranger = keys
    gate = Gatekeeper(k / "monitor.key_secret", allow)
    server_pub = load_public(k / "monitor.key")
    ours = client_options(*load_secret(k / "publisher.key_secret"), server_pub)
    theirs = client_options(*load_secret(stranger / "publisher.key_secret"), server_pub)
    kind = zmq.PUB if socket == "sub" else zmq.PUSH
    names = ("ours", "stranger", "plain")
    endpoints = {n: tcp_endpoint() for n in names}
    ctx = zmq.Context()
    peers = {}
    sink = io.StringIO()
    pipeline = Pipeline(None, summary=sink)
    if monitor_binds:
        sub = Subscriber(endpoints["ours"], bind=True, socket=socket, curve=gate)
        for n, opts in zip(names, (ours, theirs, {}), strict=True):
            peers[n] = _peer(ctx, kind, endpoints["ours"], False, opts)
    else:  # the monitor connects to each publisher, which binds (one socket, three connects)
        for n, opts in zip(names, (ours, theirs, {}), strict=True):
            peers[n] = _peer(ctx, kind, endpoints[n], True, opts)
        sub = Subscriber(endpoints["ours"], bind=False, socket=socket, curve=gate)
        for n in names[1:]:
            sub.socket.connect(endpoints[n])
    events: list[str] = []
    thread = threading.Thread(
        target=sub.run, args=(pipeline.handle_frames,), kwargs={"on_event": events.append}
    )
    thread.start()
    try:
        wait_for(lambda: gate.refused_peers >= 2, timeout=30, what="both strangers refused")
        time.sleep(0.5)  # SUB: let our subscription reach the allowed publisher
        sent = {}
        for i, n in enumerate(names):
            msgs, data = _blocks(n, seed=i)
            sent[n] = data
            for frames in msgs:
                try:
                    peers[n].send_multipart(frames, zmq.NOBLOCK)
                except zmq.Again:  # PUSH without an accepted peer: nothing can leave
                    pass
        wait_for(lambda: "ours" in pipeline.streams_seen and pipeline.all_ended, timeout=30,
                 what="our stream to end")
        time.sleep(0.5)  # anything a stranger could have sent has had time to arrive
    finally:
        sub.stop()
        thread.join(timeout=10)
        # the strangers go first: libzmq aborts when a socket closes while a refused peer's
        # handshake is on its way to the ZAP handler (see Subscriber.close); with no peer left
        # retrying, closing is safe
        for s in peers.values():
            s.close(linger=0)
        ctx.term()
        time.sleep(0.5)
        sub.close()
    assert pipeline.streams_seen == ("ours",)
    pipeline.refused_peers = gate.refused_peers
    pipeline.close()
    summary = [json.loads(x) for x in sink.getvalue().splitlines()]
    run = summary[-1]
    assert run["kind"] == "run" and run["refused_peers"] >= 2
    assert run["samples"] == sent["ours"].shape[0]
    point = next(line for line in summary if line.get("kind") == "point")
    # the mean of what the allowed publisher sent (numpy as the reference; common practice)
    u = next(e for e in point["statistics"] if e["name"] == "U")
    assert u["value"] == pytest.approx(float(sent["ours"][:, 0].astype(np.float64).mean()),
                                       rel=1e-6)
    assert any("not in --curve-allow" in e for e in events)
    assert any("without CURVE" in e for e in events)


def test_without_curve_options_the_run_line_is_unchanged():
    sink = io.StringIO()
    p = Pipeline(None, summary=sink)
    p.close()
    run = json.loads(sink.getvalue().splitlines()[-1])
    assert run["kind"] == "run" and "refused_peers" not in run


# ----------------------------------------------------------------------- real processes


def _run_line(path):
    lines = [json.loads(x) for x in path.read_text().splitlines()]
    return lines[-1], lines


def _wait_ready(procs, p):
    wait_for(lambda: "waiting for the first message" in procs.output(p)[1] or p.poll() is not None,
             timeout=120, interval=0.2, what="watch to open its socket")
    assert p.poll() is None, procs.output(p)[1]


def test_processes_bind_pull_refuse_strangers_and_take_ours(procs, keys, tmp_path):
    """watch binds a PULL; a stranger's simulate and a plain one connect first and are refused;
    then ours delivers its whole traverse (rows equal to its own truth file)."""
    k, allow, stranger = keys
    ep = tcp_endpoint()
    summary = tmp_path / "s.jsonl"
    w = procs.eddyvigil("watch", "--bind", ep, "--socket", "pull", "--no-dashboard",
                        "--curve-secret", str(k / "monitor.key_secret"), "--curve-allow",
                        str(allow), "--summary", str(summary), name="watch")
    _wait_ready(procs, w)
    common = ["simulate", "--connect", ep, "--socket", "push", "--speed", "max",
              "--point-seconds", "0.5"]
    bad = procs.eddyvigil(*common, "--curve-secret", str(stranger / "publisher.key_secret"),
                          "--curve-server-key", str(k / "monitor.key"), name="stranger")
    plain = procs.eddyvigil(*common, name="plain")
    wait_for(lambda: procs.output(w)[1].count("refused so far") >= 2, timeout=120, interval=0.2,
             what="both strangers refused")
    good = procs.eddyvigil(*common, "--curve-secret", str(k / "publisher.key_secret"),
                           "--curve-server-key", str(k / "monitor.key"), "--truth",
                           str(tmp_path / "truth.json"), name="ours")
    assert procs.wait(good, 180) == 0
    assert procs.wait(w, 60) == 0, procs.output(w)[1]
    for p in (bad, plain):
        procs.interrupt(p)
    truth = json.loads((tmp_path / "truth.json").read_text())
    run, lines = _run_line(summary)
    assert run["samples"] == sum(pt["rows"] for pt in truth["points"])
    assert run["restarts"] == 0 and run["streams"] == [truth["stream"]]
    assert run["refused_peers"] >= 2
    assert sum(1 for x in lines if x.get("kind") == "point") == len(truth["points"])


def test_processes_connect_sub_takes_ours(procs, keys, tmp_path):
    """watch connects a SUB to our simulate's bound PUB (the monitor is still the CURVE server)."""
    k, allow, _ = keys
    ep = tcp_endpoint()
    summary = tmp_path / "s.jsonl"
    w = procs.eddyvigil("watch", "--connect", ep, "--no-dashboard", "--curve-secret",
                        str(k / "monitor.key_secret"), "--curve-allow", str(allow),
                        "--summary", str(summary), name="watch")
    _wait_ready(procs, w)
    good = procs.eddyvigil("simulate", "--bind", ep, "--speed", "4", "--point-seconds", "0.5",
                           "--wait-peer", "60", "--curve-secret",
                           str(k / "publisher.key_secret"), "--curve-server-key",
                           str(k / "monitor.key"), "--truth", str(tmp_path / "truth.json"),
                           name="ours")
    assert procs.wait(good, 180) == 0
    assert procs.wait(w, 60) == 0, procs.output(w)[1]
    truth = json.loads((tmp_path / "truth.json").read_text())
    run, _ = _run_line(summary)
    assert run["samples"] == sum(pt["rows"] for pt in truth["points"])
    assert run["refused_peers"] == 0 and run["lost"] == 0


def test_processes_connect_sub_refuses_a_stranger(procs, keys, tmp_path):
    """watch connects a SUB to a stranger's bound PUB: nothing reaches a statistic."""
    k, allow, stranger = keys
    ep = tcp_endpoint()
    summary = tmp_path / "s.jsonl"
    w = procs.eddyvigil("watch", "--connect", ep, "--no-dashboard", "--curve-secret",
                        str(k / "monitor.key_secret"), "--curve-allow", str(allow),
                        "--summary", str(summary), name="watch")
    _wait_ready(procs, w)
    bad = procs.eddyvigil("simulate", "--bind", ep, "--speed", "max", "--point-seconds", "30",
                          "--wait-peer", "0", "--settle", "0", "--curve-secret",
                          str(stranger / "publisher.key_secret"), "--curve-server-key",
                          str(k / "monitor.key"), name="stranger")
    wait_for(lambda: "not in --curve-allow" in procs.output(w)[1], timeout=120, interval=0.2,
             what="the stranger refused")
    time.sleep(1.0)  # it keeps publishing meanwhile
    rc = procs.interrupt(w)
    assert rc == 0, procs.output(w)[1][-3000:]
    procs.interrupt(bad)
    run, _ = _run_line(summary)
    assert run["messages"] == 0 and run["samples"] == 0 and run["streams"] == []
    assert run["refused_peers"] >= 1
