"""``eddyvigil report``: one self-contained HTML file, opened offline in headless Chromium
(BROWSER.md setup: explicit chromedriver, SE_OFFLINE, fresh profile); every resource the page
loaded is listed by the browser and must come from the file itself."""

from __future__ import annotations

import json

import numpy as np
import pytest
from test_browser_dashboard import _browser_or_skip, _png_colours, _wait_for

from eddyvigil.monitor import cli

Y = np.array([-0.08, -0.05, -0.03, -0.015, 0.0, 0.012, 0.03, 0.05, 0.08])


def _summary_lines():
    """An invented wake-like traverse: profiles, spectra, quality counts and a run line."""
    rng = np.random.default_rng(2)
    lines = []
    f = np.geomspace(1.0, 1000.0, 40)
    for i, y in enumerate(Y):
        xi = y / 0.04
        g = np.exp(-(xi**2) / 2)
        values = {"U": 10 - 1.5 * np.exp(-np.log(2) * xi**2), "V": 0.0, "uu": 0.01 + 0.36 * g,
                  "vv": 0.01 + 0.3 * g, "uv": -0.16 * xi * g, "uuv": 0.02 * xi * g,
                  "vvv": 0.03 * xi * g, "vww": 0.01 * xi * g, "k": 0.02 + 0.45 * g}
        stats = []
        for name, v in values.items():
            se = 0.003 + 0.01 * abs(v)
            v = float(v + se * rng.standard_normal())
            stats.append({"name": name, "value": v, "stderr": se, "ci_low": v - 1.96 * se,
                          "ci_high": v + 1.96 * se, "target": None, "converged": None,
                          "eta_s": None, "state": "untargeted"})
        lines.append({"v": 1, "kind": "point", "complete": True, "stream": "probe-a",
                      "session": "s1", "point": {"id": f"P{i + 1:02d}", "x": 1.6, "y": float(y),
                                                 "z": 0.0},
                      "samples": 120000, "duration_s": 30.0, "messages": 30, "gaps": 0,
                      "lost_messages": 0, "rejected": {}, "confidence": 0.95, "converged": True,
                      "converged_at_s": 20.0, "columns": ["u", "v", "w"], "rate_hz": 4000.0,
                      "units": "m/s", "k_method": "k = (uu + vv + ww)/2",
                      "spectra": {"u": {"f_hz": f.tolist(),
                                        "psd": (0.01 * g + 0.001) / (1 + (f / 50) ** (5 / 3)),
                                        "dof": [10.0] * f.size}},
                      "quality": {"policy": "flag", "u": {"spikes": i, "dropout_samples": 0,
                                                          "clipped_samples": 0,
                                                          "quantisation_step": None,
                                                          "sigma_over_step": None}},
                      "statistics": stats})
        lines[-1]["spectra"]["u"]["psd"] = lines[-1]["spectra"]["u"]["psd"].tolist()
    lines.append({"v": 1, "kind": "run", "samples": 120000 * Y.size, "messages": 270, "lost": 0,
                  "rejected": {}, "points": Y.size, "streams": ["probe-a"]})
    return lines


@pytest.fixture
def summary(tmp_path):
    path = tmp_path / "summary.jsonl"
    path.write_text("".join(json.dumps(x) + "\n" for x in _summary_lines()), encoding="utf-8")
    return path


def test_report_command_writes_one_file_and_refuses_bad_input(tmp_path, summary, capsys):
    out = tmp_path / "report.html"
    assert cli.main(["report", str(summary), "-o", str(out)]) == 0
    page = out.read_text(encoding="utf-8")
    assert "<script src=" not in page.replace('<script src="data:', "")  # JS is inlined
    assert "k budget" in page and "Cautions" in page and "P09" in page
    assert cli.main(["report", str(tmp_path / "none.jsonl"), "-o", str(out)]) == 4
    assert cli.main(["report", str(summary), "-o", str(tmp_path / "no" / "r.html")]) == 8
    empty = tmp_path / "empty.jsonl"
    empty.write_text('{"v": 1, "kind": "run"}\n', encoding="utf-8")
    assert cli.main(["report", str(empty), "-o", str(out)]) == 4
    assert capsys.readouterr().err.count("eddyvigil report:") == 3


@pytest.mark.browser
def test_report_opens_offline_in_a_real_browser(tmp_path, summary):
    out = tmp_path / "report.html"
    assert cli.main(["report", str(summary), "-o", str(out)]) == 0
    driver, _profile = _browser_or_skip()
    try:
        driver.get(out.as_uri())
        # every figure has drawn: Bokeh made a view for each plot model of the document
        n_plots = _wait_for(driver, """
            if (!window.Bokeh || Bokeh.documents.length == 0) return 0;
            const doc = Bokeh.documents[0];
            const plots = [...doc.all_models].filter(m => m.type == 'Plot' || m.type == 'Figure'
                || (m.constructor && m.constructor.__name__ == 'Figure'));
            const names = plots.map(p => p.name).filter(n => n);
            const views = Bokeh.index ? Object.keys(Bokeh.index).length : 0;
            return views > 0 ? names.join(',') : 0;""", what="report figures")
        names = set(n_plots.split(","))
        assert {"budget", "spectra", "profile-means", "profile-reynolds",
                "profile-triple"} <= names, names
        resources = driver.execute_script(
            "return performance.getEntriesByType('resource').map(e => e.name);")
        assert all(r.startswith(("file:", "data:", "blob:")) for r in resources), resources
        logs = driver.get_log("browser")
        assert [x for x in logs if x.get("level") == "SEVERE"] == [], logs
        shot = tmp_path / "report.png"
        driver.save_screenshot(str(shot))
        assert shot.stat().st_size > 20_000 and _png_colours(shot) > 8
    finally:
        driver.quit()
