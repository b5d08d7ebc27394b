"""Replay many recordings at once, on a Dask cluster or one after another, into one summary.

``eddyvigil reprocess DIR... --summary FILE [--dask ADDRESS|local] [--merge-repeats]`` hands
each recording to :func:`reprocess_one`, which replays it through
:class:`~eddyvigil.monitor.pipeline.Pipeline` exactly as ``eddyvigil replay DIR`` does (same
decode -> accumulate path, the recording's own targets and size limit unless ``--targets``
says otherwise). A recording is the unit of work: its frames stay in order on one worker, so
every point line is the replay's line bit for bit, whichever worker ran it; the lines are
written in the order the recordings were named, each with one more field, ``"recording"``
(the folder as given). The closing ``run`` line adds up the recordings' run lines and says
how many recordings it covers.

Where the work runs: without ``--dask``, in this process, one recording after the other;
``--dask local`` starts a ``dask.distributed.LocalCluster`` of ``--workers`` single-threaded
worker processes (2 by default); ``--dask tcp://HOST:PORT`` joins a running scheduler, whose
workers must see the recordings under the same paths (a shared file system) and have
eddyvigil installed. Dask is optional: ``pip install 'eddyvigil[dask]'``.

``--merge-repeats``: the points measured more than once (same stream and point id, in
different recordings or in one) are merged exactly
(:meth:`eddyvigil.stats.point.PointStatistics.merge` with ``independent=True``: the values of
one record over all samples; the errors of independent records joined with no lag pair across
a join); the summary then holds one point line per (stream, point id), with ``"parts"`` and
``"sources"``; counts (messages, gaps, losses, rejections, restarts) are the parts' sums.
"""

from __future__ import annotations

import argparse
import io
import json
import sys
from pathlib import Path

from eddyvigil.monitor.exitcodes import ExitCode, epilog, fail

__all__ = [
    "add_arguments",
    "run",
    "reprocess_one",
    "reprocess",
    "merge_repeats",
    "run_line_of",
    "local_cluster",
    "EPILOG",
]

EPILOG = epilog("reprocess") + """
examples:
  eddyvigil reprocess campaign/run-*/ --summary all.jsonl
  eddyvigil reprocess campaign/run-*/ --summary all.jsonl --dask local --workers 4
  eddyvigil reprocess campaign/run-*/ --summary all.jsonl --dask tcp://10.0.0.5:8786 --merge-repeats

Dask is an optional dependency: pip install 'eddyvigil[dask]'.
"""

