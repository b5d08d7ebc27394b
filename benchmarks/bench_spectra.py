"""Cost of spectra + dissipation on the monitor's ingest path, side by side in one run.

    python benchmarks/bench_spectra.py [--seconds 60] [--repeat 5] [--rows 16384]
                                       [--baseline DIR]
    python benchmarks/bench_spectra.py --eps-coverage 40 [--seconds 10]
    python benchmarks/bench_spectra.py --transport [--seconds 60] [--repeat 5]

The frames ``watch`` receives (3 float32 columns at 20 kHz, ``--rows`` per message, points of
``--seconds``) are encoded once, then fed through ``Pipeline.handle_frames`` (decode, every
statistic, the summary line at each point end, snapshots on the real clock) once per arm and
round, the arms interleaved:

  - ``off``: the spectra switched off (the pipeline's PointSpectra replaced by nothing);
  - ``on``: the spectra as the monitor runs them (Welch on every 50 %-overlapped segment, its
    windowing and transforms on the pipeline's spectra worker thread, eps/scales/peaks at each
    point end and for the dashboard's live view);
  - ``on inline``: the same on the caller's thread (``Pipeline(spectra_thread=False)``);
  - ``welch only``: the Welch spectra without eps/scales/peaks (what is per sample; the
    evaluations are per point and per live view), inline;
  - ``stride 4``: transforming only every 4th segment (fewer dof; not the default), inline;
  - ``before`` (with ``--baseline DIR``): the same with the spectra modules of another checkout
    (``DIR/stats/{spectral_kernels,spectra,dissipation,point_spectra}.py``, loaded under private
    names, numba without its disk cache so nothing is written there), e.g. the main branch;
  - ``off f8`` / ``on f8`` (and ``before f8``): the same samples sent as float64 (the spectra's
    float64 FFT).

Prints samples per CPU second of each arm per round, the median extra CPU over ``off`` in %
(every thread of the process counted) with its range over the rounds, the ingest rate in wall
time against ``off`` (what the worker thread changes where a second core is free; wall time
needs a quiet machine), the largest relative difference of the summary's ``eps``,
``eps_inertial`` and ``eps_iso`` between ``before`` and ``on``, and the CPU time of one
``dissipation()`` evaluation and of the Welch update of one point (with ``--baseline``, also
its ratio to the "before" code's, alone, in interleaved rounds). No assertions.

``--transport`` measures instead the ingest rate of ``watch``'s own path: a child process
PUSHes the same frames over tcp loopback as fast as it can, a PULL ``Subscriber`` hands them to
``Pipeline.handle_frames`` (what ``watch --no-dashboard`` runs, without the recorder), spectra
off / on (worker thread) / on inline, interleaved; samples per wall second from the first
samples message to the end, and each arm's ratio to ``off`` per round (the publisher shares
the 2 cores).

``--eps-coverage N`` measures instead how often the 95 % interval of ``eps_iso`` holds the
generator's ε on N seeded points of ``--seconds`` each of the demo's wake-centre point
(``PopeShapeGenerator``: U = 8.5 m/s, the wake's stresses, L11 = 40 mm, 20 kHz), with u unskewed
and with the wake's skew parameter (-0.06), and the inertial fit's bias that Pope's model
spectrum itself implies at the wake's Reynolds numbers (its compensated E11 peak against C1).
"""

from __future__ import annotations

import argparse
import functools
import io
import json
import os
import statistics
import sys
import time
import types
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from eddyvigil.monitor import wire  # noqa: E402
from eddyvigil.monitor.pipeline import Pipeline  # noqa: E402
from eddyvigil.simulator.signals import PopeGenerator, generate  # noqa: E402
from eddyvigil.stats import point_spectra  # noqa: E402
from eddyvigil.stats.dissipation import dissipation  # noqa: E402
from eddyvigil.stats.spectra import SpectrumAccumulator  # noqa: E402

_PointSpectra = point_spectra.PointSpectra

RATE = 20_000.0
EPS_ROWS = ("eps", "eps_inertial", "eps_iso")


def frames_of(x: np.ndarray, rows: int, points: int) -> list[list[bytes]]:
    out, seq = [], 0
    per_point = x.shape[0] // points
    for p in range(points):
        out.append(
            wire.encode_point(
                "bench", "s1", seq, {"id": f"P{p}", "x": 0.0, "y": 0.01 * p, "z": 0.0}
            )
        )
        seq += 1
        for i in range(p * per_point, (p + 1) * per_point - rows + 1, rows):
            out.append(
                wire.encode_samples(
                    "bench", "s1", seq, x[i : i + rows], ("u", "v", "w"), rate_hz=RATE, t0=i / RATE
                )
            )
            seq += 1
    out.append(wire.encode_end("bench", "s1", seq))
    return out


