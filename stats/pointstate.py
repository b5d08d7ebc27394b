"""A point's state as plain data: JSON-able settings plus named float/int arrays, versioned.

``to_state(ps)`` returns ``(meta, arrays)``: ``meta`` is a dict of JSON types (columns, rate,
targets, confidence, base, the scalar counters, the checkpoint streaks), ``arrays`` maps names
to numpy arrays (the moment and blocking sums). ``from_state(meta, arrays)`` rebuilds a
:class:`~eddyvigil.stats.point.PointStatistics` that continues bit for bit as the original
would have. Writing them to a file is the monitor's job (``eddyvigil.monitor.combine``); this
module does no I/O. Floats survive JSON exactly (Python writes the shortest repr that reads back
the same double).

Format version 1 (``meta["format"] == "eddyvigil-point-state"``, ``meta["version"] == 1``):
arrays ``moments.mean``, ``moments.s2``, ``moments.s3``, ``moments.s4`` and ``blocking.<name>``
for every array of :class:`~eddyvigil.stats.blocking.BlockingAccumulator` (``ref`` absent while
empty); scalars in ``meta["moments"]``, ``meta["blocking"]``, ``meta["checkpoints"]``.
Version 2 adds the periodic row store (``periodic.<name>`` arrays, ``meta["periodic"]``
scalars; absent for random sampling), with the second-order rows ``periodic.rows2`` and
``periodic.carry2`` and ``meta["periodic"]["orders"]`` (2). A version 1 state still loads: its
point has no rows and no clock, so no line is ever fitted on it (its errors are blocking's, as
they were); a version 2 state saved without ``periodic.rows2`` loads with ``orders`` 1 (the
means corrected, the second moments keep blocking's errors).

Version 2 also adds points of randomly sampled (laser-Doppler) data,
:class:`~eddyvigil.stats.weighted_point.WeightedPointStatistics`, marked by
``meta["sampling"] == "random"`` (and ``weighting``): arrays ``wmom.*`` (weighted mean and
co-moment sums), ``tblocks.ref/Wb/Sb`` (time blocks), ``slots.ref/groups/tail_t/tail_a/tail_w``
(slotted pair sums per time group and the tail kept for pairs across blocks),
``arrivals.counts`` (gap histogram); their scalars in ``meta`` under the same prefixes. A
uniform point's state is the same as in version 1, which is still read.

>>> import numpy as np
>>> from eddyvigil.stats.point import PointStatistics
>>> ps = PointStatistics(("u", "v"), rate_hz=100.0).update(np.ones((5, 2)))
>>> meta, arrays = to_state(ps)
>>> meta["version"], meta["columns"], meta["moments"]["n"], arrays["moments.mean"].tolist()
(2, ['u', 'v'], 5, [1.0, 1.0])
>>> from_state(meta, arrays) == ps
True
"""

from __future__ import annotations

import dataclasses

import numpy as np

__all__ = ["FORMAT", "VERSION", "StateError", "to_state", "from_state", "same_state"]

FORMAT = "eddyvigil-point-state"
VERSION = 2
#: versions this module reads
READS = (1, 2)

_MOMENT_ARRAYS = ("mean", "s2", "s3", "s4")


class StateError(ValueError):
    """A saved state that cannot be used; the message is meant for the user."""


def _scalar(v):
    if isinstance(v, (bool, np.bool_)):
        return bool(v)
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return float(v)
    return v


def _checkpoints_meta(ps) -> dict:
    checkpoints = {
        f.name: _scalar(getattr(ps.checkpoints, f.name)) for f in dataclasses.fields(ps.checkpoints)
    }
    checkpoints["trusted"] = sorted(checkpoints["trusted"])  # a set: JSON has lists
    return checkpoints


def _checkpoints_from(meta):
    from eddyvigil.stats.convergence import Checkpoints

    cp = dict(meta["checkpoints"])
    cp["trusted"] = set(cp.get("trusted", ()))
    return Checkpoints(**cp)


# the scalars of each part of a random-sampling point kept in meta (the rest are arrays)
_RANDOM_SCALARS = {
    "wmom": ("n", "weight"),
    "tblocks": ("capacity", "samples_per_block", "t_start", "tau", "used", "merged"),
    "slots": ("dtau", "nslots", "capacity", "used", "t0", "group_s", "merged"),
    "arrivals": ("n_gaps", "total_s", "shortest_s", "last_t"),
}
_RANDOM_ARRAYS = {
    "wmom": ("mean", "s2", "s3", "s4"),
    "tblocks": ("ref", "Wb", "Sb"),
    "slots": ("ref", "groups", "_tail_t", "_tail_a", "_tail_w"),
    "arrivals": ("counts",),
}


