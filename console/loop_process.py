"""The control loop in a child process, behind a proxy with the loop's own caller-side surface.

Why: the console's Textual renders run in the main thread and hold the interpreter lock (GIL) for milliseconds at a
time; a loop thread in the same process then starts its periods late and misses some. In a child process the loop has
an interpreter of its own, and the two processes share only a pipe.

Child (started with "spawn": no fork of a threaded parent): builds the transport (the in-process simulated robot for
the link "sim"), the recorder and the `ControlLoop` from picklable arguments, starts the loop thread on `start`, and
its main thread only waits on the pipe (`conn.poll`): each command is applied the moment it arrives, and the newest
snapshot goes up at most `snapshot_hz` times a second. If the pipe breaks or the parent is gone (or the child gets
SIGTERM) the child stops the robot itself: a fast stop (cause UI stall), escalated to an immediate one if the robot is
not at rest in the time the stop should take, then it closes the recording and exits. SIGHUP (the terminal closed)
does the same, and ctrl+c is left to the parent.

Parent: `LoopProcess` sends each call as one small message and keeps the newest snapshot from a reader thread (one
reference assignment, as in `ControlLoop.snapshot`). A child that ends without being asked shows as a STOPPED snapshot
with a "loop process ended" event and `failure` set; no call ever waits on it. Start-up errors (bad link URL, link
lost on open, unwritable recording) are raised by the constructor as the same type with the same one-line message.
"""

from __future__ import annotations

import gc
import multiprocessing
import os
import pickle
import select
import signal
import threading
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from console.core.link import LinkStats
from console.core.safety import SafetyState, StopCause
from console.core.step import Event, LoopStats, Snapshot
from console.errors import InputError
from console.loop import ControlLoop, WallClock, request_realtime
from console.session import WIRE_KEPT, WireChunk, bring_to_rest
from shaping.shaper import StopKind

if TYPE_CHECKING:
    from multiprocessing.connection import Connection

    from console.profile import Profile
    from console.session import RequestSource

SNAPSHOT_HZ = 30.0
"""Snapshots sent to the parent per second at most: the console renders at <= 30 Hz, more would be pickled for
nothing."""
START_TIMEOUT_S = 60.0
"""A spawned interpreter imports numpy and the console before it answers: seconds on a loaded host, never a minute."""
CLOSE_TIMEOUT_S = 30.0
"""`close()` waits this long for the child's controlled shutdown before it terminates the child."""
KILL_AFTER_S = 5.0
ENDED = "loop process ended"


class LoopProcessEnded(RuntimeError):
    """The loop's child process ended without being asked to (killed, crashed): the proxy's `failure`."""


@dataclass(frozen=True, slots=True)
class _Options:
    """Everything the child needs besides the profile; all picklable."""

    url: str
    record_path: str | None
    operator_timeout_s: float | None
    ui_timeout_s: float | None
    snapshot_hz: float
    parent_pid: int
    source: RequestSource | None = None


# -- errors across the pipe ----------------------------------------------------------------------------------------

def _portable(error: BaseException) -> BaseException:
    """The exception itself when it survives the pipe (InputError and its kinds do), else a RuntimeError naming it."""
    try:
        pickle.loads(pickle.dumps(error))
    except Exception:   # noqa: BLE001 - any exception that cannot be rebuilt is sent by name and text
        return RuntimeError(f"{type(error).__name__}: {error}")
    return error


# -- child ---------------------------------------------------------------------------------------------------------

class _Terminated(Exception):
    """SIGTERM or SIGHUP (terminal closed) in the child: stop the robot, then exit."""


ENDING_SIGNALS = (signal.SIGTERM, signal.SIGHUP)


class _Endings:
    """Ending signals seen by the child. Only the first one, and only while serving, interrupts anything (it ends
    `serve`); later ones, or any during the stop, only make the stop harsher. The child never dies of a signal it
    can catch before the robot is at rest and the recording closed: a terminal going away sends SIGHUP to both
    processes and the parent may follow with SIGTERM, and either must not cut the stop short."""

    count = 0
    serving = False


