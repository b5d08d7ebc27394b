"""The summary's lines (DESIGN §4) built from the monitor's state: a point line, the run line.

Pure functions: they read a :class:`~eddyvigil.monitor.point_run.PointRun` and the counts of
its stream or of the run and return a JSON-able dict; writing is
:class:`~eddyvigil.monitor.summary.SummaryWriter`'s job. The field lists and their order are
the contract (``monitor.summary.POINT_FIELDS`` / ``RUN_FIELDS``): ``statistics`` comes last.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

from eddyvigil.monitor import wire

__all__ = ["point_line", "run_line", "zero_reasons"]


def zero_reasons() -> dict[str, int]:
    """Every wire rejection reason with a zero count (the summary lists them all)."""
    return dict.fromkeys(wire.REJECTION_REASONS, 0)


def point_line(
    stream: str,
    session: str | None,
    restarts: int,
    point_run,
    complete: bool,
    confidence: float,
) -> dict:
    """The ``point`` line of one point of ``stream`` as it stands (finished or signalled)."""
    from eddyvigil.stats import point_spectra
    from eddyvigil.stats.verdict import point_verdict

    run = point_run
    snap = run.point_snapshot
    rejected = zero_reasons()
    rejected.update(run.rejected)
    line = {
        "v": 1,
        "kind": "point",
        "complete": bool(complete),
        "stream": stream,
        "session": session,
        "point": dict(run.meta),
        "point_index": run.index,
        "samples": 0,
        "duration_s": 0.0,
        "messages": run.messages,
        "gaps": run.gaps,
        "lost_messages": run.lost,
        "rejected": rejected,
        "restarts": restarts,
        "confidence": float(confidence),
        "converged": False,
        "converged_at_s": None,
        "k_method": None,
        "suspect": {},
        "verdict": point_verdict(snap).to_json(),
        "signalled_at_s": run.signalled_at_s,
        "withdrawn_at_s": run.withdrawn_at_s,
        "columns": list(run.columns) if run.columns else [],
        "rate_hz": run.rate_hz,
        "units": run.units,
        "statistics": [],
    }
    if snap is not None:
        fields = snap.summary_fields()
        line.update(fields)
        extra, rows = point_spectra.summary_fields(
            run.spectra, snap, run.meta, random_sampling=run.rate_hz is None
        )
        line.update(extra)
        # keep the contract order: statistics last
        line["quality"] = run.quality.summary()
        if run.random is not None:
            line.update(run.statistics.random_sampling_fields())  # DESIGN §10
        line["statistics"] = line.pop("statistics") + rows
    if getattr(run, "derived", None) is not None:  # [budget] targets (stats/budget_targets.py)
        line["derived_targets"] = run.derived.to_json()
        line["statistics"] = line.pop("statistics")  # still last
    return line


def run_line(
    streams: Iterable,
    messages: int,
    rejected: Mapping[str, int],
    points: int,
) -> dict:
    """The closing ``run`` line: totals over ``streams`` (objects with ``name``, ``active``,
    ``samples`` and a ``sequence`` account), every message received, rejections, points."""
    streams = list(streams)
    counts = zero_reasons()
    counts.update(rejected)
    return {
        "v": 1,
        "kind": "run",
        "samples": sum(st.samples for st in streams),
        "messages": messages,
        "lost": sum(st.sequence.lost for st in streams),
        "gaps": sum(st.sequence.gaps for st in streams),
        "rejected": counts,
        "points": points,
        "streams": sorted(st.name for st in streams if st.active),
        "restarts": sum(st.sequence.restarts for st in streams),
    }
