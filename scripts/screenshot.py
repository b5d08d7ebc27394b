"""Make docs/dashboard.png from a real short demo run (for the README).

Starts ``eddyvigil demo --no-browser`` on a free port, waits until a few points have converged,
loads the dashboard in headless Chromium (offline setup of the project's browser notes), saves
the screenshot and stops the demo with SIGINT.

    python scripts/screenshot.py [--out docs/dashboard.png] [--speed 4] [--points 3]
"""

from __future__ import annotations

import argparse
import os
import selectors
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from eddyvigil.monitor.demo import free_port


_IN_STEP = """
const cells = [];
function walk(root) {
  for (const el of root.querySelectorAll('*')) {
    if (el.shadowRoot) walk(el.shadowRoot);
    if (el.classList && el.classList.contains('slick-row')) {
      const c = Array.from(el.querySelectorAll('.slick-cell')).map(x => x.textContent);
      if (c.length === 8 && c[3].includes('±')) cells.push(c[3]);  // 8 columns, value 4th
    }
  }
}
walk(document);
const doc = Bokeh.documents[0];
const div = document.createElement('div');
div.innerHTML = doc.get_model_by_name('verdict').text;
return {rendered: cells,
        model: Array.from(doc.get_model_by_name('status_source').data.value)
                    .filter(v => v.includes('±')),
        banner: div.textContent};
"""


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(Path(__file__).resolve().parent.parent / "docs"
                                         / "dashboard.png"))
    ap.add_argument("--speed", default="4")
    ap.add_argument("--points", type=int, default=3, help="converged points before the shot")
    args = ap.parse_args()

    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    port = free_port()
    demo = subprocess.Popen([sys.executable, "-m", "eddyvigil.monitor", "demo", "--no-browser", "--port",
                             str(port), "--speed", args.speed, "--seed", "5"],
                            stdout=subprocess.PIPE, text=True,
                            env=dict(os.environ, PYTHONUNBUFFERED="1"))
    os.environ["SE_OFFLINE"] = "true"
    profile = tempfile.mkdtemp(prefix="eddyvigil-shot-")
    driver = None
    try:
        sel = selectors.DefaultSelector()
        sel.register(demo.stdout, selectors.EVENT_READ)
        converged, deadline = 0, time.monotonic() + 300
        while converged < args.points and time.monotonic() < deadline and demo.poll() is None:
            if sel.select(timeout=1.0):
                line = demo.stdout.readline()
                print(line, end="")
                converged += "converged after" in line
        sel.close()
        options = webdriver.ChromeOptions()
        options.binary_location = "/usr/bin/chromium"
        for flag in ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                     "--no-first-run", "--disable-background-networking",
                     "--disable-component-update", "--disable-sync",
                     f"--user-data-dir={profile}", "--window-size=1400,1500"):
            options.add_argument(flag)
        driver = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=options)
        driver.get(f"http://127.0.0.1:{port}/")
        for _ in range(300):
            if driver.execute_script("return window.Bokeh !== undefined && "
                                     "Bokeh.documents.length > 0"):
                break
            time.sleep(0.1)
        time.sleep(4.0)  # let the trace and the history fill in
        # the shot must show the status board in step with the banner: the rendered cells
        # (shadow DOM) equal the server's rows of the same instant
        # (and a moment well into a point, when the banner has a story to tell); the check is
        # repeated after the shot, which is kept only if nothing moved meanwhile
        Path(args.out).parent.mkdir(parents=True, exist_ok=True)
        for _ in range(600):
            got = driver.execute_script(_IN_STEP)
            if (got["rendered"] and got["rendered"] == got["model"]
                    and "KEEP ACQUIRING" in got["banner"] and "targets met" in got["banner"]
                    and not got["banner"].split("targets met")[0].endswith(" 0/10 ")):
                driver.save_screenshot(args.out)
                after = driver.execute_script(_IN_STEP)
                if (after["rendered"] == after["model"]
                        and after["banner"].split(":")[0] == got["banner"].split(":")[0]):
                    break  # same verdict and point before and after the shot
            time.sleep(0.2)
        else:
            print(f"last seen: {got}", file=sys.stderr)
            print("the rendered status board is not in step with the data", file=sys.stderr)
            return 1
        print(f"status board in step with the banner: {got['banner']!r}")
        print(f"wrote {args.out} ({Path(args.out).stat().st_size} bytes)")
    finally:
        if driver is not None:
            driver.quit()
        shutil.rmtree(profile, ignore_errors=True)
        demo.send_signal(signal.SIGINT)
        try:
            demo.wait(60)
        except subprocess.TimeoutExpired:
            demo.kill()
    return 0


if __name__ == "__main__":
    sys.exit(main())