#: How to get Dask, shown when --dask is asked for and it is missing.
DASK_HINT = "--dask needs dask.distributed: pip install 'eddyvigil[dask]' (or 'dask[distributed]')"
#: Environment of local worker processes: one BLAS thread, as ``eddyvigil`` itself runs.
WORKER_ENV = {"OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "OMP_NUM_THREADS": "1"}


#: Dask settings of local workers. No statistical profiler: its thread takes the GIL every
#: 10 ms to sample the stacks, and the replay's thread, which gives the GIL up at every numba
#: call, then waits for it. No MALLOC_TRIM_THRESHOLD_ (Dask sets 64 KiB): any such setting
#: stops glibc from raising its mmap threshold, so every array over 128 KiB (a message's
#: samples, a joined block) would be mapped and unmapped again, page faults and all. With
#: both, a replay took 1.3-1.5 times its CPU time in one process (benchmarks/bench_reprocess.py).
WORKER_CONFIG = {
    "distributed.worker.profile.enabled": False,
    "distributed.nanny.pre-spawn-environ": dict(WORKER_ENV),
}


class ReprocessError(Exception):
    """A failure a user can act on; ``code`` is the exit code."""

    def __init__(self, code: int, message: str):
        super().__init__(message)
        self.code = int(code)


def reprocess_one(directory: str, targets: dict | None = None, keep_states: bool = False) -> dict:
    """Replay one recording; returns its summary lines (and point states when asked).

    The result (all plain, picklable data, so it travels back from a Dask worker):
    ``{"recording", "lines": [point line text, ...], "run": run line dict,
    "states": [(stream, point, PointStatistics, point line dict), ...]}`` (``states`` empty
    unless ``keep_states``). ``targets``: the TOML schema as a dict
    (:meth:`~eddyvigil.stats.targets.Targets.to_dict`), or None for the recording's own.
    """
    from eddyvigil.monitor.pipeline import Pipeline
    from eddyvigil.monitor.replay import load_settings, replay_into
    from eddyvigil.monitor.watch import SETTINGS_FILE
    from eddyvigil.stats.targets import Targets

    path = Path(directory)
    settings = load_settings(path)
    if targets is not None:
        tg = Targets.from_dict(targets, source="--targets")
    elif "targets" in settings:
        tg = Targets.from_dict(settings["targets"], source=str(path / SETTINGS_FILE))
    else:
        tg = Targets.defaults()
    kwargs = {}
    if "max_message_bytes" in settings:
        kwargs["max_message_bytes"] = int(settings["max_message_bytes"])
    states: list = []

    class _Keeping(Pipeline):
        # keeps each point's statistics and line when the pipeline finishes the point
        def _finish_point(self, st, complete):
            point_run = st.current  # monitor.point_run.PointRun
            super()._finish_point(st, complete)
            statistics = point_run.statistics if point_run is not None else None
            if keep_states and statistics is not None and statistics.n:
                states.append((st.name, dict(point_run.meta), statistics, st.finished[-1]))

    text = io.StringIO()
    pipeline = _Keeping(tg, summary=text, **kwargs)
    replay_into(pipeline, path)
    pipeline.close()
    lines = text.getvalue().splitlines()
    run = json.loads(lines.pop())  # the pipeline's last line is its run line
    return {"recording": str(directory), "lines": lines, "run": run, "states": states}


def run_line_of(results: list[dict]) -> dict:
    """The ``run`` line of several recordings: their run lines added up."""
    total = {"v": 1, "kind": "run", "samples": 0, "messages": 0, "lost": 0, "gaps": 0,
             "rejected": {}, "points": 0, "streams": [], "restarts": 0}
    streams: set[str] = set()
    for r in results:
        line = r["run"]
        for key in ("samples", "messages", "lost", "gaps", "points", "restarts"):
            total[key] += int(line.get(key) or 0)
        for reason, n in (line.get("rejected") or {}).items():
            total["rejected"][reason] = total["rejected"].get(reason, 0) + int(n)
        streams.update(line.get("streams") or ())
    total["streams"] = sorted(streams)
    total["recordings"] = len(results)
    return total


def merge_repeats(results: list[dict]) -> list[dict]:
    """One point line per (stream, point id) over all recordings, repeats merged exactly.

    Parts are merged in the order of the recordings, then of the points within one.
    Raises :class:`~eddyvigil.monitor.combine.CombineError` for parts that cannot merge.
    """
    from eddyvigil.monitor.combine import CombineError

    groups: dict[tuple[str, str], dict] = {}
    for r in results:
        for stream, point, ps, line in r["states"]:
            key = (stream, "null" if point.get("id") is None else str(point.get("id")))
            g = groups.get(key)
            if g is None:
                groups[key] = {"point": point, "stats": ps, "lines": [line],
                               "sources": [r["recording"]]}
                continue
            try:
                g["stats"] = g["stats"].merge(ps, independent=True)
            except ValueError as exc:
                raise CombineError(f"stream {stream}, point {key[1]}: {exc}") from None
            g["lines"].append(line)
            g["sources"].append(r["recording"])
    out = []
    for g in groups.values():
        first, parts = g["lines"][0], g["lines"]
        rejected: dict[str, int] = {}
        for p in parts:
            for reason, n in p["rejected"].items():
                rejected[reason] = rejected.get(reason, 0) + int(n)
        line = dict(first)
        line.pop("point_index", None)
        line.update({
            "complete": all(p["complete"] for p in parts),
            "sessions": [p["session"] for p in parts],
            "messages": sum(p["messages"] for p in parts),
            "gaps": sum(p["gaps"] for p in parts),
            "lost_messages": sum(p["lost_messages"] for p in parts),
            "rejected": rejected,
            "restarts": sum(p.get("restarts", 0) for p in parts),
            "parts": len(parts),
            "sources": g["sources"],
            "independent": True,
        })
        line.update(g["stats"].snapshot().summary_fields())
        if hasattr(g["stats"], "random_sampling_fields"):  # laser-Doppler points
            line.update(g["stats"].random_sampling_fields())
        line["statistics"] = line.pop("statistics")
        out.append(line)
    return out


def local_cluster(workers: int, **kwargs):
    """A ``LocalCluster`` of ``workers`` single-threaded worker processes (one BLAS thread each).

    Its HTTP server (Dask's metrics; no dashboard) takes a free port on 127.0.0.1: Dask's
    default, port 8787 on every interface, fails (a warning, an error under pytest) while
    another cluster holds it, and need not be open to the network.
    """
    import dask
    from dask.distributed import LocalCluster

    with dask.config.set(WORKER_CONFIG):  # the nannies hand this config to their workers
        return LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address="127.0.0.1:0",
            scheduler_kwargs={"dashboard": False},
            env=dict(WORKER_ENV),
            **kwargs,
        )


