"""Faults on demand, each with its ground truth recorded.

Two families:

- :class:`SampleFaults` corrupt the velocity samples of one measurement point: spikes, dropouts
  (held values), clipping at a rail, quantisation and a slow drift of the mean. Events are
  scheduled once per point from their own seeded stream over the point's maximum length, and
  applied by absolute row index, so they land on the same rows whatever the block sizes.
- :class:`MessageFaults` act on messages: loss (a ``seq`` is skipped), publisher restart (new
  session id, ``seq`` from 0) and bursts of malformed messages, each built by corrupting the
  output of :mod:`eddyvigil.monitor.wire` (never by framing of our own).

A TOML ``[faults]`` table configures them (all keys optional)::

    [faults]
    spikes       = { rate_per_s = 2.0, amplitude_sigma = 8.0 }
    dropouts     = { rate_per_s = 0.5, duration_s = 0.02 }
    clipping     = { low = [..], high = [..] }        # m/s per component (or one number)
    quantisation = { step = 0.005 }                   # m/s
    drift        = { rate = [0.02, 0.0, 0.0] }        # m/s per s, from the point's start
    loss         = { probability = 0.01 }             # per samples message
    restart      = { at_messages = [400] }            # message counts (whole run)
    malformed    = { at_messages = [150], kinds = ["bad_json", "non_finite"] }
"""

from __future__ import annotations

import math

import numpy as np

from eddyvigil.monitor import wire

__all__ = [
    "SampleFaults",
    "MessageFaults",
    "MALFORMED_KINDS",
    "malformed_frames",
    "validate_faults",
]

#: malformed message kinds -> the rejection reason a decoder must give them (DESIGN §2)
MALFORMED_KINDS = {
    "bad_json": "bad_json",
    "bad_shape": "bad_shape",
    "non_finite": "non_finite",
    "bad_dtype": "bad_dtype",
    "bad_version": "bad_version",
    "bad_frames": "bad_frames",
}

_KEYS = {
    "spikes": {"rate_per_s", "amplitude_sigma"},
    "dropouts": {"rate_per_s", "duration_s"},
    "clipping": {"low", "high"},
    "quantisation": {"step"},
    "drift": {"rate"},
    "loss": {"probability"},
    "restart": {"at_messages"},
    "malformed": {"at_messages", "kinds"},
}


def validate_faults(spec: dict | None) -> dict:
    """Check a ``[faults]`` table; return a copy or raise ``ValueError`` with a clear message."""
    spec = dict(spec or {})
    for name, table in spec.items():
        if name not in _KEYS:
            raise ValueError(f"unknown fault {name!r}; known: {', '.join(sorted(_KEYS))}")
        if not isinstance(table, dict):
            raise ValueError(f"fault {name!r} must be a table")
        extra = set(table) - _KEYS[name]
        if extra:
            raise ValueError(f"fault {name!r}: unknown key(s) {sorted(extra)}")
    if "malformed" in spec:
        for k in spec["malformed"].get("kinds", ()):
            if k not in MALFORMED_KINDS:
                raise ValueError(f"malformed kind {k!r} unknown; known: {sorted(MALFORMED_KINDS)}")
    p = spec.get("loss", {}).get("probability", 0.0)
    if not 0.0 <= p < 1.0:
        raise ValueError("loss probability must be in [0, 1)")
    q = spec.get("quantisation", {}).get("step", 1.0)
    if not q > 0:
        raise ValueError("quantisation step must be > 0")
    return spec


