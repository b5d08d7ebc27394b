"""Synthetic rakes and PIV fields with known truth per vector (DESIGN §13 messages).

Every vector is a Gaussian velocity with a prescribed mean and Reynolds-stress tensor; in time
each component is a sampled Ornstein-Uhlenbeck process (exact AR(1), started stationary) of
integral time scale ``tint_s``; in space neighbouring vectors are correlated with correlation
length ``corr_length_m``. The construction: independent unit OU processes on the grid are
smoothed by a Gaussian kernel of width ``s = corr_length_m / sqrt(pi)`` whose rows are scaled
to unit L2 norm, so each smoothed process is again a unit-variance OU process with the same
time scale (a fixed linear combination of independent AR(1) series of one coefficient is
one); two vectors i, j are correlated by exactly K_i . K_j (the kernel rows), which on a grid
fine against s is exp(-r^2 / (4 s^2)) at distance r, whose integral over r is the correlation
length (a coarse rake is correlated less). The components are then mixed by the Cholesky
factor of the vector's stress tensor and the mean added: the truth per vector is exactly
``mean`` and ``stress`` (``k`` = ``names.k_from_normal_stresses``).

Two built-in scenarios (invented, for trying the monitor):

- ``rake``: 16 hot-wire probes across a mixing layer (U from 4 to 12 m/s by a tanh profile,
  stresses peaking in the layer), 2 kHz, u and v;
- ``piv``: a 64 x 48 field over a plane jet edge at 15 snapshots/s (independent snapshots:
  ``tint_s`` far below the snapshot interval), u and v, 2 % of the vectors marked invalid
  (``valid`` = 0, NaN velocities) at random.

``field_messages`` yields the wire messages of one point; ``publish`` sends them on a socket.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from eddyvigil.stats.names import k_from_normal_stresses, mean_names, stress_combinations
from eddyvigil.stats.names import stress_names as _stress_names

__all__ = ["FieldScenario", "FIELD_SCENARIOS", "field_scenario", "field_messages", "publish"]


@dataclass
class FieldScenario:
    """A rake (``probes``) or field (``grid``) of 2-component vectors with known truth."""

    name: str
    stream: str
    rate_hz: float
    tint_s: float
    corr_length_m: float
    x: np.ndarray  # (P,) positions, m
    y: np.ndarray
    mean: np.ndarray  # (P, 2)
    stress: np.ndarray  # (P, 2, 2)
    snapshots: int  # per point
    invalid_fraction: float = 0.0
    grid: dict | None = None
    probes: list = field(default_factory=list)
    columns: tuple[str, ...] = ("u", "v")

    @property
    def P(self) -> int:
        return int(self.x.size)

    def truth(self) -> dict[str, np.ndarray]:
        """Arrays of length P: the exact mean, stresses and k of every vector."""
        out = {n: self.mean[:, a] for a, n in enumerate(mean_names(self.columns))}
        for (a, b), n in zip(stress_combinations(2), _stress_names(self.columns), strict=True):
            out[n] = self.stress[:, a, b]
        out["k"] = k_from_normal_stresses([self.stress[:, 0, 0], self.stress[:, 1, 1]])
        return out


def _profiles(y, centre, width, u_low, u_high, peak, background):
    xi = (y - centre) / width
    U = 0.5 * (u_high + u_low) + 0.5 * (u_high - u_low) * np.tanh(xi)
    g = np.exp(-(xi**2))
    uu = background + peak * g
    vv = background + 0.6 * peak * g
    uv = -0.4 * peak * g
    mean = np.stack([U, np.zeros_like(U)], axis=1)
    stress = np.empty((y.size, 2, 2))
    stress[:, 0, 0], stress[:, 1, 1] = uu, vv
    stress[:, 0, 1] = stress[:, 1, 0] = uv
    return mean, stress


def field_scenario(name: str) -> FieldScenario:
    """The built-in ``rake`` or ``piv`` scenario."""
    if name == "rake":
        y = np.linspace(-0.03, 0.03, 16)
        x = np.zeros_like(y)
        mean, stress = _profiles(y, 0.0, 0.01, 4.0, 12.0, 1.2, 0.05)
        probes = [{"id": f"R{i:02d}", "x": 0.0, "y": float(v), "z": 0.0} for i, v in enumerate(y)]
        return FieldScenario("rake", "rake", 2000.0, 0.004, 0.004, x, y, mean, stress,
                             snapshots=60_000, probes=probes)
    if name == "piv":
        nx, ny, dx = 64, 48, 0.001
        gx, gy = np.meshgrid(np.arange(nx) * dx, (np.arange(ny) - ny / 2) * dx)
        x, y = gx.ravel(), gy.ravel()  # row-major: y rows of x
        mean, stress = _profiles(y, 0.0, 0.008, 0.5, 6.0, 0.9, 0.02)
        grid = {"x0": 0.0, "dx": dx, "nx": nx, "y0": float(gy[0, 0]), "dy": dx, "ny": ny}
        return FieldScenario("piv", "piv", 15.0, 0.002, 0.004, x, y, mean, stress,
                             snapshots=3_000, invalid_fraction=0.02, grid=grid)
    raise ValueError(f"unknown field scenario {name!r}; built in: {', '.join(FIELD_SCENARIOS)}")


FIELD_SCENARIOS = ("rake", "piv")


class FieldGenerator:
    """Snapshots of a :class:`FieldScenario`: (n, P, 2), seeded, continuous across calls."""

    def __init__(self, sc: FieldScenario, seed: int):
        self.sc = sc
        self.rng = np.random.default_rng(seed)
        s = sc.corr_length_m / math.sqrt(math.pi)
        d2 = (sc.x[:, None] - sc.x[None, :]) ** 2 + (sc.y[:, None] - sc.y[None, :]) ** 2
        K = np.exp(-d2 / (2.0 * s * s))
        K[K < 1e-6] = 0.0
        self.K = K / np.sqrt((K**2).sum(axis=1, keepdims=True))  # unit variance per vector
        from scipy import sparse

        self._Ks = sparse.csr_matrix(self.K)  # a few dozen neighbours per vector
        self.rho = math.exp(-1.0 / (sc.rate_hz * sc.tint_s))
        self.chol = np.linalg.cholesky(sc.stress)  # (P, 2, 2)
        self.z = self.rng.standard_normal((sc.P, 2))  # stationary start

    def block(self, n: int) -> np.ndarray:
        sc, rho = self.sc, self.rho
        e = self.rng.standard_normal((n, sc.P, 2)) * math.sqrt(1.0 - rho * rho)
        out = np.empty((n, sc.P, 2))
        z = self.z
        for i in range(n):
            z = rho * z + e[i]
            out[i] = z
        self.z = z
        P = sc.P
        smooth = (self._Ks @ out.transpose(1, 0, 2).reshape(P, -1)).reshape(P, n, 2)
        smooth = smooth.transpose(1, 0, 2)
        return np.einsum("pab,npb->npa", self.chol, smooth, optimize=True) + sc.mean


def field_messages(sc: FieldScenario, seed: int = 0, session: str = "sim", point_id="F1",
                   block: int | None = None, seq0: int = 0):
    """``(t_s, frames)`` of one point's wire messages (point, samples..., end), in order."""
    from eddyvigil.monitor import wire

    gen = FieldGenerator(sc, seed)
    seq = seq0
    extra = {"grid": sc.grid} if sc.grid is not None else {"probes": sc.probes}
    yield 0.0, wire.encode_point(sc.stream, session, seq, {"id": point_id}, extra=extra)
    rows = block or max(1, int(sc.rate_hz * 0.05))
    done = 0
    while done < sc.snapshots:
        n = min(rows, sc.snapshots - done)
        x = gen.block(n)
        seq += 1
        if sc.invalid_fraction > 0:
            valid = gen.rng.random((n, sc.P)) >= sc.invalid_fraction
            x[~valid] = np.nan
            data = np.concatenate([x, valid[..., None].astype(float)], axis=2)
            cols = (*sc.columns, "valid")
        else:
            data, cols = x, sc.columns
        yield done / sc.rate_hz, wire.encode_samples(
            sc.stream, session, seq, data.astype("<f4"), cols, rate_hz=sc.rate_hz,
            t0=done / sc.rate_hz)
        done += n
    seq += 1
    yield sc.snapshots / sc.rate_hz, wire.encode_end(sc.stream, session, seq)


