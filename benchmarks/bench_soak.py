"""Soak: many streams for a long time, recording on, browsers coming and going, a publisher
that restarts and one that sends garbage. Prints figures over time; no assertions here (the
2-minute version with assertions is ``tests/test_soak.py``, marked ``slow``).

    nice -n 10 python benchmarks/bench_soak.py --minutes 10 [--streams 64 --rate 20000
        --rows 2048 --browsers 3]

Set-up (all real processes on 127.0.0.1):

- ``eddyvigil watch --bind ... --socket pull --record DIR --summary FILE`` with its dashboard;
- one publisher process with ``streams - 1`` streams of u, v, w float32, each paced at
  ``rate`` rows/s in ``rows``-row messages (PUSH: back-pressure, so nothing may be lost);
- one publisher of one stream that is stopped (SIGTERM) and started again every
  ``--restart-every`` seconds, each time with a new session;
- one process sending a malformed message (random bytes, broken JSON, wrong shape, in turn)
  every ``--garbage-every`` seconds;
- ``--browsers`` headless Chromium pages that open the dashboard, stay, reload, go away and
  come back at random (seeded), each showing stream ``s00`` and reading how far the newest
  sample of its trace is behind real time (lag: wall time since the publisher's sample clock
  started minus the sample's stream time; it includes any lag of the publisher itself).

Every ``--sample-every`` seconds: watch's RSS, open file descriptors, threads, CPU share,
dashboard connections, and the latest page lag. At the end every message is accounted for:
messages sent by all publishers = messages the run line counts; samples sent = samples
counted (less the rows of a restarted publisher's stragglers, rejected as ``late_session``);
malformed sent = the other rejections; lost = gaps = 0 (PUSH/PULL loses nothing). Before the
monitor is stopped the script waits until its recording stops growing (``drain_s``): a
lagging monitor still holds messages ZeroMQ delivered.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import signal
import socket
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from pathlib import Path

import numpy as np
import psutil
import zmq

from eddyvigil.monitor import wire

CHROMIUM, CHROMEDRIVER = "/usr/bin/chromium", "/usr/bin/chromedriver"


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def recording_bytes(rec: Path) -> int:
    """Bytes the monitor has recorded so far (it records every frame it has handled)."""
    return sum(f.stat().st_size for f in rec.rglob("*") if f.is_file()) if rec.exists() else 0


def wait_until_drained(rec: Path, quiet_s: float = 3.0, limit_s: float = 600.0) -> float:
    """Wait until the recording stops growing for ``quiet_s`` (the monitor has handled every
    message ZeroMQ delivered to it; a lagging monitor may hold many), at most ``limit_s``.
    Returns the seconds waited: stopping the monitor earlier would drop what it still holds."""
    start = last_change = time.monotonic()
    size = recording_bytes(rec)
    while time.monotonic() - start < limit_s:
        time.sleep(0.5)
        now_size = recording_bytes(rec)
        if now_size != size:
            size, last_change = now_size, time.monotonic()
        elif time.monotonic() - last_change >= quiet_s:
            break
    return time.monotonic() - start


# ----------------------------------------------------------------------- child processes


def publisher_main(endpoint, names, rate, rows, seconds, report, seed) -> int:
    """Paced PUSH of ``names`` streams; on SIGTERM (or after ``seconds``) stops; writes what it
    sent (messages, rows) to ``report`` after the queue has drained."""
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PUSH)
    sock.setsockopt(zmq.SNDHWM, 10_000)
    sock.setsockopt(zmq.IMMEDIATE, 1)  # queue only towards a connected monitor
    sock.connect(endpoint)
    rng = np.random.default_rng(seed)
    session = uuid.uuid4().hex[:12]
    base = (np.array([8.0, 0.4, 0.0]) + rng.standard_normal((rows * 8, 3))).astype("<f4")
    seq = dict.fromkeys(names, 0)
    sent_msgs, sent_rows = 0, 0

    def send(frames):
        nonlocal sent_msgs
        while True:  # PUSH back-pressure: wait, but let SIGTERM through
            try:
                sock.send_multipart(frames, flags=zmq.NOBLOCK, copy=False)
                sent_msgs += 1
                return True
            except zmq.Again:
                if stop.wait(0.005):
                    return False

    for n in names:
        send(wire.encode_point(n, session, seq[n], {"id": "P1", "y": 0.0}))
        seq[n] += 1
    t0 = time.monotonic()
    t0_wall = time.time()
    Path(f"{report}.start").write_text(json.dumps({"t0_wall": t0_wall}))
    blocks = 0
    while not stop.is_set() and time.monotonic() - t0 < seconds:
        due = t0 + (blocks + 1) * rows / rate
        if (wait := due - time.monotonic()) > 0 and stop.wait(wait):
            break
        off = (blocks % 7) * rows
        for n in names:
            frames = wire.encode_samples(n, session, seq[n], base[off:off + rows], ("u", "v", "w"),
                                         rate_hz=float(rate), t0=blocks * rows / rate)
            if not send(frames):
                break
            seq[n] += 1
            sent_rows += rows
        blocks += 1
    if seconds <= time.monotonic() - t0:  # ran its course: a proper end
        stop.clear()
        for n in names:
            send(wire.encode_end(n, session, seq[n]))
            seq[n] += 1
    stop.clear()
    sock.close(linger=-1)  # everything counted as sent reaches the monitor (or we are killed)
    ctx.term()
    Path(report).write_text(json.dumps({"messages": sent_msgs, "rows": sent_rows,
                                        "t0_wall": t0_wall, "session": session}))
    return 0


def garbage_main(endpoint, every_s, seconds, report, seed) -> int:
    stop = threading.Event()
    signal.signal(signal.SIGTERM, lambda *_: stop.set())
    ctx = zmq.Context()
    sock = ctx.socket(zmq.PUSH)
    sock.setsockopt(zmq.IMMEDIATE, 1)
    sock.connect(endpoint)
    rng = random.Random(seed)
    sent = 0
    t0 = time.monotonic()
    while not stop.wait(every_s) and time.monotonic() - t0 < seconds:
        kind = sent % 3
        if kind == 0:
            frames = [rng.randbytes(rng.randint(1, 200))]
        elif kind == 1:
            frames = [b"junk", b'{"v": 1, "kind": "samples", "stream": ', rng.randbytes(64)]
        else:  # consecutive seqs of its own, so that the rejections imply no gap
            good = wire.encode_samples("junk", "j1", sent // 3, np.zeros((10, 3), "<f4"),
                                       ("u", "v", "w"), rate_hz=1.0, t0=0.0)
            frames = [good[0], good[1], bytes(memoryview(good[2]).cast("B"))[:-5]]
        sock.send_multipart(frames)
        sent += 1
    sock.close(linger=10_000)
    ctx.term()
    Path(report).write_text(json.dumps({"messages": sent}))
    return 0


# ----------------------------------------------------------------------- browsers


class Browsers:
    """``count`` threads, each driving one headless Chromium at random (seeded)."""

    def __init__(self, url: str, count: int, seed: int, stop: threading.Event, t0_wall_of):
        self.url, self.stop, self.t0_wall_of = url, stop, t0_wall_of
        self.lags: list[float] = []
        self.loads: list[float] = []
        self.actions = {"open": 0, "reload": 0, "away": 0, "close": 0}
        self.errors: list[str] = []
        self.nulls: dict[str, int] = {}
        self.threads = [threading.Thread(target=self._run, args=(seed + i,), daemon=True)
                        for i in range(count)]

    def start(self):
        for t in self.threads:
            t.start()

    def join(self):
        for t in self.threads:
            t.join(timeout=60)

    def _driver(self):
        from selenium import webdriver
        from selenium.webdriver.chrome.service import Service

        os.environ["SE_OFFLINE"] = "true"
        opts = webdriver.ChromeOptions()
        opts.binary_location = CHROMIUM
        for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                     "--no-first-run", "--disable-background-networking",
                     "--disable-component-update", "--disable-sync",
                     f"--user-data-dir={tempfile.mkdtemp(prefix='soak-chromium-')}",
                     "--window-size=1280,900"):
            opts.add_argument(flag)
        return webdriver.Chrome(service=Service(CHROMEDRIVER), options=opts)

    def _open(self, d) -> None:
        t = time.monotonic()
        d.get(self.url)
        for _ in range(300):
            if d.execute_script("return window.Bokeh !== undefined && Bokeh.documents.length > 0"):
                self.loads.append(time.monotonic() - t)
                # show the first stream of the paced publisher (its clock's start is known)
                d.execute_script("const s = Bokeh.documents[0].get_model_by_name("
                                 "'stream_select'); if (s && s.options.includes('s00'))"
                                 " s.value = 's00';")
                time.sleep(1.0)  # a first update
                self._lag(d)
                return
            time.sleep(0.1)
        self.errors.append("page not ready in 30 s")

    def _lag(self, d) -> None:
        got = d.execute_script(
            "const doc = Bokeh.documents[0]; if (!doc) return null;"
            "const s = doc.get_model_by_name('trace_source'); const sel ="
            " doc.get_model_by_name('stream_select');"
            "if (!s) return 'no source'; const t = s.data.t ?? s.data.get('t');"
            "if (!t || t.length === 0) return 'no t';"
            "let m = -Infinity; for (const x of t) { if (x > m) m = x; }"
            "return [m, sel ? sel.value : null];")
        if isinstance(got, str):
            self.nulls[got] = self.nulls.get(got, 0) + 1
        elif got and got[1]:
            t0 = self.t0_wall_of(got[1])
            if t0 is not None:
                self.lags.append((time.time() - t0) - float(got[0]))

    def _run(self, seed: int) -> None:
        rng = random.Random(seed)
        d = None
        try:
            while not self.stop.is_set():
                if d is None:
                    d = self._driver()
                    self._open(d)
                    self.actions["open"] += 1
                action = rng.choice(("stay", "stay", "reload", "away", "close"))
                if action == "stay":
                    for _ in range(rng.randint(2, 8)):
                        if self.stop.wait(1.0):
                            break
                        self._lag(d)
                elif action == "reload":
                    self._open(d)
                    self.actions["reload"] += 1
                elif action == "away":  # the tab goes to sleep: the session closes
                    d.get("about:blank")
                    self.actions["away"] += 1
                    self.stop.wait(rng.uniform(1, 6))
                    self._open(d)
                else:
                    d.quit()
                    d = None
                    self.actions["close"] += 1
                    self.stop.wait(rng.uniform(1, 6))
        except Exception as exc:  # noqa: BLE001  (a browser failing is a figure, not a crash)
            self.errors.append(f"{type(exc).__name__}: {str(exc)[:200]}")
        finally:
            if d is not None:
                d.quit()


# ----------------------------------------------------------------------- the soak


def run_soak(seconds: float, *, streams: int = 64, rate: float = 20_000.0, rows: int = 2048,
             browsers: int = 3, restart_every_s: float = 30.0, garbage_every_s: float = 2.0,
             sample_every_s: float = 10.0, workdir: Path, seed: int = 0, log=print) -> dict:
    """Run the soak for ``seconds`` of publishing; returns figures and the accounting."""
    workdir = Path(workdir)
    ep = f"tcp://127.0.0.1:{free_port()}"
    dport = free_port()
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    py = [sys.executable, __file__]
    children: list[subprocess.Popen] = []
    err = open(workdir / "watch.err", "wb")  # noqa: SIM115
    watch = subprocess.Popen(
        [sys.executable, "-m", "eddyvigil.monitor", "watch", "--bind", ep, "--socket", "pull",
         "--record", str(workdir / "rec"), "--summary", str(workdir / "summary.jsonl"),
         "--port", str(dport)], stdout=subprocess.DEVNULL, stderr=err, env=env)
    err.close()
    children.append(watch)
    samples_log: list[dict] = []
    stop_browsers = threading.Event()
    reports: list[Path] = []
    browser_group = None
    try:
        deadline = time.monotonic() + 180
        while "dashboard at" not in (workdir / "watch.err").read_text(errors="replace"):
            if watch.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError("watch did not start:\n"
                                   + (workdir / "watch.err").read_text(errors="replace"))
            time.sleep(0.2)
        names = [f"s{i:02d}" for i in range(streams - 1)]
        main_report = workdir / "pub-main.json"
        reports.append(main_report)
        children.append(subprocess.Popen(
            py + ["--publisher", ep, "--names", ",".join(names), "--rate", str(rate), "--rows",
                  str(rows), "--seconds", str(seconds), "--report", str(main_report),
                  "--seed", str(seed)], env=env))
        garbage_report = workdir / "garbage.json"
        garbage = subprocess.Popen(
            py + ["--garbage", ep, "--every", str(garbage_every_s), "--seconds", str(seconds),
                  "--report", str(garbage_report), "--seed", str(seed)], env=env)
        children.append(garbage)
        t_start = time.monotonic()
        start_files = dict.fromkeys(names, Path(f"{main_report}.start"))

        def t0_wall_of(name):
            """Wall time at which the stream's sample clock started (its publisher's start)."""
            path = start_files.get(name)
            try:
                return json.loads(path.read_text())["t0_wall"] if path else None
            except (OSError, ValueError):
                return None

        if browsers:
            browser_group = Browsers(f"http://127.0.0.1:{dport}/", browsers, seed, stop_browsers,
                                     t0_wall_of)
            browser_group.start()
        restarts = 0
        restarter = None
        next_restart = t_start
        next_sample = t_start
        proc = psutil.Process(watch.pid)
        cpu_prev = (sum(proc.cpu_times()[:2]), time.monotonic())
        while time.monotonic() - t_start < seconds:
            now = time.monotonic()
            if now >= next_restart and now - t_start < seconds - 5:
                if restarter is not None:
                    restarter.send_signal(signal.SIGTERM)
                    restarter.wait(60)
                    restarts += 1
                rep = workdir / f"pub-restart-{restarts}.json"
                reports.append(rep)
                restarter = subprocess.Popen(
                    py + ["--publisher", ep, "--names", "restarting", "--rate", str(rate),
                          "--rows", str(rows), "--seconds", str(seconds - (now - t_start)),
                          "--report", str(rep), "--seed", str(seed + 1000 + restarts)], env=env)
                children.append(restarter)
                start_files["restarting"] = Path(f"{rep}.start")
                next_restart = now + restart_every_s
            if now >= next_sample:
                next_sample = now + sample_every_s
                cpu = sum(proc.cpu_times()[:2])
                share = (cpu - cpu_prev[0]) / max(1e-9, now - cpu_prev[1])
                cpu_prev = (cpu, now)
                conns = sum(1 for c in proc.net_connections(kind="tcp")
                            if c.laddr and c.laddr.port == dport and c.status == "ESTABLISHED")
                row = {"t": round(now - t_start, 1), "rss_mib": proc.memory_info().rss / 2**20,
                       "fds": proc.num_fds(), "threads": proc.num_threads(), "cpu": share,
                       "dash_conns": conns,
                       "lag_s": browser_group.lags[-1] if browser_group and browser_group.lags
                       else None}
                samples_log.append(row)
                lag = "-" if row["lag_s"] is None else f"{row['lag_s']:.2f} s"
                log(f"  t={row['t']:7.1f}s RSS {row['rss_mib']:7.1f} MiB fds {row['fds']:4d} "
                    f"threads {row['threads']:3d} cpu {share:4.2f} dashboard conns {conns:2d} "
                    f"lag {lag}")
            time.sleep(0.2)
        stop_browsers.set()
        if browser_group:
            browser_group.join()
        # publishers run to their end and send `end`; one that is behind (the monitor could
        # not keep up) still has queued messages: give it as long again, then say so
        killed = []
        for c in children[1:]:
            try:
                c.wait(max(120.0, seconds))
            except subprocess.TimeoutExpired:
                c.kill()
                killed.append(" ".join(c.args[2:4]))
        time.sleep(2.0)
        drained_s = wait_until_drained(workdir / "rec")
        settle = {"drain_s": drained_s, "dash_conns_after_browsers": sum(
            1 for c in proc.net_connections(kind="tcp")
            if c.laddr and c.laddr.port == dport and c.status == "ESTABLISHED")}
        watch.send_signal(signal.SIGTERM)
        watch.wait(120)
    finally:
        stop_browsers.set()
        for c in children:
            if c.poll() is None:
                c.kill()
                c.wait(10)
    sent = [json.loads(r.read_text()) for r in reports if r.exists()]
    garbage_sent = json.loads(garbage_report.read_text())["messages"]
    run = json.loads((workdir / "summary.jsonl").read_text().splitlines()[-1])
    watch_err = (workdir / "watch.err").read_text(errors="replace")
    return {
        "samples": samples_log,
        "run": run,
        "sent_messages": sum(s["messages"] for s in sent) + garbage_sent,
        "sent_rows": sum(s["rows"] for s in sent),
        "garbage_sent": garbage_sent,
        "publisher_reports": len(sent),
        "restarts_made": restarts,
        "browsers": None if not browser_group else {
            "actions": browser_group.actions, "errors": browser_group.errors,
            "lags": browser_group.lags, "loads": browser_group.loads,
            "no_reading": browser_group.nulls},
        "tracebacks": watch_err.count("Traceback"),
        "watch_exit": watch.returncode,
        "publishers_killed": killed,
        **settle,
    }


def summarise(res: dict, log=print) -> None:
    run, s = res["run"], res["samples"]
    rej = sum(run["rejected"].values())
    log(f"messages: sent {res['sent_messages']}, counted {run['messages']}; samples: sent "
        f"{res['sent_rows']}, counted {run['samples']}; malformed sent {res['garbage_sent']}, "
        f"rejected {rej} (late_session {run['rejected'].get('late_session', 0)}, drained in "
        f"{res.get('drain_s', 0):.1f} s); lost {run['lost']}, gaps {run['gaps']}; restarts made "
        f"{res['restarts_made']}, counted {run['restarts']}")
    if s:
        rss = [r["rss_mib"] for r in s]
        log(f"RSS: first sample {rss[0]:.0f} MiB, middle {rss[len(rss) // 2]:.0f}, last "
            f"{rss[-1]:.0f}, peak {max(rss):.0f}; fds {s[0]['fds']}..{max(r['fds'] for r in s)}"
            f" (last {s[-1]['fds']}); threads {s[0]['threads']}..{max(r['threads'] for r in s)}"
            f" (last {s[-1]['threads']}); mean CPU share {np.mean([r['cpu'] for r in s]):.2f}")
    b = res["browsers"]
    if b:
        lag = (f"lag median {np.median(b['lags']):.2f} s, p95 {np.percentile(b['lags'], 95):.2f}"
               f" s, max {max(b['lags']):.2f} s" if b["lags"] else "no lag reading")
        load = f"{np.median(b['loads']):.1f} s" if b["loads"] else "-"
        log(f"browsers: {b['actions']}; page ready median {load}; {lag} over "
            f"{len(b['lags'])} readings (none: {b['no_reading']}); errors {b['errors'][:3]}")
    if res["publishers_killed"]:
        log(f"NOT ACCOUNTED: publishers killed with messages still queued: "
            f"{res['publishers_killed']}")
    log(f"dashboard connections after the browsers closed: {res['dash_conns_after_browsers']}; "
        f"tracebacks in watch's stderr: {res['tracebacks']}; watch exit {res['watch_exit']}")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--minutes", type=float, default=10.0)
    ap.add_argument("--streams", type=int, default=64)
    ap.add_argument("--rate", type=float, default=20_000.0)
    ap.add_argument("--rows", type=int, default=2048)
    ap.add_argument("--browsers", type=int, default=3)
    ap.add_argument("--restart-every", type=float, default=30.0)
    ap.add_argument("--garbage-every", type=float, default=2.0)
    ap.add_argument("--sample-every", type=float, default=30.0)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--workdir", help="keep the recording, summary and logs here")
    # child roles
    ap.add_argument("--publisher", help=argparse.SUPPRESS)
    ap.add_argument("--garbage", help=argparse.SUPPRESS)
    ap.add_argument("--names", help=argparse.SUPPRESS)
    ap.add_argument("--seconds", type=float, help=argparse.SUPPRESS)
    ap.add_argument("--report", help=argparse.SUPPRESS)
    ap.add_argument("--every", type=float, help=argparse.SUPPRESS)
    a = ap.parse_args()
    if a.publisher:
        return publisher_main(a.publisher, a.names.split(","), a.rate, a.rows, a.seconds,
                              a.report, a.seed)
    if a.garbage:
        return garbage_main(a.garbage, a.every, a.seconds, a.report, a.seed)
    print(f"soak: {a.streams} streams x 3 float32 at {a.rate:g} Hz in {a.rows}-row messages "
          f"({a.streams * a.rate / a.rows:.0f} messages/s, {a.streams * a.rate / 1e6:.2f} M "
          f"samples/s), {a.browsers} browsers, {a.minutes:g} min; load average "
          f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores", flush=True)
    work = a.workdir or tempfile.mkdtemp(prefix="eddyvigil-soak-")
    Path(work).mkdir(parents=True, exist_ok=True)
    print(f"working folder (recording, summary, watch's stderr; remove it yourself): {work}")
    if True:
        res = run_soak(a.minutes * 60.0, streams=a.streams, rate=a.rate, rows=a.rows,
                       browsers=a.browsers, restart_every_s=a.restart_every,
                       garbage_every_s=a.garbage_every, sample_every_s=a.sample_every,
                       workdir=Path(work), seed=a.seed,
                       log=lambda s: print(s, flush=True))
        summarise(res)
    return 0


if __name__ == "__main__":
    sys.exit(main())