def _on_ending_signal(signum: int, frame: object) -> None:
    _Endings.count += 1
    if _Endings.count == 1 and _Endings.serving:
        _Endings.serving = False
        raise _Terminated


def _has_room(conn: Connection) -> bool:
    """The pipe takes a snapshot without blocking. Linux reports a Unix socket writable while under a quarter of its
    send buffer is in use, far more than one snapshot, so a parent that stops reading only costs it snapshots: the
    child keeps taking commands (the stop key among them)."""
    return bool(select.select([], [conn.fileno()], [], 0.0)[1])


def _build(profile: Profile, options: _Options) -> tuple[ControlLoop, Any]:
    """(loop, recorder or None); raises InputError / LinkLost with the link closed again."""
    from console.links import Link, open_link
    from console.record import Recorder

    link = open_link(profile.link.url, profile)
    sim, transport = link.sim, link.transport
    recorder = None
    if options.record_path is not None:
        try:
            recorder = Recorder(options.record_path, profile, options.url)
        except OSError as error:
            transport.close()
            raise InputError("recording", "path", options.record_path,
                             f"cannot be written ({error.strerror or error})") from None
    def reopen() -> Link:
        """The same URL again, after a link loss (reconnect)."""
        return open_link(profile.link.url, profile)

    loop = ControlLoop(profile, transport, WallClock(), sim=sim, recorder=recorder,
                       operator_timeout_s=options.operator_timeout_s, ui_timeout_s=options.ui_timeout_s,
                       url=options.url, reopen=reopen, source=options.source)
    return loop, recorder


def _endings() -> int:
    """Ending signals so far: each one after the first makes the child's stop harsher."""
    return _Endings.count


class _Child:
    """The child's main thread: the pipe on one side, the loop's caller surface on the other."""

    def __init__(self, conn: Connection, loop: ControlLoop, options: _Options) -> None:
        self.conn = conn
        self.loop = loop
        self.options = options
        self.started = False
        self._handlers: dict[str, Callable[..., None]] = {
            "request": loop.request, "wheels": loop.request_wheels, "arm": loop.arm, "stop": loop.stop,
            "op": loop.operator_alive, "ui": loop.ui_alive, "start": self._start, "reconnect": loop.reconnect,
            "wire": self._wire}

    def _wire(self, since: int) -> None:
        """The frame monitor asked: the ring's chunks it has not got yet (sent only when asked)."""
        self.conn.send(("wire", self.loop.wire_since(since)))

    def _start(self, realtime: bool) -> None:
        gc.collect()
        gc.freeze()            # start-up objects are never scanned again: short collections beside the loop
        if realtime:
            request_realtime()     # this thread too: a command must not wait for a CPU behind normal processes
        self.loop.start(realtime)
        self.started = True
        self.conn.send(("started", self.loop.scheduling))

    def serve(self) -> bool:
        """Apply commands as they come, send snapshots at <= snapshot_hz. True: asked to close; False: parent gone."""
        conn, loop = self.conn, self.loop
        period = 1.0 / self.options.snapshot_hz
        next_send = time.perf_counter()
        sent: Snapshot | None = None
        failure_sent = False
        try:
            while True:
                if conn.poll(max(next_send - time.perf_counter(), 0.0)):
                    name, *args = conn.recv()
                    if name == "close":
                        return True
                    self._handlers[name](*args)
                now = time.perf_counter()
                if now < next_send:
                    continue
                next_send = max(next_send + period, now)
                if os.getppid() != self.options.parent_pid:
                    return False       # reparented: the parent died, whoever else holds the pipe
                snapshot = loop.snapshot()
                if snapshot is not sent and _has_room(conn):
                    conn.send(("snap", snapshot))
                    sent = snapshot
                if loop.failure is not None and not failure_sent:
                    conn.send(("failed", _portable(loop.failure)))
                    failure_sent = True
        except (EOFError, OSError):   # the pipe broke: the parent is gone or cut it
            return False


