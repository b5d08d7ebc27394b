"""The pipeline's point lines carry spectra and dissipation (DESIGN §3, §8)."""

from __future__ import annotations

import io
import json

import numpy as np
from eddyvigil.monitor.pipeline import Pipeline
from eddyvigil.simulator.signals import PopeGenerator, generate
from eddyvigil.stats.point_spectra import NO_SPECTRUM_RANDOM, SPECTRAL_ROWS
from scipy import signal as sps


class FakeClock:
    def __init__(self):
        self.t = 0.0

    def __call__(self):
        return self.t


def _rows(line):
    return {s["name"]: s for s in line["statistics"]}


def test_point_line_carries_log_binned_spectra_eps_and_scales():
    # truth: Pope's model spectrum (Pope 2000, §6.5) through the simulator's generator
    rate, nu = 20_000.0, 1.5e-5
    gen = PopeGenerator([5.0, 0.0, 0.0], 1.5, 4.0, nu, rate, 11)
    x = generate(gen, 1 << 20).astype("<f4")
    buf = io.StringIO()
    p = Pipeline(summary=buf, clock=FakeClock())
    p.begin_point("probe", {"id": "P1", "x": 0.0, "y": 0.0, "z": 0.0, "nu": nu})
    for i in range(0, x.shape[0], 8192):
        assert p.feed("probe", x[i : i + 8192], rate_hz=rate) is None
    view = p.publish().streams["probe"]
    assert view.spectrum is not None and view.spectrum[1] is not None  # live, for the dashboard
    p.end("probe")
    after = p.publish().streams["probe"]  # the finished point's spectrum stays on screen
    assert after.spectrum is not None and after.spectrum[1] is not None
    p.close()
    line = json.loads(buf.getvalue().splitlines()[0])
    assert after.spectrum[0].segments == line["spectra_segments"]
    assert after.spectrum[1].eps.value == _rows(line)["eps"]["value"]
    assert line["nu"] == nu and line["nu_source"] == "point"
    assert line["eps_method"].startswith("iso")
    spec = line["spectra"]["u"]
    assert 50 <= len(spec["f_hz"]) <= 200 and len(spec["psd"]) == len(spec["dof"]) == len(
        spec["f_hz"]
    )
    # the log bands are averages of the Welch estimate (scipy.signal.welch as reference)
    f, pw = sps.welch(x[:, 0].astype(np.float64), fs=rate, nperseg=line["spectra_segment"])
    band = np.interp(spec["f_hz"][-1], f, pw)
    assert band > 0 and abs(spec["psd"][-1] / band - 1) < 0.5
    rows = _rows(line)
    for name in SPECTRAL_ROWS:
        assert name in rows
    truth = gen.truth()
    for name in ("eps", "eps_iso", "eps_inertial"):
        assert rows[name]["ci_low"] <= truth["eps"] <= rows[name]["ci_high"], (name, rows[name])
    # scales follow from eps and the moments' u'^2 (sampling error of u'^2 included)
    for name in ("eta", "lambda_g", "Re_lambda", "tau_eta"):
        assert rows[name]["ci_low"] <= truth[name] <= rows[name]["ci_high"], (
            name,
            rows[name],
            truth[name],
        )
    assert line["peaks"] == []


def test_random_sampling_says_no_spectrum():
    rng = np.random.default_rng(3)
    t = np.cumsum(rng.exponential(1e-3, 5000))
    u = (10 + rng.standard_normal((5000, 1))).astype("<f8")
    buf = io.StringIO()
    p = Pipeline(summary=buf, clock=FakeClock())
    assert p.feed("lda", u, columns=("u",), times=t) is None
    p.end("lda")
    p.close()
    line = json.loads(buf.getvalue().splitlines()[0])
    assert line["spectra"] is None and line["spectra_reason"] == NO_SPECTRUM_RANDOM
    rows = _rows(line)
    assert rows["eps"]["value"] is None and rows["eps"]["state"] == "no-interval"
    assert NO_SPECTRUM_RANDOM in rows["eps"]["reason"]


def test_short_point_has_no_spectrum_and_no_made_up_eps():
    rng = np.random.default_rng(4)
    buf = io.StringIO()
    p = Pipeline(summary=buf, clock=FakeClock())
    assert p.feed("s", (8 + rng.standard_normal((500, 3))).astype("<f4"), rate_hz=1000.0) is None
    p.end("s")
    p.close()
    line = json.loads(buf.getvalue().splitlines()[0])
    assert line["spectra"] is None and line["nu_source"] == "default"
    assert all(_rows(line)[n]["value"] is None for n in SPECTRAL_ROWS)


def test_point_spectra_merge_pools_segments_like_scipy():
    # two independent records of one point: the merged Welch average is the count-weighted mean
    # of scipy.signal.welch on each (Welch 1967: an average of segment periodograms)
    from eddyvigil.stats.point_spectra import PointSpectra

    rng = np.random.default_rng(12)
    a, b = rng.standard_normal((20_000, 2)), rng.standard_normal((12_000, 2))
    pa = PointSpectra(("u", "v"), 1000.0, segment=1024).update(a)
    pb = PointSpectra(("u", "v"), 1000.0, segment=1024).update(b)
    both = pa.merge(pb).spectrum()
    ka, kb = pa.welch.segments, pb.welch.segments
    ref = (
        ka * sps.welch(a, fs=1000.0, nperseg=1024, axis=0)[1]
        + kb * sps.welch(b, fs=1000.0, nperseg=1024, axis=0)[1]
    ) / (ka + kb)
    np.testing.assert_allclose(both.psd, ref, rtol=1e-11)
    assert pa.welch.segments == ka  # untouched


def test_spectra_on_the_worker_thread_give_the_same_bits_as_inline():
    # The worker only moves the Welch transforms off the caller's thread; the operations and
    # their order are the same, so every summary line must be identical to the character
    # (numpy's and scipy's float rounding is deterministic for the same calls: common practice).
    rate = 20_000.0
    x = generate(PopeGenerator([5.0, 0.0, 0.0], 1.5, 4.0, 1.5e-5, rate, 3), 3 << 17)
    lines = {}
    for thread in (True, False):
        buf = io.StringIO()
        p = Pipeline(summary=buf, clock=FakeClock(), spectra_thread=thread)
        live = []
        for k, cut in enumerate((0, 1 << 17, 2 << 17)):
            p.begin_point("probe", {"id": f"P{k}", "x": 0.0, "y": 0.01 * k, "z": 0.0})
            part = x[cut : cut + (1 << 17)].astype("<f4" if k != 1 else "<f8")
            for i in range(0, part.shape[0], 5000):  # blocks that do not fit the segments
                assert p.feed("probe", part[i : i + 5000], rate_hz=rate) is None
                if i % 40_000 == 0:  # a reader in between (the dashboard's view)
                    view = p.publish().streams["probe"]
                    if view.spectrum is not None and view.spectrum[0] is not None:
                        live.append(view.spectrum[0].psd.copy())
        p.end("probe")
        p.close()
        lines[thread] = (buf.getvalue(), live)
    assert lines[True][0] == lines[False][0]
    assert len(lines[True][1]) == len(lines[False][1]) > 0
    for a, b in zip(lines[True][1], lines[False][1], strict=True):
        assert np.array_equal(a, b)