class WelchOnly(_PointSpectra):
    """The spectra without eps, scales and peaks (to split the cost: Welch per sample, the
    evaluations per point); a benchmark arm only, its summary carries no eps."""

    def evaluate(self, moments, nu=None):
        return self.welch.snapshot(), None


def load_baseline(root: Path):
    """PointSpectra of another checkout's spectra modules (private module names, no disk cache)."""
    mods = ("spectral_kernels", "spectra", "dissipation", "point_spectra")
    alias = {m: f"_before_{m}" for m in mods}
    for m in mods:
        path = root / "stats" / f"{m}.py"
        src = path.read_text().replace("cache=True", "cache=False")
        for other in mods:
            src = src.replace(f"eddyvigil.stats.{other} import", f"{alias[other]} import")
        module = types.ModuleType(alias[m])
        module.__file__ = str(path)
        sys.modules[alias[m]] = module
        exec(compile(src, str(path), "exec"), module.__dict__)  # noqa: S102 - a local checkout
    return sys.modules[alias["point_spectra"]].PointSpectra


def run(frames, factory, thread: bool = True) -> tuple[float, float, str]:
    """CPU and wall seconds to feed ``frames`` and the summary written; ``factory`` builds
    each point's spectra (None: spectra off); ``thread``: the pipeline's spectra worker."""
    # monitor.point_run builds each point's spectra through this module attribute
    point_spectra.PointSpectra = factory if factory is not None else (lambda *a, **k: None)
    try:
        out = io.StringIO()
        p = Pipeline(summary=out, spectra_thread=thread)
        # CPU time of this process, every thread (the spectra's worker too): on a machine
        # shared with other jobs, wall-clock rounds differed by 5x, CPU time far less
        t, w = time.process_time(), time.perf_counter()
        for f in frames:
            p.handle_frames(f)
            p.snapshot  # noqa: B018 - what a reader does
        p.close()
        return time.process_time() - t, time.perf_counter() - w, out.getvalue()
    finally:
        point_spectra.PointSpectra = _PointSpectra


def _push(endpoint: str, frames) -> None:
    """Child process (forked: the frames are inherited): PUSH every frame list, then linger."""
    import zmq

    ctx = zmq.Context()
    sock = ctx.socket(zmq.PUSH)
    sock.setsockopt(zmq.IMMEDIATE, 1)
    sock.connect(endpoint)
    for f in frames:
        sock.send_multipart(f, copy=False)
    sock.close(linger=120_000)
    ctx.term()


def over_transport(frames, factory, thread: bool) -> float:
    """Samples per wall second through Subscriber -> Pipeline, the frames sent by a child."""
    import multiprocessing as mp
    import socket

    from eddyvigil.monitor.subscriber import Subscriber

    with socket.socket() as so:
        so.bind(("127.0.0.1", 0))
        endpoint = f"tcp://127.0.0.1:{so.getsockname()[1]}"
    point_spectra.PointSpectra = factory if factory is not None else (lambda *a, **k: None)
    sub = Subscriber(endpoint, bind=True, socket="pull")
    pipeline = Pipeline(summary=io.StringIO(), spectra_thread=thread)
    state = {}

    def on_frames(f, received_at):
        if "t0" not in state and len(f) == 3:
            state["t0"] = time.perf_counter()
        pipeline.handle_frames(f, received_at)
        if pipeline.all_ended:
            state["t1"] = time.perf_counter()
            sub.stop()

    child = mp.get_context("fork").Process(target=_push, args=(endpoint, frames))
    child.start()
    try:
        sub.run(on_frames)
    finally:
        sub.close()
        child.join(60)
        point_spectra.PointSpectra = _PointSpectra
    samples = pipeline.run_line()["samples"]
    pipeline.close()
    return samples / (state["t1"] - state["t0"])


def transport(frames, repeat: int) -> None:
    arms = {"off": (None, False), "on": (_PointSpectra, True), "on inline": (_PointSpectra, False)}
    for factory, thread in arms.values():
        over_transport(frames[:40] + frames[-1:], factory, thread)  # compile, warm
    rates = {v: [] for v in arms}
    for r in range(repeat):
        for v, (factory, thread) in arms.items():
            rates[v].append(over_transport(frames, factory, thread))
        print(f"round {r + 1} (M samples/s): "
              + ", ".join(f"{v} {rates[v][-1] / 1e6:5.2f}" for v in arms))
    for v in ("on", "on inline"):
        ratio = [a / b for a, b in zip(rates[v], rates["off"], strict=True)]
        print(f"watch's path, spectra {v:9s}: ingest rate {statistics.median(ratio):.2f}x the "
              f"rate without (rounds {min(ratio):.2f}-{max(ratio):.2f}x)")