def _dask_client(address: str, workers: int):
    """A ``(client, cluster or None)`` for ``--dask``; ReprocessError when it cannot be had."""
    try:
        import logging

        from dask.distributed import Client
    except ImportError:
        raise ReprocessError(ExitCode.USAGE, DASK_HINT) from None
    if address == "local":
        cluster = local_cluster(workers, silence_logs=logging.ERROR)
        return Client(cluster), cluster
    try:
        return Client(address, timeout="10s"), None
    except (OSError, TimeoutError, ValueError) as exc:
        raise ReprocessError(
            ExitCode.ENDPOINT, f"--dask {address}: cannot reach a Dask scheduler ({exc})"
        ) from None


def reprocess(directories, targets: dict | None = None, keep_states: bool = False,
              dask: str | None = None, workers: int = 2) -> list[dict]:
    """:func:`reprocess_one` of every directory, in the order given.

    ``dask``: None (this process), ``"local"`` (a LocalCluster of ``workers`` processes) or a
    scheduler address.
    """
    directories = [str(d) for d in directories]
    if dask is None:
        return [reprocess_one(d, targets, keep_states) for d in directories]
    client, cluster = _dask_client(dask, workers)
    try:
        futures = client.map(reprocess_one, directories, targets=targets,
                             keep_states=keep_states, pure=False)
        return client.gather(futures)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("dirs", nargs="+", metavar="DIR", help="recordings made by watch --record")
    p.add_argument("--summary", metavar="FILE", required=True,
                   help="write the summary JSON lines of all recordings to FILE")
    p.add_argument("--summary-mode", choices=("new", "append", "overwrite"), default=None,
                   help="new (default): refuse an existing FILE; append; overwrite")
    p.add_argument("--dask", metavar="ADDRESS|local",
                   help="run on a Dask cluster: 'local' starts one here, or a scheduler address")
    p.add_argument("--workers", type=int, default=2, metavar="N",
                   help="worker processes of --dask local (default 2)")
    p.add_argument("--merge-repeats", action="store_true",
                   help="merge repeated runs of the same point exactly (one line per point)")
    p.add_argument("--targets", metavar="FILE",
                   help="targets file (default: the one each recording's monitor used)")
    p.add_argument("--quiet", action="store_true", help="no closing line on standard error")


def _fail(code: int, message: str) -> int:
    return fail("reprocess", code, message)


def run(args: argparse.Namespace) -> int:
    from eddyvigil.monitor.outputs import (
        OutputRefused,
        check_summary_file,
        open_summary_file,
        summary_mode,
    )
    from eddyvigil.monitor.recorder import holds_recording

    if args.workers < 1:
        return _fail(ExitCode.USAGE, "--workers must be at least 1")
    if args.dask is not None:
        try:
            import dask.distributed  # noqa: F401
        except ImportError:
            return _fail(ExitCode.USAGE, DASK_HINT)
    for d in args.dirs:
        if not Path(d).is_dir():
            return _fail(ExitCode.NO_RECORDING, f"{d}: no such folder")
        if not holds_recording(Path(d)):
            return _fail(ExitCode.NO_RECORDING, f"{d} holds no recording (made by watch --record)")
    targets = None
    if args.targets:
        from eddyvigil.stats.targets import Targets, TargetsError

        try:
            targets = Targets.from_toml(args.targets).to_dict()
        except TargetsError as exc:
            return _fail(ExitCode.INPUT_FILE, str(exc))
    mode = summary_mode(args.summary_mode, False)
    try:
        check_summary_file(args.summary, mode)
    except OutputRefused as exc:
        return _fail(exc.code, str(exc))

    from eddyvigil.monitor.combine import CombineError
    from eddyvigil.monitor.summary import SummaryWriter

    try:
        results = reprocess(args.dirs, targets, args.merge_repeats, args.dask, args.workers)
        if args.merge_repeats:
            lines = merge_repeats(results)
        else:
            lines = []
            for r in results:
                for text in r["lines"]:
                    line = json.loads(text)
                    line["recording"] = r["recording"]
                    lines.append(line)
    except ReprocessError as exc:
        return _fail(exc.code, str(exc))
    except CombineError as exc:
        return _fail(ExitCode.CANNOT_COMBINE, str(exc))
    except KeyboardInterrupt:
        return _fail(ExitCode.STOPPED, "stopped before every recording was reprocessed")
    except Exception as exc:  # a worker's failure comes back here: one line, no traceback
        return _fail(ExitCode.ERROR, f"reprocessing failed ({type(exc).__name__}: {exc})")
    try:
        f = open_summary_file(args.summary, mode)
    except OutputRefused as exc:
        return _fail(exc.code, str(exc))
    writer = SummaryWriter(f)
    try:
        writer.write_all(lines)
        writer.write(run_line_of(results))
    finally:
        f.close()
    if not args.quiet:
        print(f"eddyvigil reprocess: {len(results)} recording(s), {len(lines)} point line(s) "
              f"-> {args.summary}", file=sys.stderr)
    return ExitCode.OK
