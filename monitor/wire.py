"""Wire protocol v1: pure encode/decode of ZeroMQ multipart messages (DESIGN §2).

A message is a list of frames: the topic (stream name, UTF-8), a JSON header object and, for
``kind: "samples"`` only, the raw C-order little-endian samples. The simulator encodes and the
monitor decodes with this one module, so the two cannot drift. Nothing is ever pickled.

:func:`decode` never raises on bad input. Whatever arrives (bytes of any content, wrong types,
``zmq.Frame`` objects) comes back either as a message or as a :class:`Rejection` with one of
:data:`REJECTION_REASONS`, carrying ``stream``, ``session`` and ``seq`` when they could be read:
a rejected message still consumes its ``seq`` and is therefore not counted as a loss.

Choices made where DESIGN leaves room:

- A ``t`` column must be *non-decreasing* within a message: equal consecutive times are accepted
  (processors with a coarse clock give identical stamps to close bursts); a step back is rejected
  as ``time_backwards``. Order across messages is the receiver's business.
- ``rate_hz`` must be a positive finite number, or null/absent only when a ``t`` column is present
  (a number together with a ``t`` column is accepted and kept).
- ``columns`` must hold at least one velocity column (a name other than ``t`` and ``weight``).
- A ``weight`` column must be non-negative (residence times): else ``bad_weight``.
- Header numbers must be JSON numbers, never booleans; ``seq >= 0``, ``n >= 1``.
- ``point`` (required on point messages, optional on samples): an object with a non-empty string
  ``id``; ``x``, ``y``, ``z`` finite numbers and ``nu`` a positive finite number when present,
  ``note`` a string when present.

Rakes and fields (DESIGN §13, a compatible extension: a message without the new fields decodes
exactly as before):

- ``"probes": P`` (an integer >= 1) on a samples header: the frame holds ``n x P x
  len(columns)`` values and ``data`` is (n, P, len(columns)). ``t`` and ``weight`` columns are
  refused with ``probes`` (a rake or field is sampled uniformly: ``rate_hz`` is required).
- ``valid`` (only with ``probes``): 0 or 1 per row and probe, else ``bad_field``. The
  velocities of a vector marked 0 are never read, so they may be NaN (as PIV software writes
  rejected vectors); every vector marked 1 must be finite (``non_finite``).
- On a point message, ``"probes": [{"id", "x", "y", "z"}, ...]`` (a rake: non-empty ids,
  finite coordinates) or ``"grid": {"x0", "dx", "nx", "y0", "dy", "ny"}`` (a field, row-major,
  P = nx*ny: finite origins, positive finite spacings, integer counts >= 1), not both; they
  sit in the header beside ``point``, so the summary's ``point`` object stays small.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "PROTOCOL_VERSION",
    "DEFAULT_MAX_MESSAGE_BYTES",
    "REJECTION_REASONS",
    "SAMPLE_DTYPES",
    "SamplesMessage",
    "PointMessage",
    "EndMessage",
    "Rejection",
    "encode_samples",
    "encode_point",
    "encode_end",
    "decode",
]

PROTOCOL_VERSION = 1
DEFAULT_MAX_MESSAGE_BYTES = 256 * 2**20

#: Every reason a message can be rejected for, roughly in the order decode checks them.
REJECTION_REASONS: tuple[str, ...] = (
    "too_large",  # all frames together exceed the size limit
    "bad_frames",  # not a sequence of buffers, wrong frame count for the kind, topic not UTF-8
    "bad_json",  # header not UTF-8 JSON, or not a JSON object
    "missing_field",  # a required header field is absent
    "bad_version",  # v is not 1
    "bad_kind",  # kind is not samples / point / end
    "bad_field",  # a header field has the wrong type or value
    "stream_mismatch",  # header stream differs from the topic
    "bad_dtype",  # dtype outside <f4 / <f8
    "bad_shape",  # samples byte count differs from n x len(columns) x itemsize
    "non_finite",  # NaN or infinity among the samples
    "time_backwards",  # the t column decreases
    "bad_weight",  # a negative weight
)

#: Sample dtypes allowed on the wire (little-endian floats only).
SAMPLE_DTYPES: tuple[str, ...] = ("<f4", "<f8")

_KIND_FRAMES = {"samples": 3, "point": 2, "end": 2}
_NON_VELOCITY = ("t", "weight")
_NON_VELOCITY_PROBES = ("t", "weight", "valid")
#: Probes of one rake/field message at most (a 1024 x 1024 PIV field).
MAX_PROBES = 2**20


# --------------------------------------------------------------------------- messages


@dataclass(frozen=True)
class SamplesMessage:
    """A block of samples; ``data``: (n, len(columns)) read-only view on the received buffer."""

    stream: str
    session: str
    seq: int
    columns: tuple[str, ...]
    dtype: str
    data: np.ndarray
    rate_hz: float | None
    t0: float
    units: str
    point: dict | None
    header: dict
    probes: int | None = None  # P of a rake/field: data is then (n, P, len(columns))

    @property
    def n(self) -> int:
        """Number of rows."""
        return int(self.data.shape[0])

    @property
    def velocity_columns(self) -> tuple[str, ...]:
        """Column names without ``t`` and ``weight`` (and ``valid`` with probes), in wire order."""
        skip = _NON_VELOCITY if self.probes is None else _NON_VELOCITY_PROBES
        return tuple(c for c in self.columns if c not in skip)

    @property
    def velocity(self) -> np.ndarray:
        """(n, m) velocity (or (n, P, m) with probes): ``data`` itself if it holds velocity
        columns only, else a copy."""
        if len(self.velocity_columns) == len(self.columns):
            return self.data
        keep = set(self.velocity_columns)
        idx = [i for i, c in enumerate(self.columns) if c in keep]
        return self.data[..., idx]

    @property
    def valid(self) -> np.ndarray | None:
        """(n, P) boolean mask of the ``valid`` column of a rake/field message, or None."""
        if self.probes is None or "valid" not in self.columns:
            return None
        return self.data[..., self.columns.index("valid")] == 1

    @property
    def times(self) -> np.ndarray | None:
        """The ``t`` column (s since session start) as a view, or None."""
        return self._column("t")

    @property
    def weights(self) -> np.ndarray | None:
        """The ``weight`` column as a view, or None."""
        return self._column("weight")

    def _column(self, name: str) -> np.ndarray | None:
        if name not in self.columns:
            return None
        return self.data[..., self.columns.index(name)]


@dataclass(frozen=True)
class PointMessage:
    """A new measurement point begins on ``stream``."""

    stream: str
    session: str
    seq: int
    point: dict
    header: dict
    probes: tuple[dict, ...] | None = None  # a rake's probes (DESIGN §13)
    grid: dict | None = None  # a field's grid: x0, dx, nx, y0, dy, ny

    @property
    def n_probes(self) -> int | None:
        """P of the rake or field this point message announces, or None (one probe)."""
        if self.probes is not None:
            return len(self.probes)
        if self.grid is not None:
            return int(self.grid["nx"]) * int(self.grid["ny"])
        return None


@dataclass(frozen=True)
class EndMessage:
    """The run of ``stream`` is over."""

    stream: str
    session: str
    seq: int
    header: dict


@dataclass(frozen=True)
class Rejection:
    """A message refused whole; ``reason`` is one of :data:`REJECTION_REASONS`."""

    reason: str
    detail: str
    stream: str | None = None
    session: str | None = None
    seq: int | None = None


Message = SamplesMessage | PointMessage | EndMessage


# --------------------------------------------------------------------------- encode


def _header_bytes(header: dict) -> bytes:
    return json.dumps(header, separators=(",", ":"), allow_nan=False).encode("utf-8")


def _base_header(kind: str, stream: str, session: str, seq: int) -> dict:
    return {"v": PROTOCOL_VERSION, "kind": kind, "stream": stream, "session": session, "seq": seq}


def encode_samples(
    stream: str,
    session: str,
    seq: int,
    data: np.ndarray,
    columns,
    *,
    rate_hz: float | None,
    t0: float,
    units: str = "m/s",
    point: dict | None = None,
    extra: dict | None = None,
) -> list:
    """Frames of one samples message: ``[topic, header, samples]``.

    ``data`` is (n, len(columns)) float32 or float64 (1-D is accepted for one column), or
    (n, P, len(columns)) for a rake or field (the header then says ``"probes": P``). The
    samples frame is the array itself when it is already C-contiguous little-endian (no copy;
    send it with ``copy=False``). Values are not checked (fault injection sends bad ones on
    purpose); ``extra`` header fields are added last and may override the standard ones.

    Raises
    ------
    ValueError
        If ``data`` is not a float array of the right shape.
    """
    arr = np.asarray(data)
    columns = tuple(columns)
    if arr.ndim == 1 and len(columns) == 1:
        arr = arr.reshape(-1, 1)
    probes = arr.shape[1] if arr.ndim == 3 else None  # a rake or field (DESIGN §13)
    if arr.ndim not in (2, 3) or arr.shape[-1] != len(columns):
        raise ValueError(f"data of shape {arr.shape} does not match {len(columns)} columns")
    if arr.dtype.kind != "f" or arr.dtype.itemsize not in (4, 8):
        raise ValueError(f"data must be float32 or float64, not {arr.dtype}")
    arr = np.ascontiguousarray(arr.astype(arr.dtype.newbyteorder("<"), copy=False))
    header = _base_header("samples", stream, session, seq)
    header.update(
        columns=list(columns),
        dtype=arr.dtype.str,
        n=int(arr.shape[0]),
        rate_hz=None if rate_hz is None else float(rate_hz),
        t0=float(t0),
        units=units,
    )
    if probes is not None:
        header["probes"] = int(probes)
    if point is not None:
        header["point"] = dict(point)
    if extra:
        header.update(extra)
    return [stream.encode("utf-8"), _header_bytes(header), arr]


def encode_point(
    stream: str, session: str, seq: int, point: dict, extra: dict | None = None
) -> list[bytes]:
    """Frames of a point message (a new measurement point begins): ``[topic, header]``."""
    header = _base_header("point", stream, session, seq)
    header["point"] = dict(point)
    if extra:
        header.update(extra)
    return [stream.encode("utf-8"), _header_bytes(header)]


def encode_end(stream: str, session: str, seq: int, extra: dict | None = None) -> list[bytes]:
    """Frames of an end message (the run is over): ``[topic, header]``."""
    header = _base_header("end", stream, session, seq)
    if extra:
        header.update(extra)
    return [stream.encode("utf-8"), _header_bytes(header)]


# --------------------------------------------------------------------------- decode


class _Reject(Exception):
    """Internal: raised inside decode, turned into a Rejection before returning."""

    def __init__(self, reason: str, detail: str):
        super().__init__(detail)
        self.reason = reason
        self.detail = detail


def _as_bytes_view(frame: Any) -> memoryview:
    """A flat byte memoryview of one frame (bytes, bytearray, memoryview, ndarray, zmq.Frame)."""
    buf = getattr(frame, "buffer", None) if not isinstance(frame, bytes | bytearray) else None
    view = memoryview(buf if buf is not None else frame)
    if view.format != "B" or view.ndim != 1:
        if not view.c_contiguous:
            raise _Reject("bad_frames", "a frame is not a contiguous buffer")
        view = view.cast("B")
    return view


def _is_int(x: Any) -> bool:
    return isinstance(x, int) and not isinstance(x, bool)


def _is_number(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


def _finite_number(x: Any) -> bool:
    return _is_number(x) and math.isfinite(x)


def _require(header: dict, name: str) -> Any:
    if name not in header:
        raise _Reject("missing_field", f"header has no {name!r}")
    return header[name]


def _check_point(point: Any) -> dict:
    if not isinstance(point, dict):
        raise _Reject("bad_field", "point must be a JSON object")
    pid = point.get("id")
    if "id" not in point:
        raise _Reject("missing_field", "point has no 'id'")
    if not isinstance(pid, str) or not pid:
        raise _Reject("bad_field", "point id must be a non-empty string")
    for key in ("x", "y", "z"):
        if key in point and not _finite_number(point[key]):
            raise _Reject("bad_field", f"point {key} must be a finite number (m)")
    if "nu" in point and not (_finite_number(point["nu"]) and point["nu"] > 0):
        raise _Reject("bad_field", "point nu must be a positive finite number (m^2/s)")
    if "note" in point and not isinstance(point["note"], str):
        raise _Reject("bad_field", "point note must be a string")
    return point


def _all_finite(arr: np.ndarray) -> bool:
    # np.isfinite(...).all() measured ~9 us for 16384 x 3 <f4 (5e9 samples/s), faster than a
    # float64 sum (24 us); far inside the 50e6 samples/s hot-path budget, so no numba kernel.
    return bool(np.isfinite(arr).all())


def _decode_samples(
    header: dict, stream: str, session: str, seq: int, payload: memoryview
) -> SamplesMessage:
    columns = _require(header, "columns")
    dtype = _require(header, "dtype")
    n = _require(header, "n")
    t0 = _require(header, "t0")
    if (
        not isinstance(columns, list)
        or not columns
        or not all(isinstance(c, str) and c for c in columns)
        or len(set(columns)) != len(columns)
    ):
        raise _Reject("bad_field", "columns must be a non-empty list of unique non-empty strings")
    probes = header.get("probes")
    if probes is not None:
        if not _is_int(probes) or not 1 <= probes <= MAX_PROBES:
            raise _Reject("bad_field", f"probes must be an integer from 1 to {MAX_PROBES}")
        if "t" in columns or "weight" in columns:
            raise _Reject("bad_field", "a rake/field message (probes) takes no t or weight column")
    elif "probes" in header:
        raise _Reject("bad_field", "probes must be an integer >= 1, not null")
    skip = _NON_VELOCITY if probes is None else _NON_VELOCITY_PROBES
    if all(c in skip for c in columns):
        raise _Reject("bad_field", "columns hold no velocity component")
    if not isinstance(dtype, str) or dtype not in SAMPLE_DTYPES:
        raise _Reject("bad_dtype", f"dtype must be one of {SAMPLE_DTYPES}, not {dtype!r}"[:200])
    if not _is_int(n) or n < 1:
        raise _Reject("bad_field", "n must be an integer >= 1")
    if not _finite_number(t0):
        raise _Reject("bad_field", "t0 must be a finite number")
    has_t = "t" in columns
    rate_hz = header.get("rate_hz")
    if rate_hz is None:
        if not has_t:
            if "rate_hz" not in header:
                raise _Reject("missing_field", "header has no 'rate_hz' and no 't' column")
            raise _Reject("bad_field", "rate_hz may be null only with a 't' column")
    elif not (_finite_number(rate_hz) and rate_hz > 0):
        raise _Reject("bad_field", "rate_hz must be a positive finite number")
    units = header.get("units", "m/s")
    if not isinstance(units, str):
        raise _Reject("bad_field", "units must be a string")
    point = header.get("point")
    if point is not None:
        point = _check_point(point)

    itemsize = 4 if dtype == "<f4" else 8
    m = len(columns)
    if probes is not None:
        return _decode_probes(header, stream, session, seq, payload, columns, dtype, n, probes,
                              rate_hz, t0, units, point)
    expected = n * m * itemsize
    if payload.nbytes != expected:
        raise _Reject(
            "bad_shape",
            f"samples frame holds {payload.nbytes} bytes, expected {n}x{m}x{itemsize} = {expected}",
        )
    data = np.frombuffer(payload, dtype=np.dtype(dtype)).reshape(n, m)
    data.flags.writeable = False
    if not _all_finite(data):
        raise _Reject("non_finite", "NaN or infinity among the samples")
    if has_t and n > 1:
        t = data[:, columns.index("t")]
        if not bool((t[1:] >= t[:-1]).all()):
            raise _Reject("time_backwards", "the t column decreases")
    if "weight" in columns and not bool((data[:, columns.index("weight")] >= 0).all()):
        raise _Reject("bad_weight", "a weight is negative")
    return SamplesMessage(
        stream=stream,
        session=session,
        seq=seq,
        columns=tuple(columns),
        dtype=dtype,
        data=data,
        rate_hz=None if rate_hz is None else float(rate_hz),
        t0=float(t0),
        units=units,
        point=point,
        header=header,
    )


def _decode_probes(header, stream, session, seq, payload, columns, dtype, n, probes, rate_hz,
                   t0, units, point) -> SamplesMessage:
    """The samples of a rake or field: (n, P, m); ``valid`` 0/1; NaN allowed where invalid."""
    itemsize = 4 if dtype == "<f4" else 8
    m = len(columns)
    expected = n * probes * m * itemsize
    if payload.nbytes != expected:
        raise _Reject(
            "bad_shape",
            f"samples frame holds {payload.nbytes} bytes, expected "
            f"{n}x{probes}x{m}x{itemsize} = {expected}",
        )
    data = np.frombuffer(payload, dtype=np.dtype(dtype)).reshape(n, probes, m)
    data.flags.writeable = False
    if "valid" in columns:
        flag = data[..., columns.index("valid")]
        if not bool(((flag == 0) | (flag == 1)).all()):
            raise _Reject("bad_field", "the valid column must hold 0 or 1")
        vel = [i for i, c in enumerate(columns) if c != "valid"]
        good = flag == 1
        if not bool(np.isfinite(data[..., vel])[good].all()):
            raise _Reject("non_finite", "NaN or infinity in a vector marked valid")
    elif not _all_finite(data):
        raise _Reject("non_finite", "NaN or infinity among the samples")
    return SamplesMessage(
        stream=stream,
        session=session,
        seq=seq,
        columns=tuple(columns),
        dtype=dtype,
        data=data,
        rate_hz=float(rate_hz),
        t0=float(t0),
        units=units,
        point=point,
        header=header,
        probes=int(probes),
    )


def _check_layout(header: dict) -> tuple[tuple[dict, ...] | None, dict | None]:
    """``probes`` (a rake) or ``grid`` (a field) of a point message, checked (DESIGN §13)."""
    probes, grid = header.get("probes"), header.get("grid")
    if probes is not None and grid is not None:
        raise _Reject("bad_field", "a point message carries probes or grid, not both")
    if probes is not None:
        if not isinstance(probes, list) or not 1 <= len(probes) <= MAX_PROBES:
            raise _Reject("bad_field", "probes must be a non-empty list of probe objects")
        for p in probes:
            if not isinstance(p, dict) or not isinstance(p.get("id"), str) or not p["id"]:
                raise _Reject("bad_field", "every probe needs a non-empty string id")
            for key in ("x", "y", "z"):
                if key in p and not _finite_number(p[key]):
                    raise _Reject("bad_field", f"probe {key} must be a finite number (m)")
        return tuple(probes), None
    if grid is not None:
        if not isinstance(grid, dict):
            raise _Reject("bad_field", "grid must be a JSON object")
        for key in ("x0", "y0"):
            if not _finite_number(grid.get(key)):
                raise _Reject("bad_field", f"grid {key} must be a finite number (m)")
        for key in ("dx", "dy"):
            if not (_finite_number(grid.get(key)) and grid[key] > 0):
                raise _Reject("bad_field", f"grid {key} must be a positive finite number (m)")
        for key in ("nx", "ny"):
            if not (_is_int(grid.get(key)) and grid[key] >= 1):
                raise _Reject("bad_field", f"grid {key} must be an integer >= 1")
        if grid["nx"] * grid["ny"] > MAX_PROBES:
            raise _Reject("bad_field", f"grid of more than {MAX_PROBES} vectors")
        return None, grid
    return None, None


def _decode(frames: Any, max_message_bytes: int, ids: list) -> Message:
    try:
        frames = list(frames)
    except Exception:
        raise _Reject("bad_frames", "frames are not a sequence") from None
    try:
        views = [_as_bytes_view(f) for f in frames]
    except _Reject:
        raise
    except Exception:
        raise _Reject("bad_frames", "a frame is not a buffer") from None
    total = sum(v.nbytes for v in views)
    if total > max_message_bytes:
        raise _Reject(
            "too_large", f"message of {total} bytes exceeds the limit of {max_message_bytes}"
        )
    if len(views) < 2:
        raise _Reject("bad_frames", f"{len(views)} frame(s); at least topic and header are needed")
    try:
        topic = views[0].tobytes().decode("utf-8")
    except UnicodeDecodeError:
        raise _Reject("bad_frames", "topic is not UTF-8") from None
    try:
        header = json.loads(views[1].tobytes().decode("utf-8"))
    except Exception:  # UnicodeDecodeError, JSONDecodeError, RecursionError on deep nesting
        raise _Reject("bad_json", "header is not UTF-8 JSON") from None
    if not isinstance(header, dict):
        raise _Reject("bad_json", "header is not a JSON object")

    # Read the identity leniently first, so that even a rejection can carry it.
    stream, session, seq = header.get("stream"), header.get("session"), header.get("seq")
    ids[0] = stream if isinstance(stream, str) else None
    ids[1] = session if isinstance(session, str) else None
    ids[2] = seq if _is_int(seq) and seq >= 0 else None

    v = _require(header, "v")
    if not _is_int(v) or v != PROTOCOL_VERSION:
        raise _Reject("bad_version", f"protocol version {v!r} is not {PROTOCOL_VERSION}"[:200])
    kind = _require(header, "kind")
    if not isinstance(kind, str) or kind not in _KIND_FRAMES:
        raise _Reject("bad_kind", f"unknown kind {kind!r}"[:200])
    stream = _require(header, "stream")
    session = _require(header, "session")
    seq = _require(header, "seq")
    if not isinstance(stream, str) or not stream:
        raise _Reject("bad_field", "stream must be a non-empty string")
    if not isinstance(session, str) or not session:
        raise _Reject("bad_field", "session must be a non-empty string")
    if not _is_int(seq) or seq < 0:
        raise _Reject("bad_field", "seq must be an integer >= 0")
    if len(views) != _KIND_FRAMES[kind]:
        raise _Reject(
            "bad_frames", f"{kind} message with {len(views)} frames, expected {_KIND_FRAMES[kind]}"
        )
    if stream != topic:
        raise _Reject(
            "stream_mismatch", f"header stream {stream!r} differs from topic {topic!r}"[:200]
        )
    if kind == "samples":
        return _decode_samples(header, stream, session, seq, views[2])
    if kind == "point":
        point = _check_point(_require(header, "point"))
        if "probes" in header or "grid" in header:
            probes, grid = _check_layout(header)
            return PointMessage(stream=stream, session=session, seq=seq, point=point,
                                header=header, probes=probes, grid=grid)
        return PointMessage(stream=stream, session=session, seq=seq, point=point, header=header)
    return EndMessage(stream=stream, session=session, seq=seq, header=header)


def decode(frames, max_message_bytes: int = DEFAULT_MAX_MESSAGE_BYTES) -> Message | Rejection:
    """Decode one multipart message; never raises on bad input.

    Parameters
    ----------
    frames
        Sequence of ``bytes`` / ``bytearray`` / ``memoryview`` / ``numpy.ndarray`` / ``zmq.Frame``.
    max_message_bytes
        Limit on the total size of all frames (DESIGN §2, ``--max-message-mb``).

    Returns
    -------
    SamplesMessage | PointMessage | EndMessage | Rejection
        For samples, ``data`` is a read-only zero-copy view on the received buffer.
    """
    ids: list = [None, None, None]
    try:
        return _decode(frames, max_message_bytes, ids)
    except _Reject as r:
        return Rejection(r.reason, r.detail, ids[0], ids[1], ids[2])
    except Exception as exc:  # a path not foreseen: still a rejection, never a crash
        return Rejection(
            "bad_frames", f"undecodable message ({type(exc).__name__})", ids[0], ids[1], ids[2]
        )