def _random_to_state(ps) -> tuple[dict, dict[str, np.ndarray]]:
    arrays: dict[str, np.ndarray] = {}
    parts: dict[str, dict | None] = {}
    for part, scalars in _RANDOM_SCALARS.items():
        obj = getattr(ps, part)
        if obj is None:  # no slots before the first block
            parts[part] = None
            continue
        parts[part] = {k: _scalar(getattr(obj, k)) for k in scalars}
        for k in _RANDOM_ARRAYS[part]:
            v = getattr(obj, k)
            if v is not None:
                arrays[f"{part}.{k.lstrip('_')}"] = np.array(v, copy=True)
    if parts["arrivals"]["shortest_s"] == float("inf"):
        parts["arrivals"]["shortest_s"] = None  # strict JSON has no infinity
    meta = {
        "format": FORMAT,
        "version": VERSION,
        "sampling": "random",
        "weighting": ps.weighting,
        "columns": list(ps.columns),
        "confidence": ps.confidence,
        "targets": ps.targets.to_dict(),
        "duration_s": float(ps._duration_s),
        "merged": bool(ps.merged),
        **parts,
        "checkpoints": _checkpoints_meta(ps),
    }
    return meta, arrays


def _random_from_state(meta: dict, arrays):
    from eddyvigil.stats.slotting import SlottedCorrelation
    from eddyvigil.stats.weighted_point import WeightedPointStatistics

    ps = WeightedPointStatistics(
        tuple(meta["columns"]), meta["weighting"], _targets(meta["targets"]), meta["confidence"]
    )
    sl = meta["slots"]
    if sl is not None:
        ps.slots = SlottedCorrelation(len(ps.columns), sl["dtau"], sl["nslots"], sl["capacity"])
    for part, scalars in _RANDOM_SCALARS.items():
        obj = getattr(ps, part)
        if obj is None:
            continue
        for k in scalars:
            setattr(obj, k, meta[part][k])
        for k in _RANDOM_ARRAYS[part]:
            name = f"{part}.{k.lstrip('_')}"
            old = getattr(obj, k)
            if name not in arrays:
                if k != "ref":
                    raise StateError(f"incomplete point state: {name} missing")
                continue
            a = np.array(arrays[name])
            if k != "ref" and (a.ndim != old.ndim or a.shape[1:] != old.shape[1:]):
                raise StateError(f"{name}: unexpected shape {a.shape}")
            if k not in ("_tail_t", "_tail_a", "_tail_w") and k != "ref" and a.shape != old.shape:
                raise StateError(f"{name}: shape {a.shape}, expected {old.shape}")
            setattr(obj, k, a.astype(old.dtype if old is not None else np.float64))
    if ps.arrivals.shortest_s is None:
        ps.arrivals.shortest_s = float("inf")
    ps._duration_s = float(meta["duration_s"])
    ps.merged = bool(meta["merged"])
    ps.checkpoints = _checkpoints_from(meta)
    return ps


def to_state(ps) -> tuple[dict, dict[str, np.ndarray]]:
    """``(meta, arrays)`` of a :class:`PointStatistics` (copies; ``ps`` untouched)."""
    if getattr(ps, "weighting", None) is not None:
        return _random_to_state(ps)
    arrays: dict[str, np.ndarray] = {}
    for k in _MOMENT_ARRAYS:
        arrays[f"moments.{k}"] = np.array(getattr(ps.moments, k), copy=True)
    blocking = {}
    for k, v in vars(ps.blocking).items():
        if k == "layout":
            continue
        if isinstance(v, np.ndarray):
            arrays[f"blocking.{k}"] = v.copy()
        elif v is not None:
            blocking[k] = _scalar(v)
    arrays["tails.high"] = np.sort(ps.tails.high, axis=1)  # order carries no meaning: canonical
    arrays["tails.low"] = np.sort(ps.tails.low, axis=1)
    checkpoints = _checkpoints_meta(ps)
    periodic = None
    if ps.periodic is not None:
        periodic = {}
        for k, v in vars(ps.periodic).items():
            if isinstance(v, np.ndarray):
                arrays[f"periodic.{k}"] = v.copy()
            elif v is not None:
                periodic[k] = _scalar(v)
    meta = {
        "format": FORMAT,
        "version": VERSION,
        "columns": list(ps.columns),
        "rate_hz": ps.rate_hz,
        "confidence": ps.confidence,
        "targets": ps.targets.to_dict(),
        "duration_s": float(ps._duration_s),
        "moments": {"n": int(ps.moments.n)},
        "blocking": blocking,
        "tails": {"n": int(ps.tails.n), "keep": int(ps.tails.keep)},
        "checkpoints": checkpoints,
        "periodic": periodic,
    }
    return meta, arrays