def _child_main(conn: Connection, profile: Profile, options: _Options) -> None:
    """The child: build, answer "ready" (or the start-up error), serve; it always ends with the robot at rest."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)     # ctrl+c in the terminal is the parent's to handle
    for ending in ENDING_SIGNALS:
        signal.signal(ending, _on_ending_signal)
    try:
        loop, recorder = _build(profile, options)
    except Exception as error:   # noqa: BLE001 - every start-up error goes back to the parent, which raises it
        conn.send(("error", _portable(error)))
        return
    child = _Child(conn, loop, options)
    asked = False
    try:
        _Endings.serving = _Endings.count == 0
        if _Endings.serving:
            conn.send(("ready", loop.snapshot()))
            asked = child.serve()
    except _Terminated:
        pass
    finally:
        _Endings.serving = False
        if child.started:
            if asked:
                bring_to_rest(loop, StopKind.CONTROLLED, StopCause.PROGRAM_END, escalations=_endings)
            else:
                bring_to_rest(loop, StopKind.FAST, StopCause.UI_STALL, escalations=_endings)
        loop.close()
        stats, link = loop.stats(), loop.link_stats()
        sidecar = str(recorder.close(stats, link)) if recorder is not None else None
        if asked:
            try:
                conn.send(("closed", loop.snapshot(), stats, link, sidecar))
            except OSError:
                pass
        conn.close()


# -- parent --------------------------------------------------------------------------------------------------------

class LoopProcess:
    """The control loop in a child process, with the caller side of `ControlLoop`.

    `request / request_wheels / arm / stop / operator_alive / ui_alive` send one message each and never block on the
    child; `snapshot()` returns the newest snapshot received. Build it before the UI starts (start-up errors are
    raised here), call `start()` when the screen is up and `close()` at the end (controlled stop, recording closed).
    `source`: a RequestSource, pickled into the child and polled there every cycle (console.session).
    """

    def __init__(self, profile: Profile, *, url: str | None = None, record_path: str | Path | None = None,
                 operator_timeout_s: float | None = None, ui_timeout_s: float | None = None,
                 snapshot_hz: float = SNAPSHOT_HZ,
                 start_timeout_s: float = START_TIMEOUT_S, source: RequestSource | None = None) -> None:
        self.profile = profile
        self.url = url if url is not None else profile.link.url
        self.record_path = Path(record_path) if record_path is not None else None
        self.sidecar_path: Path | None = None
        self.failure: BaseException | None = None
        self.scheduling = "not started"
        self._final: tuple[LoopStats, LinkStats] | None = None
        self._send_lock = threading.Lock()
        self._close_lock = threading.Lock()     # a second close() (signal thread, then the verb) waits for the first
        self._wire: deque[WireChunk] = deque(maxlen=WIRE_KEPT)
        self._started = False
        self._closed = False
        options = _Options(self.url, None if record_path is None else str(record_path), operator_timeout_s,
                           ui_timeout_s, snapshot_hz, os.getpid(), source)
        context = multiprocessing.get_context("spawn")
        self._conn, child_conn = context.Pipe(duplex=True)
        self._process = context.Process(target=_child_main, args=(child_conn, profile, options),
                                         name="diffdeck-loop", daemon=True)
        self._process.start()
        child_conn.close()
        self._snapshot = self._await_ready(start_timeout_s)
        self._reader = threading.Thread(target=self._read, name="diffdeck-loop-reader", daemon=True)
        self._reader.start()

    def _await_ready(self, timeout_s: float) -> Snapshot:
        try:
            if self._conn.poll(timeout_s):
                kind, payload = self._conn.recv()
                if kind == "ready":
                    return payload
                self._process.join(KILL_AFTER_S)
                self._conn.close()
                raise payload
        except (EOFError, OSError):
            pass
        self._end_process()
        self._conn.close()
        raise LoopProcessEnded(f"{ENDED} during start-up (exit code {self._process.exitcode})")

    # -- caller side (the UI thread) -----------------------------------------------------------------------------

    def _send(self, *message: object) -> None:
        """One command to the child; a child already gone is shown by the snapshot, never raised at the caller."""
        with self._send_lock:
            try:
                self._conn.send(message)
            except (OSError, ValueError):      # broken pipe, or the connection already closed
                pass

    def request(self, v_mps: float, omega_radps: float) -> None:
        self._send("request", v_mps, omega_radps)

    def request_wheels(self, left_radps: float, right_radps: float) -> None:
        self._send("wheels", left_radps, right_radps)

    def arm(self) -> None:
        self._send("arm")

    def stop(self, kind: StopKind, cause: StopCause = StopCause.OPERATOR) -> None:
        self._send("stop", kind, cause)

    def operator_alive(self) -> None:
        self._send("op")

    def reconnect(self) -> None:
        self._send("reconnect")

    def ui_alive(self) -> None:
        self._send("ui")

    def snapshot(self) -> Snapshot:
        return self._snapshot

    def stats(self) -> LoopStats:
        """The final statistics after close(); before, the snapshot's (refreshed about once a second)."""
        return self._final[0] if self._final is not None else self._snapshot.loop

    def link_stats(self) -> LinkStats:
        return self._final[1] if self._final is not None else self._snapshot.link

    def wire_since(self, n: int) -> tuple[WireChunk, ...]:
        """The chunks received from the child numbered above n, and a request for the ones after them (they arrive
        with the reader thread, one call later: the frame monitor asks once per screen refresh)."""
        held = tuple(self._wire)
        self._send("wire", max(n, held[-1].n if held else 0))
        return tuple(chunk for chunk in held if chunk.n > n)

    @property
    def pid(self) -> int | None:
        return self._process.pid

    @property
    def exitcode(self) -> int | None:
        return self._process.exitcode

    # -- running -------------------------------------------------------------------------------------------------

    def start(self, realtime: bool = True) -> None:
        """Start the loop thread in the child (real-time scheduling where the OS grants it, as ControlLoop.start)."""
        if self._started:
            raise RuntimeError("the control loop is already running")
        self._started = True
        self._send("start", realtime)

    def close(self, timeout_s: float = CLOSE_TIMEOUT_S) -> None:
        """Controlled stop, recording closed, child joined; a child that does not finish in time is terminated."""
        with self._close_lock:
            if self._closed:
                return
            self._closed = True
            self._send("close")
            self._reader.join(timeout_s)
            self._end_process()
            self._reader.join(KILL_AFTER_S)
            self._conn.close()

    def _end_process(self) -> None:
        process = self._process
        process.join(KILL_AFTER_S if self._closed else 0.0)
        if process.is_alive():
            process.terminate()                     # SIGTERM: the child still stops the robot on its way out
            process.join(KILL_AFTER_S)
        if process.is_alive():
            process.kill()
            process.join(KILL_AFTER_S)

    def _read(self) -> None:
        """Reader thread: keep the newest snapshot; mark the end if the child goes without closing."""
        try:
            while True:
                kind, *payload = self._conn.recv()
                if kind == "snap":
                    self._snapshot = payload[0]
                elif kind == "wire":            # two asks can cross one answer: keep each chunk once
                    last = self._wire[-1].n if self._wire else 0
                    self._wire.extend(chunk for chunk in payload[0] if chunk.n > last)
                elif kind == "started":
                    self.scheduling = payload[0]
                elif kind == "failed":
                    self.failure = payload[0]
                elif kind == "closed":
                    self._closed_by_child(*payload)
                    return
        except (EOFError, OSError):
            pass
        self._ended()

    def _closed_by_child(self, snapshot: Snapshot, stats: LoopStats, link: LinkStats, sidecar: str | None) -> None:
        self._snapshot = snapshot
        self._final = (stats, link)
        self.sidecar_path = Path(sidecar) if sidecar is not None else None

    def _ended(self) -> None:
        """The child went away unasked: a stopped snapshot with the event, and `failure` set."""
        self._process.join(KILL_AFTER_S)
        code = self._process.exitcode
        text = f"{ENDED} (exit code {code}); the robot's watchdog stops it if the last stop frame did not"
        if self.failure is None:
            self.failure = LoopProcessEnded(text)
        last = self._snapshot
        self._snapshot = replace(last, state=SafetyState.STOPPED, cause=StopCause.LOOP_FAILURE,
                                 events=(*last.events, Event(last.t_s, text, "safety")))