def publish(sock, sc: FieldScenario, seed: int = 0, speed: float | None = None, stop=None) -> int:
    """Send one point of ``sc`` on an open PUB/PUSH socket, paced; returns messages sent."""
    from eddyvigil.monitor.transport import Pacer

    pacer = Pacer(speed)
    sent = 0
    for t, frames in field_messages(sc, seed):
        if stop is not None and stop():
            break
        pacer.wait(t, stop)
        sock.send_multipart(frames, copy=False)
        sent += 1
    return sent


def run_field(args) -> int:
    """``eddyvigil simulate --scenario rake|piv``: one point of the built-in rake or field.

    Uses the options of ``simulate`` that apply (endpoint, socket, speed, seed, block is
    ignored, truth: a JSON object of per-vector lists).
    """
    import json

    import zmq

    from eddyvigil.monitor.exitcodes import ExitCode, fail
    from eddyvigil.monitor.transport import (
        AddressInUseError,
        EndpointError,
        check_endpoint,
        open_publisher,
    )

    sc = field_scenario(args.scenario)
    if getattr(args, "point_seconds", None):
        sc.snapshots = max(1, int(args.point_seconds * sc.rate_hz))
    endpoint = args.bind or args.connect
    try:
        check_endpoint(endpoint, bind=args.bind is not None)
    except EndpointError as e:
        return fail("simulate", ExitCode.ENDPOINT, str(e))
    if args.truth:
        truth = {k: v.tolist() for k, v in sc.truth().items()}
        truth.update(scenario=sc.name, probes=sc.P, grid=sc.grid,
                     x=sc.x.tolist(), y=sc.y.tolist())
        try:
            with open(args.truth, "w", encoding="utf-8") as f:
                json.dump(truth, f)
        except OSError as e:
            return fail("simulate", ExitCode.CANNOT_WRITE, f"cannot write --truth: {e.strerror}")
    ctx = zmq.Context()
    try:
        sock, _ = open_publisher(ctx, args.socket, endpoint, bind=args.bind is not None,
                                 wait_peer_s=max(0.0, args.wait_peer),
                                 settle_s=max(0.0, args.settle), linger_ms=5000)
    except AddressInUseError as e:
        ctx.term()
        return fail("simulate", ExitCode.ADDRESS_IN_USE, str(e))
    except EndpointError as e:
        ctx.term()
        return fail("simulate", ExitCode.ENDPOINT, str(e))
    try:
        sent = publish(sock, sc, seed=args.seed or 0, speed=args.speed)
    finally:
        sock.close()
        ctx.term()
    if not args.quiet:
        print(f"eddyvigil simulate: {sc.name}: {sent} messages, {sc.P} vectors", flush=True)
    return ExitCode.OK