def eps_values(summary: str) -> list[float]:
    vals = []
    for line in summary.splitlines():
        rec = json.loads(line)
        for row in rec.get("statistics") or ():
            if row.get("name") in EPS_ROWS and row.get("value") is not None:
                vals.append(float(row["value"]))
    return vals


def cpu_per_call(fn, calls: int = 5) -> float:
    fn()
    best = float("inf")
    for _ in range(3):
        t = time.process_time()
        for _ in range(calls):
            fn()
        best = min(best, (time.process_time() - t) / calls)
    return best


def eps_coverage(points: int, seconds: float) -> None:
    """Coverage of eps_iso's interval with u unskewed and skewed (see the module docstring)."""
    from eddyvigil.simulator.signals import PopeShapeGenerator, pope_for_length

    mean = [8.5, 0.0, 0.0]
    stress = [[0.37, -0.05, 0.0], [-0.05, 0.31, 0.0], [0.0, 0.0, 0.26]]  # the wake's centre
    nu = 1.5e-5
    for skew in (0.0, -0.06):
        held, err, half = [], [], []
        for seed in range(points):
            gen = PopeShapeGenerator(mean, stress, 0.04, nu, RATE, seed=100 + seed,
                                     skew=[skew, 0.1, 0.0])
            x = generate(gen, int(seconds * RATE))
            spec = SpectrumAccumulator(("u", "v", "w"), RATE).update(x.astype("<f4")).snapshot()
            q = dissipation(spec, mean[0], nu=nu, variance=float(np.var(x[:, 0]))).eps_iso
            truth = gen.epsilon()
            held.append(q.ci_low <= truth <= q.ci_high)
            err.append(q.value / truth - 1)
            half.append((q.ci_high - q.ci_low) / 2 / q.value)
        print(
            f"u skew parameter {skew:+.2f}, {points} points of {seconds:g} s: eps_iso's 95 % "
            f"interval held the truth in {np.mean(held):.2f}; error mean {100 * np.mean(err):+.2f} "
            f"%, sd {100 * np.std(err, ddof=1):.2f} %; mean half-width {100 * np.mean(half):.2f} %"
        )
    for u2 in (0.37, 0.2, 0.1):  # u'^2 across the wake, L11 = 40 mm
        sp = pope_for_length(1.5 * u2, 0.04, nu)
        f = np.geomspace(0.1, 1e5, 4000)
        k = 2 * np.pi * f / mean[0]
        comp = mean[0] * sp.psd(f, mean[0]) / (2 * np.pi) * k ** (5 / 3) / sp.eps ** (2 / 3)
        peak = float(comp.max())
        print(
            f"Pope's model at Re_lambda {sp.re_lambda:.0f}: compensated E11 peaks at {peak:.3f} "
            f"(C1 = 0.49): an inertial fit reads eps {100 * ((peak / 0.49) ** 1.5 - 1):+.1f} %"
        )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0, help="point length (s of data)")
    ap.add_argument("--points", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--rows", type=int, default=16384)
    ap.add_argument("--baseline", type=Path, help="a checkout whose spectra modules are 'before'")
    ap.add_argument("--transport", action="store_true",
                    help="only the ingest rate over tcp loopback (see the docstring)")
    ap.add_argument("--eps-coverage", type=int, metavar="N",
                    help="only measure eps_iso's coverage on N points (see the docstring)")
    a = ap.parse_args()
    if a.eps_coverage:
        eps_coverage(a.eps_coverage, a.seconds)
        return
    n = int(a.seconds * RATE) * a.points
    gen = PopeGenerator([5.0, 0.0, 0.0], 1.5, 4.0, 1.5e-5, RATE, 1)
    x = generate(gen, n).astype("<f4")
    frames = {"f4": frames_of(x, a.rows, a.points)}
    # the same samples sent as float64: the spectra then take the float64 FFT
    if a.transport:
        transport(frames["f4"], a.repeat)
        return
    frames["f8"] = frames_of(x.astype("<f8"), a.rows, a.points)
    inline = functools.partial(_PointSpectra)  # the same class, on the caller's thread
    arms = {  # name: (frames, spectra factory, the pipeline's spectra worker)
        "off": ("f4", None, False),
        "on": ("f4", _PointSpectra, True),
        "on inline": ("f4", inline, False),
        "welch only": ("f4", WelchOnly, False),
        "stride 4": ("f4", functools.partial(_PointSpectra, stride=4), False),
        "off f8": ("f8", None, False),
        "on f8": ("f8", _PointSpectra, True),
    }
    if a.baseline is not None:
        before = load_baseline(a.baseline.resolve())
        # an older PointSpectra may not take the executor: always inline
        arms["before"] = ("f4", lambda *p, executor=None, **k: before(*p, **k), False)
        arms["before f8"] = ("f8", arms["before"][1], False)
    for kind, factory, thread in arms.values():
        run(frames[kind][:40], factory, thread)  # compile and warm every path once
    times = {v: [] for v in arms}
    walls = {v: [] for v in arms}
    summaries = {}
    for r in range(a.repeat):
        for v, (kind, factory, thread) in arms.items():  # side by side, interleaved
            t, w, summaries[v] = run(frames[kind], factory, thread)
            times[v].append(t)
            walls[v].append(w)
        row = ", ".join(f"{v} {x.shape[0] / times[v][-1] / 1e6:5.2f}" for v in arms)
        print(f"round {r + 1} (M samples/CPU s): {row}")
    for v in arms:
        if v.startswith("off"):
            continue
        ref = "off f8" if v.endswith("f8") else "off"
        extra = [100 * (t / b - 1) for t, b in zip(times[v], times[ref], strict=True)]
        rate = [b / t for t, b in zip(walls[v], walls[ref], strict=True)]
        print(
            f"spectra + eps, {v:10s}: median extra CPU {statistics.median(extra):5.1f} % "
            f"(rounds {min(extra):.0f}-{max(extra):.0f} %) over the path without spectra; "
            f"ingest rate (wall) {statistics.median(rate):.2f}x "
            f"({min(rate):.2f}-{max(rate):.2f}x) the rate without"
        )
    for kind in ("", " f8"):
        if f"before{kind}" in times:  # the spectra's own CPU, now over before, round by round
            off = times[f"off{kind}"]
            share = [
                (t - o) / (b - o)
                for t, b, o in zip(times[f"on{kind}"], times[f"before{kind}"], off, strict=True)
            ]
            med = statistics.median(share)
            print(
                f"spectra's own CPU{kind}, now / before: median {med:.2f} "
                f"(rounds {min(share):.2f}-{max(share):.2f})"
            )
    print(
        f"(off: {x.shape[0] / statistics.median(times['off']) / 1e6:.1f} M samples/CPU s; "
        f"{a.points} points of {a.seconds:g} s, 3 columns at 20 kHz, {a.rows} rows/message)"
    )
    for kind in ("", " f8"):
        if f"before{kind}" in summaries:
            old, new = eps_values(summaries[f"before{kind}"]), eps_values(summaries[f"on{kind}"])
            if len(old) == len(new) and old:
                rel = max(abs(q / p - 1) for p, q in zip(old, new, strict=True))
                what = f"{len(new)} values, largest |new/before - 1| {rel:.1e}"
                print(f"eps rows{kind or ' f4'}: {what}")
            else:
                print(f"eps rows{kind or ' f4'}: {len(old)} before, {len(new)} now")
    point = x[: int(a.seconds * RATE)]
    blocks = [point[i : i + a.rows] for i in range(0, point.shape[0], a.rows)]

    def welch(cls=SpectrumAccumulator, parts=blocks):
        acc = cls(("u", "v", "w"), RATE)
        for b in parts:
            acc.update(b)
        return acc.snapshot()

    spec = welch()
    print(
        f"one point's Welch update (segment {spec.segment}, 3 columns, float32): "
        f"{cpu_per_call(welch, 2) * 1e3:.1f} ms CPU; one dissipation() evaluation: "
        f"{cpu_per_call(lambda: dissipation(spec, 5.0)) * 1e3:.1f} ms CPU"
    )
    if a.baseline is not None:  # the Welch update alone, now and before, interleaved rounds
        old_cls = sys.modules["_before_spectra"].SpectrumAccumulator
        for kind, parts in (("float32", blocks), ("float64", [b.astype("<f8") for b in blocks])):
            ratios = []
            for _ in range(2 * a.repeat + 1):
                now = cpu_per_call(functools.partial(welch, SpectrumAccumulator, parts), 1)
                was = cpu_per_call(functools.partial(welch, old_cls, parts), 1)
                ratios.append(now / was)
            print(
                f"one point's Welch update alone, {kind}, now / before: median "
                f"{statistics.median(ratios):.2f} (rounds {min(ratios):.2f}-{max(ratios):.2f})"
            )


if __name__ == "__main__":
    main()