class SampleFaults:
    """Sample-level faults of one point, scheduled over at most ``max_rows`` rows.

    Parameters
    ----------
    spec : dict
        The ``[faults]`` table (message-level keys are ignored here).
    rate_hz : float
        Rows per second (the mean data rate for random sampling), to turn rates into counts.
    max_rows : int
        Longest the point can last, in rows.
    sigma : array_like
        r.m.s. of each velocity component (spike amplitudes are in these units).
    seed : int or SeedSequence

    Notes
    -----
    Order of application: drift, spikes, dropouts (hold the last value before the event, all
    components), clipping, quantisation. Spikes inside a dropout (or on the held row) are not
    scheduled, so every recorded spike is visible in the output.
    """

    def __init__(self, spec, rate_hz, max_rows, sigma, seed):
        spec = validate_faults(spec)
        self.sigma = np.asarray(sigma, dtype=np.float64)
        m = self.sigma.size
        rng = np.random.default_rng(seed)
        self.rate_hz = float(rate_hz)
        self.max_rows = int(max_rows)
        self.drift = np.zeros(m)
        if "drift" in spec:
            self.drift[:] = np.broadcast_to(np.asarray(spec["drift"]["rate"], float), (m,))
        self.dropouts = np.zeros((0, 2), dtype=np.int64)
        if "dropouts" in spec:
            d = spec["dropouts"]
            k = rng.poisson(d.get("rate_per_s", 0.5) * max_rows / self.rate_hz)
            length = max(1, round(d.get("duration_s", 0.02) * self.rate_hz))
            starts = np.sort(rng.integers(1, max(2, max_rows - length), size=k))
            keep, last_end = [], -1
            for s in starts:  # no overlaps, a clean row between events
                if s > last_end + 1:
                    keep.append((s, s + length))
                    last_end = s + length
            self.dropouts = np.array(keep, dtype=np.int64).reshape(-1, 2)
        self.spike_index = np.zeros(0, dtype=np.int64)
        self.spike_component = np.zeros(0, dtype=np.int64)
        self.spike_value = np.zeros(0)
        if "spikes" in spec:
            s = spec["spikes"]
            k = rng.poisson(s.get("rate_per_s", 2.0) * max_rows / self.rate_hz)
            idx = np.unique(rng.integers(0, max_rows, size=k))
            hidden = np.zeros(idx.size, dtype=bool)
            for a, b in self.dropouts:
                hidden |= (idx >= a - 1) & (idx < b)
            idx = idx[~hidden]
            comp = rng.integers(0, m, size=idx.size)
            sign = np.where(rng.random(idx.size) < 0.5, -1.0, 1.0)
            self.spike_index, self.spike_component = idx, comp
            self.spike_value = sign * s.get("amplitude_sigma", 8.0) * self.sigma[comp]
        clip = spec.get("clipping", {})
        self.clip_low = np.broadcast_to(np.asarray(clip.get("low", -np.inf), float), (m,)).copy()
        self.clip_high = np.broadcast_to(np.asarray(clip.get("high", np.inf), float), (m,)).copy()
        self.quant_step = spec.get("quantisation", {}).get("step")
        self._held = None
        self._clipped: list[np.ndarray] = []
        self.rows_seen = 0

    @property
    def active(self) -> bool:
        return bool(
            np.any(self.drift)
            or self.dropouts.size
            or self.spike_index.size
            or np.any(np.isfinite(self.clip_low))
            or np.any(np.isfinite(self.clip_high))
            or self.quant_step
        )

    def apply(self, block: np.ndarray, start: int, times_s=None) -> np.ndarray:
        """Return the faulty copy of ``block`` (n, m): rows ``start .. start+n`` of the point.

        ``times_s``: time of each row since the point began (for the drift); default
        ``(start + i) / rate_hz``.
        """
        x = np.array(block, dtype=np.float64, copy=True)
        n = x.shape[0]
        stop = start + n
        if n == 0:
            return x
        if np.any(self.drift):
            t = (start + np.arange(n)) / self.rate_hz if times_s is None else np.asarray(times_s)
            x += t[:, None] * self.drift
        sel = (self.spike_index >= start) & (self.spike_index < stop)
        x[self.spike_index[sel] - start, self.spike_component[sel]] += self.spike_value[sel]
        for a, b in self.dropouts:
            if b <= start or a >= stop:
                continue
            # the row before the event lies in this block, or it is the previous block's
            # last row (itself either row a-1 or an already held copy of it)
            held = x[a - 1 - start].copy() if a - 1 >= start else self._held
            lo, hi = max(a, start), min(b, stop)
            x[lo - start : hi - start] = held
        self._held = x[-1].copy()  # before clipping: the processor holds its own value
        clipped = (x < self.clip_low) | (x > self.clip_high)
        if clipped.any():
            np.clip(x, self.clip_low, self.clip_high, out=x)
            self._clipped.append(np.flatnonzero(clipped.any(axis=1)) + start)
        if self.quant_step:
            x = np.round(x / self.quant_step) * self.quant_step
        self.rows_seen = max(self.rows_seen, stop)
        return x

    def clipped_rows(self) -> np.ndarray:
        """Rows (since the point began) where at least one component hit a rail."""
        return np.concatenate(self._clipped) if self._clipped else np.zeros(0, dtype=np.int64)

    def truth(self) -> dict:
        """JSON-able record of what was done to the rows emitted so far."""
        seen = self.rows_seen
        spikes = self.spike_index < seen
        drops = self.dropouts[self.dropouts[:, 0] < seen] if self.dropouts.size else self.dropouts
        out = {
            "spikes": [
                {"row": int(i), "t_s": i / self.rate_hz, "component": int(c), "added": float(v)}
                for i, c, v in zip(
                    self.spike_index[spikes],
                    self.spike_component[spikes],
                    self.spike_value[spikes],
                    strict=True,
                )
            ],
            "dropouts": [
                {"first_row": int(a), "stop_row": int(min(b, seen)), "t_s": a / self.rate_hz}
                for a, b in drops
            ],
            "clipped_rows": int(self.clipped_rows().size),
            "clip_low": [None if not math.isfinite(v) else float(v) for v in self.clip_low],
            "clip_high": [None if not math.isfinite(v) else float(v) for v in self.clip_high],
            "quantisation_step": self.quant_step,
            "drift_rate": [float(v) for v in self.drift],
        }
        return out


