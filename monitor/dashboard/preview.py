"""A synthetic run for looking at the dashboard without a facility, simulator or pipeline.

:class:`PreviewRun` makes a plausible :class:`eddyvigil.monitor.state.RunSnapshot` for any acquisition
time: a traverse through an invented plane mixing layer (tanh mean profile, Gaussian-shaped
stresses), error bars shrinking as 1/√T, points finishing one after another. It is what the
browser test and ``python -m eddyvigil.monitor.dashboard.preview`` show; it computes no statistic.
"""

from __future__ import annotations

import math
import time

import numpy as np

from eddyvigil.monitor.state import RunSnapshot, StreamView
from eddyvigil.stats.snapshot import Estimate, PointSnapshot

__all__ = ["PreviewRun"]

_COLUMNS = ("u", "v", "w")
#: (name, relative target, scale of the half-width at T = 1 s relative to that target)
_TARGETED = (("U", 0.01, 1.5), ("V", 0.01, 1.3), ("uu", 0.05, 2.0), ("vv", 0.05, 1.8),
             ("uv", 0.05, 2.5), ("k", 0.05, 1.6))


class PreviewRun:
    """An invented traverse; ``snapshot(t_s)`` is the run after ``t_s`` seconds of wall time.

    Parameters
    ----------
    point_s
        Acquisition time per point before the traverse moves on.
    points
        Number of traverse points (y from -40 mm to 40 mm).
    seed
        Seed of the trace noise.
    """

    def __init__(self, point_s: float = 12.0, points: int = 9, seed: int = 1):
        self.point_s = float(point_s)
        self.ys = np.linspace(-0.04, 0.04, points)
        self.seed = seed
        self._sequence = 0
        self._campaign: tuple | None = None  # (index, monitor.campaign.Campaign)

    def _truth(self, y: float) -> dict[str, float]:
        eta = y / 0.015
        shape = math.exp(-eta * eta)
        d = {"U": 6.0 + 2.5 * math.tanh(eta), "V": 0.05 * math.tanh(eta), "W": 0.0,
             "uu": 0.02 + 0.5 * shape, "vv": 0.01 + 0.3 * shape, "ww": 0.01 + 0.35 * shape,
             "uv": -0.22 * shape, "uw": 0.0, "vw": 0.0}
        d["k"] = 0.5 * (d["uu"] + d["vv"] + d["ww"])
        return d

    def _estimates(self, y: float, t: float) -> tuple[Estimate, ...]:
        truth = self._truth(y)
        speed = abs(truth["U"])
        out = []
        for name, rel, at1 in _TARGETED:
            scale = speed if name in ("U", "V") else truth["k"]
            target = rel * scale
            hw = target * at1 / math.sqrt(max(t, 1e-3))
            wobble = 0.6 * hw * math.sin(1.3 * t + len(name))
            state = "warming-up" if t < 1.0 else ("converged" if hw <= target else "converging")
            eta_s = 0.0 if state == "converged" else (t * ((hw / target) ** 2 - 1) if t >= 1.0
                                                      else None)
            out.append(Estimate(name, truth[name] + wobble, hw / 1.96, truth[name] + wobble - hw,
                                truth[name] + wobble + hw, hw, target, state == "converged",
                                eta_s, state, blocks=int(64 * t)))
        for name in ("W", "ww", "uw", "vw"):
            hw = 0.02 * truth["k"] / math.sqrt(max(t, 1e-3))
            out.append(Estimate(name, truth[name], hw / 1.96, truth[name] - hw, truth[name] + hw,
                                hw, None, None, None, "untargeted"))
        for c in _COLUMNS:  # integral time scales of an invented 5 ms, as the monitor names them
            tint = 0.005
            for name, value in ((f"Tint_{c}", tint), (f"Neff_{c}", t / (2 * tint)),
                                (f"L_{c}", tint * truth["U"])):
                out.append(Estimate(name, value, 0.1 * value, 0.8 * value, 1.2 * value,
                                    0.2 * value, None, None, None, "untargeted"))
        return tuple(out)

    def _summary(self, index: int, y: float) -> dict:
        est = self._estimates(y, self.point_s)
        stats = [e.to_json() for e in est]
        return {"v": 1, "kind": "point", "complete": True, "stream": "probe-a", "session": "pv",
                "point": {"id": f"P{index:02d}", "x": 0.3, "y": float(y), "z": 0.0},
                "samples": int(20_000 * self.point_s), "duration_s": self.point_s,
                "messages": int(10 * self.point_s), "gaps": 0, "lost_messages": 0,
                "rejected": {}, "confidence": 0.95, "converged": True,
                "converged_at_s": 0.8 * self.point_s, "statistics": stats}

    def _campaign_of(self, index: int, finished) -> object:
        """The traverse's campaign ETA as the monitor makes it (monitor.campaign), the
        preview's points being its points file; rebuilt when a point finishes."""
        from eddyvigil.monitor.campaign import Campaign

        if self._campaign is None or self._campaign[0] != index:
            c = Campaign([{"id": f"P{i:02d}", "x": 0.3, "y": float(y), "z": 0.0}
                          for i, y in enumerate(self.ys)])
            for line in finished:
                c.start(line["point"], None)
                c.finish(line, None)
            c.start({"id": f"P{index:02d}", "x": 0.3, "y": float(self.ys[index]), "z": 0.0},
                    None)
            self._campaign = (index, c)
        return self._campaign[1]

    def snapshot(self, t_s: float) -> RunSnapshot:
        """The run as the monitor would publish it ``t_s`` seconds after the start."""
        self._sequence += 1
        index = min(int(t_s // self.point_s), len(self.ys) - 1)
        t = t_s - index * self.point_s
        y = float(self.ys[index])
        est = self._estimates(y, t)
        targeted = [e for e in est if e.target is not None]
        converged = all(e.converged for e in targeted)
        stats = PointSnapshot(_COLUMNS, int(20_000 * t), t, 0.95, est, converged,
                              0.8 * self.point_s if converged else None, "three-component")
        rng = np.random.default_rng(self.seed)
        tt = np.linspace(max(0.0, t_s - 2.0), t_s, 400)
        phase = rng.normal(size=3)
        truth = self._truth(y)
        trace = {"t": tt}
        for j, c in enumerate(_COLUMNS):
            amp = math.sqrt(truth[c + c])
            trace[c] = (truth[c.upper()] + amp * np.sin(23.0 * tt + phase[j])
                        * np.cos(5.0 * tt + 2 * phase[j]))
        # four rows a second, at most 400 (a pipeline thins its history the same way)
        hist_t = np.linspace(0.25, max(t, 0.25), max(2, min(int(t * 4), 400)))
        history = {"duration_s": hist_t}
        for e in targeted:
            rel, at1 = next((r, a) for n, r, a in _TARGETED if n == e.name)
            hw = e.target * at1 / np.sqrt(hist_t)
            history[e.name] = self._truth(y)[e.name] + 0.6 * hw * np.sin(1.3 * hist_t + len(e.name))
            history[e.name + "_hw"] = hw
            history[e.name + "_target"] = np.full(hist_t.shape, e.target)
        finished = tuple(self._summary(i, float(self.ys[i])) for i in range(index))
        view = StreamView(
            stream="probe-a", session="pv", point={"id": f"P{index:02d}", "x": 0.3, "y": y,
                                                   "z": 0.0},
            point_index=index, stats=stats, rate_hz=20_000.0, received_rate_hz=20_000.0,
            messages=int(10 * t_s), lost_messages=0, gaps=0, restarts=0,
            rejected={"non_finite": 2} if t_s > 5 else {}, trace=trace, history=history,
            finished=finished,
            converged_wall_age_s=(t - 0.8 * self.point_s) if converged else None,
            campaign=self._campaign_of(index, finished).view(t))
        return RunSnapshot(self._sequence, time.time(), {"probe-a": view},
                           rejected_total={"non_finite": 2} if t_s > 5 else {})


def main() -> None:
    """Serve the preview run on 127.0.0.1:5006 until Ctrl-C."""
    from eddyvigil.monitor.dashboard.server import serve

    run = PreviewRun()
    start = time.monotonic()
    serve(lambda: run.snapshot(time.monotonic() - start),
          on_ready=lambda s: print(f"preview dashboard at {s.url}", flush=True))


if __name__ == "__main__":
    main()
