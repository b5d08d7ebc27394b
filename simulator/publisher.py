"""Paced publishing of a scenario over ZeroMQ, wire protocol v1 (DESIGN §2).

One stream, one session at a time. For every point: a ``point`` message, then ``samples``
messages of ``block`` rows until the point's time is up (``point_seconds``) or, with a control
endpoint, until the monitor says the point converged; after the last point an ``end`` message.

Pacing: every message is due when the sample clock (rows sent / rows per second) divided by
the speed has elapsed on a monotonic clock started once at the first point, so sleeping
errors never accumulate. ``speed = inf`` sends as fast as the socket takes it.

Slow joiners: a PUB socket drops what it sends before a subscriber has connected and
subscribed. Before the first message the publisher waits for a peer to connect (ZeroMQ
socket monitor: ``ACCEPTED`` on a bound socket, ``CONNECTED`` on a connecting one; at most
``wait_peer_s``) and then a further ``settle_s`` (default 0.3 s) for the subscription to
arrive. A PUSH socket needs no settling: it blocks until a peer is there.
"""

from __future__ import annotations

import json
import math
import signal
import sys
import time
import uuid
from dataclasses import dataclass

import numpy as np
import zmq

from eddyvigil.monitor import wire
from eddyvigil.monitor.transport import Pacer, open_publisher, open_socket, wait_for_peer
from eddyvigil.simulator.faults import MALFORMED_KINDS, MessageFaults, SampleFaults, malformed_frames
from eddyvigil.simulator.scenario import RandomSampler, Scenario, point_truth, write_truth

__all__ = ["PublisherOptions", "Publisher", "wait_for_peer"]


@dataclass
class PublisherOptions:
    """Settings of one publishing run (see ``eddyvigil simulate --help``)."""

    endpoint: str
    bind: bool = True
    socket_type: str = "pub"
    speed: float = 1.0
    seed: int = 0
    block: int | None = None
    point_seconds: float | None = None
    plan_seconds: dict | None = None  # point id -> record length (s), from `eddyvigil plan`
    follow_control: str | None = None
    truth_path: str | None = None
    settle_s: float = 0.3
    wait_peer_s: float = 5.0
    sndhwm: int = 1000
    quiet: bool = False
    #: CURVE client socket options (``eddyvigil.monitor.keys.client_options``); None: no CURVE
    curve: dict | None = None