def malformed_frames(kind: str, stream, session, seq, data, columns, *, rate_hz, t0) -> list:
    """One malformed samples message of ``kind`` (see :data:`MALFORMED_KINDS`), as frames.

    Built from a valid :func:`eddyvigil.monitor.wire.encode_samples` output, then corrupted.
    """
    data = np.ascontiguousarray(np.asarray(data, dtype="<f8"))
    if kind == "non_finite":
        data = data.copy()
        data[data.shape[0] // 2, 0] = np.nan
    extra = None
    if kind == "bad_dtype":
        extra = {"dtype": "<i8"}  # same byte count as <f8: only the dtype is wrong
    elif kind == "bad_version":
        extra = {"v": 99}
    frames = wire.encode_samples(
        stream, session, seq, data, columns, rate_hz=rate_hz, t0=t0, extra=extra
    )
    frames = [bytes(frames[0]), bytes(frames[1]), memoryview(frames[2]).cast("B").tobytes()]
    if kind == "bad_json":
        frames[1] = frames[1][: len(frames[1]) // 2]
    elif kind == "bad_shape":
        frames[2] = frames[2][:-3]
    elif kind == "bad_frames":
        frames = frames + [b"surplus"]
    return frames


class MessageFaults:
    """Message-level faults over a whole run, decided per message in order.

    ``decide(message_index)`` -> ``"send"``, ``"lose"``; ``restart_due(i)`` and
    ``malformed_due(i)`` tell the publisher when to restart or insert a burst. Truth is
    collected by the publisher calling :meth:`record`.
    """

    def __init__(self, spec, seed):
        spec = validate_faults(spec)
        self.loss_probability = float(spec.get("loss", {}).get("probability", 0.0))
        self.restart_at = sorted(int(v) for v in spec.get("restart", {}).get("at_messages", ()))
        mal = spec.get("malformed", {})
        self.malformed_at = sorted(int(v) for v in mal.get("at_messages", ()))
        self.malformed_kinds = tuple(
            mal.get("kinds", ("bad_json", "bad_shape", "non_finite", "bad_dtype"))
        )
        self._rng = np.random.default_rng(seed)
        self.lost: list[dict] = []
        self.restarts: list[dict] = []
        self.malformed: list[dict] = []

    def lose(self) -> bool:
        """Should the next samples message be dropped (its seq skipped)? One draw per call."""
        return bool(self.loss_probability) and bool(self._rng.random() < self.loss_probability)

    def restart_due(self, message_index: int) -> bool:
        return message_index in self.restart_at

    def malformed_due(self, message_index: int) -> bool:
        return message_index in self.malformed_at

    def truth(self) -> dict:
        return {
            "lost": list(self.lost),
            "restarts": list(self.restarts),
            "malformed": list(self.malformed),
        }
