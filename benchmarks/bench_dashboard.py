"""Dashboard figures: tick time, page lag and server CPU with one headless browser attached.

    python benchmarks/bench_dashboard.py [--seconds 10]

1. Periodic-callback time per tick (in-process Bokeh Document, snapshot with a full
   2000-row trace and 2000-row history, 10 targeted statistics, 9 finished points).
2. Page lag: the snapshot source stamps the trace's last time with the wall clock when the
   snapshot is made (as the pipeline would for a sample just received); the browser reads the
   newest trace time from its own copy of the data and compares it with its clock.
3. Server CPU (process CPU time / wall time) while one browser is attached.
4. With a real Pipeline (all statistics) fed in-process from a thread, as ``watch`` runs it:
   a. page lag at a paced 1 M samples/s (3 components, 16384-row messages): the browser's
      newest trace time against the feeder's data clock;
   b. ingest throughput at max speed with the dashboard (server + one browser) on, against
      the same feed with no dashboard, measured in this one run.
Prints figures only; no assertions.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import psutil

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from bokeh.document import Document  # noqa: E402

from eddyvigil.monitor.dashboard.app import build_document  # noqa: E402
from eddyvigil.monitor.dashboard.preview import PreviewRun  # noqa: E402
from eddyvigil.monitor.dashboard.server import DashboardServer  # noqa: E402
from eddyvigil.monitor.state import RunSnapshot, StreamView  # noqa: E402


class StampedRun:
    """Preview run whose trace ends at the wall clock time the snapshot was made."""

    def __init__(self):
        self.run = PreviewRun(point_s=12.0, points=9)
        self.start = time.time()

    def snapshot(self) -> RunSnapshot:
        now = time.time()
        snap = self.run.snapshot(30.0 + (now - self.start))
        view = next(iter(snap.streams.values()))
        t = np.linspace(now - 2.0, now, 2000)
        trace = {"t": t, "u": 8 + np.sin(t * 40), "v": np.cos(t * 33), "w": np.sin(t * 21)}
        fields = {f: getattr(view, f) for f in StreamView.__dataclass_fields__}
        fields["trace"] = trace
        return RunSnapshot(snap.sequence, now, {view.stream: StreamView(**fields)})


def bench_tick(n: int = 200) -> None:
    src = StampedRun()
    snaps = [src.snapshot() for _ in range(n)]
    it = iter(snaps)
    doc = Document()
    build_document(doc, get_snapshot=lambda: next(it))
    cb = next(iter(doc.session_callbacks)).callback
    times = []
    for _ in range(n - 1):
        t0 = time.perf_counter()
        cb()
        times.append(time.perf_counter() - t0)
    ms = np.array(times) * 1e3
    print(f"tick (periodic callback) time: median {np.median(ms):.2f} ms, "
          f"p95 {np.percentile(ms, 95):.2f} ms over {len(ms)} ticks")


def _start_server(get_snapshot):
    """A dashboard server on a free port in its own thread (its own event loop)."""
    ready, holder = threading.Event(), {}

    def serve():
        holder["s"] = DashboardServer(get_snapshot, port=0)
        holder["s"].start()
        ready.set()
        holder["s"].run()
        holder["s"].close()

    th = threading.Thread(target=serve, daemon=True)
    th.start()
    ready.wait(20)
    return holder, th


def _open_page(driver, url: str) -> None:
    """Load the page and wait (bounded) until its websocket document is there."""
    driver.get(url)
    for _ in range(300):
        if driver.execute_script("return window.Bokeh !== undefined && "
                                 "Bokeh.documents.length > 0"):
            return
        time.sleep(0.1)


def bench_browser(seconds: float) -> None:
    src = StampedRun()
    holder, th = _start_server(src.snapshot)
    driver, profile = _browser()
    try:
        _open_page(driver, holder["s"].url)
        time.sleep(2.0)
        proc = psutil.Process()
        cpu0, wall0 = sum(proc.cpu_times()[:2]), time.monotonic()
        lags = []
        for _ in range(int(seconds / 0.2)):
            lag = driver.execute_script(
                "const t = Bokeh.documents[0].get_model_by_name('trace_source').data.t;"
                "return Date.now() / 1000 - t[t.length - 1];")
            lags.append(lag)
            time.sleep(0.2)
        cpu = (sum(proc.cpu_times()[:2]) - cpu0) / (time.monotonic() - wall0)
        lags = np.array(lags) * 1e3
        print(f"page lag (snapshot made -> in the browser's data): median {np.median(lags):.0f} "
              f"ms, p95 {np.percentile(lags, 95):.0f} ms (tick {250} ms)")
        print(f"server process CPU with one browser attached (includes this script's selenium "
              f"polling): {100 * cpu:.0f} % of one core")
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
        holder["s"].stop()
        th.join(10)


def _frames(n_messages: int, rate_hz: float, rows: int = 16384):
    from eddyvigil.monitor import wire

    rng = np.random.default_rng(3)
    block = (np.array([8.0, 0.3, 0.0]) + rng.standard_normal((rows, 3))).astype("<f4")
    yield wire.encode_point("live", "s1", 0, {"id": "L1", "x": 0.0, "y": 0.0, "z": 0.0})
    for i in range(n_messages):
        yield wire.encode_samples("live", "s1", i + 1, block, ("u", "v", "w"), rate_hz=rate_hz,
                                  t0=i * rows / rate_hz)


def _feed(pipe, n_messages, rate_hz, paced: bool, stop: threading.Event) -> float:
    """Feed messages (paced to rate_hz or as fast as possible); returns samples/s achieved."""
    start = time.monotonic()
    rows = 16384
    done = 0
    for i, frames in enumerate(_frames(n_messages, rate_hz)):
        if stop.is_set():
            break
        if paced and i > 0:
            due = start + (i - 1) * rows / rate_hz
            delay = due - time.monotonic()
            if delay > 0:
                time.sleep(delay)
        pipe.handle_frames(frames, time.monotonic())
        done = i
    return done * rows / (time.monotonic() - start)


def _browser():
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    os.environ["SE_OFFLINE"] = "true"
    profile = tempfile.mkdtemp()
    opts = webdriver.ChromeOptions()
    opts.binary_location = "/usr/bin/chromium"
    for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", f"--user-data-dir={profile}",
                 "--window-size=1280,900"):
        opts.add_argument(flag)
    return webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=opts), profile


def bench_live(seconds: float, max_messages: int) -> None:
    from eddyvigil.monitor.pipeline import Pipeline

    # warm-up: kernels loaded, one-time tables built, before anything is timed
    warm = Pipeline()
    _feed(warm, 40, 1e6, paced=False, stop=threading.Event())
    warm.close()
    # b (off): the same feed with no dashboard at all
    pipe = Pipeline()
    off = _feed(pipe, max_messages, 1e6, paced=False, stop=threading.Event())
    pipe.close()

    pipe = Pipeline()
    box = {"pipe": pipe}  # the page reads whichever pipeline is current
    holder, th = _start_server(lambda: box["pipe"].snapshot)
    driver, profile = _browser()
    stop = threading.Event()
    try:
        _open_page(driver, holder["s"].url)
        # a: paced 1 M samples/s, lag = feeder's data clock - newest trace time in the page
        n_paced = int(seconds * 1e6 / 16384) + 1
        t_start = time.time()
        feeder = threading.Thread(target=_feed, args=(pipe, n_paced, 1e6, True, stop))
        feeder.start()
        time.sleep(3.0)
        lags = []
        while feeder.is_alive() and len(lags) < 5 * seconds:
            t_page = driver.execute_script(
                "const s = Bokeh.documents[0].get_model_by_name('trace_source');"
                "const t = s.data.t; return t.length ? t[t.length - 1] : null;")
            if t_page is not None:
                lags.append((time.time() - t_start) - t_page)
            time.sleep(0.2)
        stop.set()
        feeder.join(30)
        pipe.close()
        lags = np.array(lags) * 1e3
        if lags.size:
            print(f"live page lag at 1 M samples/s (sample due -> in the browser's data): "
                  f"median {np.median(lags):.0f} ms, p95 {np.percentile(lags, 95):.0f} ms, "
                  f"max {lags.max():.0f} ms over {lags.size} reads")
        # b (on): max speed with the server and the browser attached
        pipe2 = Pipeline()
        box["pipe"] = pipe2
        on = _feed(pipe2, max_messages, 1e6, paced=False, stop=threading.Event())
        pipe2.close()
        print(f"ingest at max speed, in process: dashboard off {off / 1e6:.1f} M samples/s, "
              f"on (server + 1 browser) {on / 1e6:.1f} M samples/s, ratio on/off {on / off:.2f}")
    finally:
        stop.set()
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
        holder["s"].stop()
        th.join(10)


def main() -> None:
    ap = argparse.ArgumentParser(description="dashboard benchmark")
    ap.add_argument("--seconds", type=float, default=10.0)
    ap.add_argument("--max-messages", type=int, default=400,
                    help="messages of 16384 rows for the on/off ingest comparison")
    args = ap.parse_args()
    bench_tick()
    bench_browser(args.seconds)
    bench_live(args.seconds, args.max_messages)


if __name__ == "__main__":
    main()