class Publisher:
    """Publish ``scenario`` with ``options``; :meth:`run` returns an exit code."""

    def __init__(self, scenario: Scenario, options: PublisherOptions, *, context=None):
        self.scenario = scenario
        self.opt = options
        self.ctx = context or zmq.Context.instance()
        rps = scenario.rows_per_second
        self.block = int(options.block or max(1, round(rps * 0.05)))
        self.point_seconds = float(options.point_seconds or scenario.point_seconds)
        self.session = uuid.uuid4().hex[:12]
        self.seq = 0
        self.sessions = [self.session]
        self.samples_messages = 0  # samples messages attempted, whole run (fault schedule)
        self.sent = 0
        self.stream_rows = 0  # rows on the pacing clock, whole run
        self.session_t0 = 0.0  # stream-clock time at which the current session began
        self._stop = False
        self._control = None
        self.message_faults = MessageFaults(
            scenario.faults, np.random.SeedSequence([options.seed, 999_983])
        )
        self.truth: dict = {}

    # ---- small helpers ------------------------------------------------------------------
    def _log(self, text: str) -> None:
        if not self.opt.quiet:
            print(text, file=sys.stderr, flush=True)

    def _send(self, frames) -> None:
        # PUSH blocks while no peer can take the message: wait in short steps so that SIGINT /
        # SIGTERM still stop us (after a stop, give the message at most 2 s, e.g. for `end`)
        give_up = None
        while True:
            try:
                self.sock.send_multipart(frames, copy=False)
                self.sent += 1
                return
            except zmq.Again:
                if self._stop:
                    give_up = give_up or time.monotonic() + 2.0
                    if time.monotonic() > give_up:
                        self._log("simulate: stopped while no peer took the messages")
                        return

    def _next_seq(self) -> int:
        s = self.seq
        self.seq += 1
        return s

    def _pace(self, stream_time_s: float) -> None:
        # the first samples message is on time by definition: set-up costs before it (numba
        # cache load, kernel design) do not count against the clock
        self._pacer.wait(stream_time_s, stop=lambda: self._stop)

    def _converged_signal(self, point_id: str) -> bool:
        if self._control is None:
            return False
        got = False
        while self._control.poll(0):
            frames = self._control.recv_multipart()
            try:
                msg = json.loads(frames[-1])
                pid = (msg.get("point") or {}).get("id")
            except (ValueError, AttributeError, IndexError):
                continue
            if msg.get("kind") == "converged" and pid == point_id:
                got = True
        return got

    # ---- run --------------------------------------------------------------------------
    def _open(self) -> None:
        self.sock, peer = open_publisher(
            self.ctx,
            self.opt.socket_type,
            self.opt.endpoint,
            bind=self.opt.bind,
            wait_peer_s=self.opt.wait_peer_s,
            settle_s=self.opt.settle_s,
            stop=lambda: self._stop,
            linger_ms=2000,  # let the last frames (end) leave on close
            # PUSH retries: _send; CURVE keys (if any) before the bind/connect
            options={zmq.SNDHWM: self.opt.sndhwm, zmq.SNDTIMEO: 200, **(self.opt.curve or {})},
        )
        if not peer:
            self._log(f"simulate: no peer within {self.opt.wait_peer_s:g} s; publishing anyway")
        if self.opt.follow_control:
            self._control = open_socket(self.ctx, "sub", self.opt.follow_control, bind=False,
                                        options={zmq.SUBSCRIBE: self.scenario.stream.encode()})

    def _close(self) -> None:
        if self._control is not None:
            self._control.close(linger=0)
        self.sock.close()

    def _on_signal(self, *_):
        self._stop = True

    def run(self) -> int:
        """Publish the whole traverse; return 0, or 130 when stopped by SIGINT/SIGTERM."""
        old = {}
        try:
            for s in (signal.SIGINT, signal.SIGTERM):
                old[s] = signal.signal(s, self._on_signal)
        except ValueError:  # not the main thread: no signal handling
            old = {}
        try:
            self._pacer = Pacer(None if math.isinf(self.opt.speed) else self.opt.speed)
            self._open()
            self._run_points()
            self._send(wire.encode_end(self.scenario.stream, self.session, self._next_seq()))
            self._write_truth(final=True)
            self._log(f"simulate: end after {self.sent} messages, {self.stream_rows} rows")
        finally:
            for s, h in old.items():
                signal.signal(s, h)
            if hasattr(self, "sock"):
                self._close()
        return 130 if self._stop else 0

    def _restart(self) -> None:
        self.session = uuid.uuid4().hex[:12]
        self.sessions.append(self.session)
        self.seq = 0
        self.session_t0 = self.stream_rows / self.scenario.rows_per_second
        self.message_faults.restarts.append(
            {"at_message": self.samples_messages, "session": self.session}
        )

    def _restarted_at(self, message_index: int) -> bool:
        return any(r["at_message"] == message_index for r in self.message_faults.restarts)

    def _malformed_burst(self, data, columns, rate_hz, t0) -> None:
        for kind in self.message_faults.malformed_kinds:
            seq = self._next_seq()
            frames = malformed_frames(
                kind, self.scenario.stream, self.session, seq, data, columns, rate_hz=rate_hz, t0=t0
            )
            self._send(frames)
            self.message_faults.malformed.append(
                {"session": self.session, "seq": seq, "kind": kind, "reason": MALFORMED_KINDS[kind]}
            )

    def _limit_s(self, point) -> float:
        """The longest record point ``point`` gets (the cap with --follow-control)."""
        return float((self.opt.plan_seconds or {}).get(point.id, self.point_seconds))

    def _traverse(self, i: int) -> dict:
        """The traverse plan announced on point ``i``'s message (README "Announcing the
        traverse"): its place, the count, its time limit and the points after it."""
        points = self.scenario.points
        return {"index": i, "of": len(points), "limit_s": self._limit_s(points[i]),
                "remaining": [{"id": p.id, "x": p.x, "y": p.y, "z": p.z,
                               "limit_s": self._limit_s(p)} for p in points[i + 1:]]}

    def _run_points(self) -> None:
        sc = self.scenario
        rps = sc.rows_per_second
        self.truth = {
            "v": 1,
            "kind": "truth",
            "scenario": sc.name,
            "source": sc.source,
            "description": sc.description,
            "facility": sc.facility,
            "stream": sc.stream,
            "columns": list(sc.row_columns),
            "rate_hz": sc.rate_hz,
            "data_rate_hz": sc.data_rate_hz,
            "sampling": sc.sampling,
            "seed": self.opt.seed,
            "speed": None if math.isinf(self.opt.speed) else self.opt.speed,
            "block": self.block,
            "points": [],
        }
        np_dtype = np.dtype(sc.dtype)
        seeds = [
            np.random.SeedSequence([self.opt.seed, i]).generate_state(2)
            for i in range(len(sc.points))
        ]
        # truths first: their set-up (kernel design) then never delays a point's samples
        truths = [point_truth(sc, p, int(s[0])) for p, s in zip(sc.points, seeds, strict=True)]
        for i, point in enumerate(sc.points):
            if self._stop:
                break
            gen = sc.make_generator(point, int(seeds[i][0]))
            turb = gen.generator if isinstance(gen, RandomSampler) else gen
            seconds = self._limit_s(point)
            max_rows = int(math.ceil(seconds * rps))
            faults = SampleFaults(
                sc.point_faults(point),
                rps,
                max_rows,
                np.sqrt(np.diag(turb.total_stress())),
                int(seeds[i][1]),
            )
            wire_point = point.wire_point(sc.nu)
            plan = {"traverse": self._traverse(i)}
            first = {"session": self.session, "seq": self.seq}
            self._send(wire.encode_point(sc.stream, self.session, self._next_seq(), wire_point,
                                         plan))
            self._log(f"simulate: point {point.id} (y = {point.y:g} m)")
            rows = 0  # rows on the stream clock (expected rows for random sampling)
            taken = 0  # rows actually emitted (the fault schedule's index)
            fine = 0  # fine-clock samples (random sampling)
            converged = False
            point_t0 = self.stream_rows / rps
            mf = self.message_faults
            while rows < max_rows and not self._stop:
                if mf.restart_due(self.samples_messages) and not self._restarted_at(
                    self.samples_messages
                ):
                    self._restart()
                    self._send(wire.encode_point(sc.stream, self.session, self._next_seq(),
                                                 wire_point, plan))
                n = min(self.block, max_rows - rows)
                if isinstance(gen, RandomSampler):
                    k = int(round(n * sc.rate_hz / rps))
                    raw = gen.next_block(k)
                    fine += k
                    t = raw[:, -2] + (point_t0 - self.session_t0)
                    vel = faults.apply(raw[:, :-2], taken, times_s=raw[:, -2])
                    block = np.column_stack([vel, t, raw[:, -1]])
                    t_first = float(t[0]) if t.size else 0.0
                    rate = None
                else:
                    block = faults.apply(gen.next_block(n), taken)
                    t_first = self.stream_rows / rps - self.session_t0
                    rate = sc.rate_hz
                taken += block.shape[0]
                rows += n
                self.stream_rows += n
                self._pace(self.stream_rows / rps)
                if block.shape[0] == 0:
                    continue
                data = block.astype(np_dtype, copy=False)
                if mf.malformed_due(self.samples_messages):
                    self._malformed_burst(data, sc.row_columns, rate, t_first)
                self.samples_messages += 1
                seq = self._next_seq()
                if mf.lose():
                    mf.lost.append({"session": self.session, "seq": seq})
                    continue
                self._send(
                    wire.encode_samples(
                        sc.stream, self.session, seq, data, sc.row_columns, rate_hz=rate, t0=t_first
                    )
                )
                if self._converged_signal(point.id):
                    converged = True
                    break
            record = dict(truths[i])
            record.update(
                rows=taken,
                fine_clock_samples=fine or None,
                duration_s=rows / rps,
                ended_by="converged" if converged else ("stopped" if self._stop else "time"),
                first_message=first,
                faults=faults.truth(),
            )
            self.truth["points"].append(record)
            self._write_truth(final=False)

    def _write_truth(self, final: bool) -> None:
        if not self.opt.truth_path:
            return
        self.truth["sessions"] = list(self.sessions)
        self.truth["messages"] = {
            "sent": self.sent,
            "samples_messages": self.samples_messages,
            **self.message_faults.truth(),
        }
        self.truth["complete"] = final and not self._stop
        write_truth(self.opt.truth_path, self.truth)