def _targets(d: dict):
    from eddyvigil.stats.targets import Targets

    if not d.get("targets"):  # a point with nothing targeted
        return Targets(confidence=d["confidence"], targets={})
    return Targets.from_dict(d, source="saved state")


def from_state(meta: dict, arrays) -> object:
    """The :class:`PointStatistics` a ``(meta, arrays)`` pair describes."""
    from eddyvigil.stats.point import PointStatistics

    if meta.get("format") != FORMAT:
        raise StateError(f"not an eddyvigil point state (format {meta.get('format')!r})")
    if meta.get("version") not in READS:
        raise StateError(
            f"point state version {meta.get('version')!r}; this eddyvigil reads versions "
            f"{', '.join(map(str, READS))}"
        )
    try:
        if meta.get("sampling") == "random":
            return _random_from_state(meta, arrays)
        blocking = meta["blocking"]
        ps = PointStatistics(
            tuple(meta["columns"]),
            meta["rate_hz"],
            _targets(meta["targets"]),
            meta["confidence"],
            base=int(blocking["base"]),
        )
        mo = ps.moments
        mo.n = int(meta["moments"]["n"])
        for k in _MOMENT_ARRAYS:
            want = getattr(mo, k)
            a = np.array(arrays[f"moments.{k}"], dtype=np.float64)
            if a.shape != want.shape:
                raise StateError(f"moments.{k}: shape {a.shape}, expected {want.shape}")
            setattr(mo, k, a)
        bl = ps.blocking
        for k, v in blocking.items():
            setattr(bl, k, v)
        _load_arrays(bl, "blocking.", arrays, trailing=True)
        tails = ps.tails
        tails.n, tails.keep = int(meta["tails"]["n"]), int(meta["tails"]["keep"])
        for k in ("high", "low"):
            a = np.array(arrays[f"tails.{k}"], dtype=np.float64)
            if a.ndim != 2 or a.shape[0] != tails.m:
                raise StateError(f"tails.{k}: shape {a.shape}, expected ({tails.m}, n)")
            setattr(tails, k, a)
        _load_periodic(ps, meta, arrays)
        ps._duration_s = float(meta["duration_s"])
        ps.checkpoints = _checkpoints_from(meta)
    except StateError:
        raise
    except (KeyError, TypeError, ValueError) as exc:
        raise StateError(f"incomplete point state: {exc!r}") from None
    return ps


def _load_periodic(ps, meta, arrays) -> None:
    """The row store of a saved point (version 2), or, from version 1, an empty store without
    a clock (no line is fitted on a record whose rows were not kept)."""
    st = ps.periodic
    if st is None:
        return
    if meta["version"] == 1:
        st.clock = False
        return
    for k, v in meta["periodic"].items():
        setattr(st, k, v)
    _load_arrays(st, "periodic.", arrays, trailing=False)
    if "periodic.rows2" not in arrays:
        # saved before the second-order rows: the means' correction only
        st.orders = 1


def _load_arrays(obj, prefix: str, arrays, trailing: bool) -> None:
    """Set the arrays named ``prefix + attribute`` on ``obj`` (``ref`` unset when absent),
    each checked against the empty object's array: its shape (with ``trailing``, all but the
    first axis, which may grow) and type."""
    obj.ref = None
    for name in arrays:
        if name.startswith(prefix):
            k = name.removeprefix(prefix)
            old = getattr(obj, k, None)
            a = np.array(arrays[name])
            if k != "ref":
                if old is None:
                    raise StateError(f"{name}: not part of a point state")
                same = (a.shape[1:] == old.shape[1:]) if trailing else (a.shape == old.shape)
                if not same or a.dtype != old.dtype:
                    raise StateError(f"{name}: unexpected shape or type {a.shape} {a.dtype}")
            setattr(obj, k, a)


def same_state(a, b) -> bool:
    """True when two points have the same settings and state, bit for bit."""
    ma, xa = to_state(a)
    mb, xb = to_state(b)
    if ma != mb or xa.keys() != xb.keys():
        return False
    return all(
        xa[k].shape == xb[k].shape
        and xa[k].dtype == xb[k].dtype
        and np.array_equal(xa[k], xb[k], equal_nan=xa[k].dtype.kind == "f")
        for k in xa
    )
