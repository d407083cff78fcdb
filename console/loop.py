"""The control loop: a fixed-rate, deadline-scheduled thread that alone owns the shaper, the codec and the transport.

Why a dedicated thread with deadlines: motor firmware judges the link by the spacing of command frames (its watchdog),
and shaped ramps are only as good as the time steps they are sampled at. Period k starts at t0 + k * period; a late
cycle never makes the next ones run early to "catch up" (bunched frames would be a burst of steps to the firmware):
a deadline already passed is skipped and counted as a missed period instead.

Clocks: `WallClock` (perf_counter; sleeps to shortly before the deadline, then spins for sub-millisecond precision) and
`VirtualClock` (time moves only when the loop sleeps, so a run is deterministic and as fast as the CPU allows).
The safety states, stop kinds and causes are described in docs/control-loop.md.
"""

from __future__ import annotations

import enum
import math
import os
import sys
import threading
import time
from collections import deque
from dataclasses import dataclass, replace
from collections.abc import Callable
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np

from console.errors import LinkLost
from console.protocol import SEQ_MODULUS, Codec, Flags, Heartbeat, StopCommand, Telemetry, WheelCommand, next_seq
from shaping.odometry import arc_step
from shaping.envelope import Bound
from shaping.shaper import Shaped, Shaper, StopKind

if TYPE_CHECKING:
    from console.profile import LinkConfig, Profile
    from console.record import Recorder
    from console.sim.firmware import SimRobot
    from console.transport import Transport


class Clock(Protocol):
    def now(self) -> float: ...

    def sleep_until(self, t: float) -> None: ...


class WallClock:
    """Real time from `time.perf_counter`; `sleep_until` returns at the deadline, never before it.

    The OS sleep wakes up late by tens to hundreds of microseconds, so it sleeps until `spin_s` before the deadline
    and busy-waits the rest: sub-millisecond precision for a small, bounded share of one core.
    """

    def __init__(self, spin_s: float = 0.0004) -> None:
        self.spin_s = spin_s

    def now(self) -> float:
        return time.perf_counter()

    def sleep_until(self, t: float) -> None:
        remaining = t - time.perf_counter()
        if remaining > self.spin_s:
            time.sleep(remaining - self.spin_s)
        while time.perf_counter() < t:
            pass


class VirtualClock:
    """Deterministic time: `now()` stands still while the loop works; `sleep_until` jumps to the deadline at once.

    The loop advances the in-process simulated robot by exactly the time that passed, so a virtual run is the same
    sequence of bytes and numbers every time, many times faster than real time.
    """

    def __init__(self, start_s: float = 0.0) -> None:
        self._t = start_s

    def now(self) -> float:
        return self._t

    def sleep_until(self, t: float) -> None:
        if t > self._t:
            self._t = t


@dataclass(frozen=True, slots=True)
class Tick:
    """One scheduled cycle: its index k, when it should have started, when it did, periods skipped before it."""

    index: int
    scheduled_s: float
    started_s: float
    missed: int
    dt_s: float          # scheduled time since the previous cycle: one period, more after missed periods

    @property
    def error_s(self) -> float:
        return self.started_s - self.scheduled_s


class DeadlineScheduler:
    """Period k starts at t0 + k * period (no drift: deadlines never accumulate sleep errors).

    A deadline that has already passed when the previous cycle finishes is skipped (counted in `missed`), so late
    work delays one cycle instead of bunching several.
    """

    def __init__(self, clock: Clock, period_s: float) -> None:
        if not (period_s > 0.0 and math.isfinite(period_s)):
            raise ValueError(f"period must be a positive number of seconds, not {period_s!r}")
        self.clock = clock
        self.period_s = period_s
        self.t0: float | None = None
        self.index = 0
        self.missed_total = 0

    def wait(self) -> Tick:
        """Sleep until the next deadline still in the future and return that cycle's tick."""
        clock, period = self.clock, self.period_s
        if self.t0 is None:
            self.t0 = clock.now()
        previous = self.index
        index = previous + 1
        now = clock.now()
        if now > self.t0 + index * period:
            index = math.floor((now - self.t0) / period) + 1
        missed = index - previous - 1
        self.missed_total += missed
        self.index = index
        scheduled = self.t0 + index * period
        clock.sleep_until(scheduled)
        return Tick(index, scheduled, clock.now(), missed, (index - previous) * period)


class CycleStats:
    """Period error and work time of the last `capacity` cycles in a ring buffer (exact max over the whole run).

    Recording is two array stores per cycle; percentiles are computed only when asked (snapshots refresh them about
    once a second), never per cycle.
    """

    def __init__(self, capacity: int = 1 << 14) -> None:
        self._error = np.zeros(capacity)
        self._work = np.zeros(capacity)
        self._capacity = capacity
        self.count = 0
        self.error_max_s = 0.0
        np.percentile(self._error[:2], (50.0, 99.0))   # the first call is slow (lazy set-up): not in a cycle

    def add(self, error_s: float, work_s: float) -> None:
        i = self.count % self._capacity
        self._error[i] = error_s
        self._work[i] = work_s
        self.count += 1
        if error_s > self.error_max_s:
            self.error_max_s = error_s

    def percentiles(self) -> tuple[float, float, float]:
        """(period error p50, period error p99, work time p99) over the window, seconds; zeros before any cycle."""
        n = min(self.count, self._capacity)
        if n == 0:
            return 0.0, 0.0, 0.0
        p50, p99 = np.percentile(self._error[:n], (50.0, 99.0))
        return float(p50), float(p99), float(np.percentile(self._work[:n], 99.0))


class SafetyState(enum.Enum):
    DISARMED = "disarmed"
    ARMED = "armed"
    STOPPING = "stopping"
    STOPPED = "stopped"


class StopCause(enum.Enum):
    OPERATOR = "operator"
    DEADMAN = "deadman"
    LINK_LOST = "link lost"
    UI_STALL = "UI stall"
    WATCHDOG = "watchdog trip"
    FAULT = "fault"
    PROGRAM_END = "program end"


STOP_CATEGORY = {StopKind.IMMEDIATE: 0, StopKind.FAST: 1, StopKind.CONTROLLED: 2}
"""Stop categories of the machinery-safety standard for electrical equipment: 0 remove drive power at once,
1 controlled stop then remove power, 2 controlled stop with power kept. (A software stop is not safety-rated.)"""

CAUSE_KIND = {
    StopCause.DEADMAN: StopKind.CONTROLLED,
    StopCause.PROGRAM_END: StopKind.CONTROLLED,
    StopCause.UI_STALL: StopKind.FAST,
    StopCause.LINK_LOST: StopKind.IMMEDIATE,
    StopCause.WATCHDOG: StopKind.IMMEDIATE,
    StopCause.FAULT: StopKind.IMMEDIATE,
}
"""The stop each automatic cause triggers. Where the console can no longer see the robot, or the robot has already
cut its motors (watchdog, fault), ramping commands down would only restart motion: zero at once instead."""

_KIND_RANK = {None: 0, StopKind.CONTROLLED: 1, StopKind.FAST: 2, StopKind.IMMEDIATE: 3}
_FAULT_FLAGS = Flags.FAULT | Flags.ESTOP
EVENTS_KEPT = 50
STATS_REFRESH_S = 1.0
LIMIT_EVENT_HOLD_S = 0.25
"""An envelope limit is logged once it has clipped the request this long (a brief brush stays out of the log)."""
ENVELOPE_BOUNDS = frozenset({Bound.SPEED, Bound.REVERSE_SPEED, Bound.TURN_RATE, Bound.WHEEL_RATE, Bound.SIDEWAYS_ACCEL})
REALTIME_PRIORITY = 10
"""SCHED_FIFO priority of the loop thread: above every normal process, below the kernel's own real-time threads."""
SWITCH_INTERVAL_S = 0.0005
"""Longest a thread in pure Python holds the GIL while the loop thread waits for it (CPython's default is 5 ms)."""


@dataclass(frozen=True, slots=True)
class Event:
    t_s: float
    text: str
    kind: str   # "safety", "link", "limit"


@dataclass(frozen=True, slots=True)
class LinkStats:
    url: str
    rate_hz: float                  # frames sent per second, measured
    rtt_s: float | None             # last command -> its echo in telemetry (includes the robot's telemetry interval)
    crc_errors: int
    overlong_lines: int
    unknown_frames: int
    telemetry_age_s: float | None   # since the last valid telemetry (None: none yet)
    frames_sent: int
    telemetry_received: int


@dataclass(frozen=True, slots=True)
class LoopStats:
    period_s: float
    cycles: int
    overruns: int                   # missed periods (skipped, never bunched)
    period_error_p50_s: float
    period_error_p99_s: float
    period_error_max_s: float
    work_p99_s: float


@dataclass(frozen=True, slots=True)
class Snapshot:
    t_s: float
    state: SafetyState
    cause: StopCause | None
    shaped: Shaped
    left_cmd: float
    right_cmd: float
    left_meas_radps: float | None
    right_meas_radps: float | None
    battery_v: float | None
    flags: int
    pose: tuple[float, float, float] | None
    link: LinkStats
    loop: LoopStats
    events: tuple[Event, ...]
    dropped_rows: int = 0           # recording rows dropped because the writer fell behind


def make_codec(link: LinkConfig) -> Any:
    """The frame codec the profile's link asks for (diffdeck protocol or the firmware's template)."""
    if link.protocol == "template":
        from console.templates import TemplateCodec

        return TemplateCodec(link.template)
    return Codec()


def request_realtime() -> str:
    """Real-time scheduling for the calling thread if the OS grants it; says which scheduling the loop runs with."""
    try:
        os.sched_setscheduler(0, os.SCHED_FIFO, os.sched_param(REALTIME_PRIORITY))
    except (AttributeError, OSError) as error:     # not Linux, or no privilege
        return f"normal scheduling (real-time refused: {getattr(error, 'strerror', None) or error})"
    return f"real-time scheduling (SCHED_FIFO {REALTIME_PRIORITY})"


def _after(seq: int, ref: int) -> bool:
    """seq is ref or later, on the 16-bit wrapping sequence."""
    return (seq - ref) % SEQ_MODULUS < SEQ_MODULUS // 2


class ControlLoop:
    """The fixed-rate loop; see the module docstring. Only the loop thread touches the shaper, codec and transport.

    The caller side (`arm`, `request`, `stop`, `operator_alive`, `ui_alive`) only sets values under a lock; the loop
    takes them at the start of its next cycle. `snapshot()` returns the latest immutable Snapshot (swapped by one
    reference assignment, so a reader never sees half a cycle).
    """

    def __init__(self, profile: Profile, transport: Transport, clock: Clock, *, sim: SimRobot | None = None,
                 recorder: Recorder | None = None, operator_timeout_s: float | None = None,
                 ui_timeout_s: float | None = None, url: str | None = None,
                 on_cycle: Callable[[float], None] | None = None) -> None:
        self.profile = profile
        self.clock = clock
        self._transport = transport
        self._sim = sim
        self._recorder = recorder
        self._pose_columns = bool(recorder is not None and getattr(recorder, "pose", False))
        self._operator_timeout = operator_timeout_s
        self._ui_timeout = ui_timeout_s
        self._url = url if url is not None else profile.link.url
        self._on_cycle = on_cycle
        self._units = profile.units
        self._shaper = Shaper(profile.geometry, profile.limits)
        self._codec = make_codec(profile.link)
        self._period = 1.0 / profile.link.rate_hz
        self._scheduler = DeadlineScheduler(clock, self._period)
        self._stats = CycleStats()
        self._lock = threading.Lock()
        # caller -> loop cells (under _lock)
        self._req = (0.0, 0.0)
        self._wheels_req: tuple[float, float] | None = None
        self._arm_pending = False
        self._stop_pending: tuple[StopKind, StopCause] | None = None
        self._operator_beats = 0
        self._ui_beats = 0
        # loop-thread state
        self._state = SafetyState.DISARMED
        self._cause: StopCause | None = None
        self._kind: StopKind | None = None
        self._seq = 0
        self._bypass: tuple[float, float] | None = None   # wheel rates sent around the shaper, rad/s
        self._sent_at: list[float | None] = [None] * SEQ_MODULUS
        self._arm_seq: int | None = None
        self._arm_t = 0.0
        self._op_seen = (0, 0.0)      # (beats seen, when)
        self._ui_seen = (0, 0.0)
        self._t0: float | None = None
        self._sim_t: float | None = None
        self._port_gone = False
        self._stale = False
        self._last_tel_t: float | None = None
        self._meas: tuple[float, float] | None = None
        self._battery: float | None = None
        self._flags = 0
        self._rtt: float | None = None
        self._frames_sent = 0
        self._telemetry_received = 0
        self._pose: tuple[float, float, float] | None = None if sim is not None else (0.0, 0.0, 0.0)
        self._events: deque[Event] = deque(maxlen=EVENTS_KEPT)
        self._events_tuple: tuple[Event, ...] = ()
        self._bound: Bound | None = None
        self._bound_since = 0.0
        self._logged_bound: Bound | None = None
        self._rate_mark = (0.0, 0)    # (t, frames_sent) at the last statistics refresh
        self._rate_hz = 0.0
        self._loop_stats = self.stats()
        self._thread: threading.Thread | None = None
        self._closing = threading.Event()
        self.failure: BaseException | None = None
        self.scheduling = "caller's thread"
        shaped = self._shaper.step(0.0, 0.0, 0.0)
        self._snapshot = self._make_snapshot(0.0, shaped, (0.0, 0.0))

    # -- caller side (any thread) ---------------------------------------------------------------------------------

    def arm(self) -> None:
        """Ask for arming; refused (and logged) while stopping, with stale telemetry or a robot fault."""
        with self._lock:
            self._arm_pending = True
            self._req = (0.0, 0.0)
            self._wheels_req = None

    def request(self, v_mps: float, omega_radps: float) -> None:
        """The operator's latest (v, omega); moves the robot only while armed. Non-finite values are rejected."""
        with self._lock:
            self._req = (v_mps, omega_radps)
            self._wheels_req = None

    def request_wheels(self, left_radps: float, right_radps: float) -> None:
        """Wheel rates sent around the shaper while armed (bench step tests), clamped to +-limits.wheel_rate_radps.

        The next `request()` hands back to the shaper: the wheels first ramp to zero at the wheel deceleration, then
        the shaper starts from rest. Stops ramp the wheels down the same way (immediate: zero at once).
        """
        with self._lock:
            self._wheels_req = (left_radps, right_radps)

    def stop(self, kind: StopKind, cause: StopCause = StopCause.OPERATOR) -> None:
        """Stop (and disarm); a harsher stop asked for before the loop took a softer one replaces it."""
        with self._lock:
            pending = self._stop_pending
            if pending is None or _KIND_RANK[kind] > _KIND_RANK[pending[0]]:
                self._stop_pending = (kind, cause)

    def operator_alive(self) -> None:
        with self._lock:
            self._operator_beats += 1

    def ui_alive(self) -> None:
        with self._lock:
            self._ui_beats += 1

    def snapshot(self) -> Snapshot:
        return self._snapshot

    def stats(self) -> LoopStats:
        """Loop statistics now (percentiles computed on this call)."""
        p50, p99, work = self._stats.percentiles()
        return LoopStats(self._period, self._stats.count, self._scheduler.missed_total, p50, p99,
                         self._stats.error_max_s, work)

    def link_stats(self) -> LinkStats:
        return self._snapshot.link

    # -- running ------------------------------------------------------------------------------------------------

    def start(self, realtime: bool = True) -> None:
        """Run the loop in its own thread until close().

        With `realtime`, the loop thread asks for real-time scheduling (SCHED_FIFO, where the OS allows it: root or
        CAP_SYS_NICE) so other processes cannot delay its wake-ups; it sleeps most of each period, and the kernel's
        real-time throttling keeps the rest of the machine responsive in any case. Refused -> normal scheduling.
        """
        if self._thread is not None:
            raise RuntimeError("the control loop is already running")
        sys.setswitchinterval(min(sys.getswitchinterval(), SWITCH_INTERVAL_S))
        self._thread = threading.Thread(target=self._run, args=(realtime,), name="diffdeck-loop", daemon=True)
        self._thread.start()

    def _run(self, realtime: bool) -> None:
        self.scheduling = request_realtime() if realtime else "normal scheduling"
        try:
            while not self._closing.is_set():
                self._cycle(self._scheduler.wait())
        except BaseException as error:   # a bug must not leave the robot running on stale commands
            self.failure = error
            self._emergency_stop_frame()
            self._log(self._snapshot.t_s, f"control loop failed: {error!r}; stop frame sent", "safety")
            self._snapshot = replace(self._snapshot, state=SafetyState.STOPPED, cause=StopCause.FAULT,
                                     events=self._events_tuple)

    def run_cycles(self, n: int) -> None:
        """Run n cycles in the calling thread (virtual clock, tests, headless fast runs)."""
        if self._thread is not None:
            raise RuntimeError("run_cycles while the loop thread runs")
        for _ in range(n):
            self._cycle(self._scheduler.wait())

    def close(self) -> None:
        """Stop the thread (if any) and close the transport. Does not stop the robot: stop() first."""
        self._closing.set()
        if self._thread is not None and self._thread is not threading.current_thread():
            self._thread.join()
        try:
            self._transport.close()
        except LinkLost:
            pass

    def _emergency_stop_frame(self) -> None:
        if self._port_gone:
            return
        try:
            self._transport.write(self._codec.encode(StopCommand(self._seq, STOP_CATEGORY[StopKind.FAST])))
        except Exception:   # noqa: BLE001 - best effort on the way down; the robot's watchdog is the backstop
            pass

    # -- one cycle (loop thread only) -------------------------------------------------------------------------------

    def _cycle(self, tick: Tick) -> None:
        t_abs = tick.started_s
        if self._t0 is None:
            self._t0 = self._scheduler.t0
            self._sim_t = self._t0
            self._op_seen = self._ui_seen = (0, t_abs)
        t = t_abs - self._t0
        if self._sim is not None:
            dt = t_abs - self._sim_t
            if dt > 0.0:
                self._sim.advance(dt)
                self._sim_t = t_abs
        if self._on_cycle is not None:
            self._on_cycle(t)
        with self._lock:
            req = self._req
            wheels = self._wheels_req
            arm, self._arm_pending = self._arm_pending, False
            stop, self._stop_pending = self._stop_pending, None
            beats = (self._operator_beats, self._ui_beats)
        if beats[0] != self._op_seen[0]:
            self._op_seen = (beats[0], t)
        if beats[1] != self._ui_seen[0]:
            self._ui_seen = (beats[1], t)

        self._receive(t)
        self._check_link(t)
        self._check_heartbeats(t)
        if arm:
            self._arm(t)
            req, wheels = (0.0, 0.0), None   # the arming cycle sends W(0, 0), the robot's release frame
        if stop is not None:
            self._begin_stop(t, *stop)
        moving = self._state in (SafetyState.ARMED, SafetyState.STOPPING)
        if moving and (wheels is not None or self._bypass is not None):
            shaped = self._around_the_shaper(t, tick.dt_s, wheels)
        else:
            shaped = self._shaper.step(tick.dt_s, *req) if moving else self._shaper.step(tick.dt_s, 0.0, 0.0)
        if self._state is SafetyState.STOPPING and shaped.settled and shaped.v_mps == 0.0 \
                and shaped.omega_radps == 0.0:
            self._state = SafetyState.STOPPED
            self._log(t, f"stopped ({self._cause.value}); stop category {STOP_CATEGORY[self._kind]} sent", "safety")
        cmd = self._units.to_motor(shaped.left_radps, shaped.right_radps)
        self._send(t_abs, cmd)
        self._note_bound(t, shaped.bound)
        self._dead_reckon(tick.dt_s)
        if t_abs - self._t0 - self._rate_mark[0] >= STATS_REFRESH_S:
            self._refresh_stats(t)
        self._snapshot = snapshot = self._make_snapshot(t, shaped, cmd)
        if self._recorder is not None:
            self._record(snapshot)
        self._stats.add(tick.error_s, self.clock.now() - t_abs)

    def _around_the_shaper(self, t: float, dt: float, wheels: tuple[float, float] | None) -> Shaped:
        """One cycle of wheel rates sent as requested (bench tests); ramps to zero on a stop or on hand-back."""
        limits, geometry = self.profile.limits, self.profile.geometry
        if self._bypass is None:
            shaped = self._snapshot.shaped          # from where the shaper left the wheels
            self._bypass = (shaped.left_radps, shaped.right_radps)
            self._shaper.reset()     # the shaper stays at rest while bypassed; it starts from rest on hand-back
            self._log(t, "around the shaper: wheel rates as requested", "safety")
        left, right = self._bypass
        stopping = self._state is SafetyState.STOPPING
        if stopping and self._kind is StopKind.IMMEDIATE:
            left = right = 0.0
        elif stopping or wheels is None:
            decel = limits.stop_decel_mps2 if stopping and self._kind is StopKind.FAST else limits.decel_mps2
            rate = decel / geometry.wheel_radius_m
            if limits.wheel_accel_radps2 is not None:
                rate = min(rate, limits.wheel_accel_radps2)
            step = rate * dt
            left = math.copysign(max(abs(left) - step, 0.0), left)
            right = math.copysign(max(abs(right) - step, 0.0), right)
        elif all(math.isfinite(w) for w in wheels):
            top = limits.wheel_rate_radps
            left, right = (min(max(w, -top), top) for w in wheels)
        at_rest = left == 0.0 and right == 0.0
        self._bypass = (left, right)
        if at_rest and (stopping or wheels is None):
            self._bypass = None
            if not stopping:
                self._log(t, "back through the shaper", "safety")
        v, omega = geometry.to_body(left, right)
        v_req, omega_req = geometry.to_body(*wheels) if wheels is not None else (0.0, 0.0)
        return Shaped(v_req, omega_req, v, omega, v, omega, 0.0, 0.0, 0.0, 0.0, left, right, None, 0.0, 0.0,
                      wheels is not None and not all(math.isfinite(w) for w in wheels), self._kind if stopping
                      else None, stopping and self._kind is StopKind.IMMEDIATE, at_rest)

    def _receive(self, t: float) -> None:
        if self._port_gone:
            return
        try:
            data = self._transport.read()
        except LinkLost as error:
            self._lose_port(t, error)
            return
        if not data:
            return
        for frame in self._codec.feed(data):
            if type(frame) is Telemetry:
                self._telemetry(t, frame)

    def _telemetry(self, t: float, frame: Telemetry) -> None:
        self._telemetry_received += 1
        if self._last_tel_t is None:
            self._log(t, "link up: first telemetry", "link")
        elif self._stale:
            self._log(t, "link back: telemetry again", "link")
        self._last_tel_t = t
        self._stale = False
        if frame.left is not None and frame.right is not None:
            self._meas = self._units.measured_from_motor(frame.left, frame.right)
        if frame.battery_v is not None:
            self._battery = frame.battery_v or None     # 0.00 on the wire: not measured
        self._flags = flags = frame.flags
        echo = frame.echo_seq
        if echo is not None:
            sent = self._sent_at[echo]
            if sent is not None:
                self._rtt = self.clock.now() - sent
        if self._state not in (SafetyState.ARMED, SafetyState.STOPPING) or not flags:
            return
        # A flag latched before arming is cleared by the release frame: judge only telemetry that answers it.
        if echo is not None:
            current = _after(echo, self._arm_seq)
        else:
            current = t - self._arm_t >= self.profile.link.telemetry_timeout_s
        if not current:
            return
        if flags & Flags.WATCHDOG:
            self._begin_stop(t, CAUSE_KIND[StopCause.WATCHDOG], StopCause.WATCHDOG)
        elif flags & _FAULT_FLAGS:
            self._begin_stop(t, CAUSE_KIND[StopCause.FAULT], StopCause.FAULT)

    def _lose_port(self, t: float, error: BaseException) -> None:
        self._port_gone = True
        self._log(t, str(error), "link")
        if self._state in (SafetyState.ARMED, SafetyState.STOPPING):
            self._begin_stop(t, CAUSE_KIND[StopCause.LINK_LOST], StopCause.LINK_LOST)
        else:
            self._state, self._cause, self._kind = SafetyState.STOPPED, StopCause.LINK_LOST, StopKind.IMMEDIATE

    def _check_link(self, t: float) -> None:
        if self._port_gone or self._stale:
            return
        age = t - (self._last_tel_t if self._last_tel_t is not None else 0.0)
        timeout = self.profile.link.telemetry_timeout_s
        if age > timeout:
            self._stale = True
            self._log(t, f"link lost: no valid telemetry for {timeout:g} s", "link")
            if self._state in (SafetyState.ARMED, SafetyState.STOPPING):
                self._begin_stop(t, CAUSE_KIND[StopCause.LINK_LOST], StopCause.LINK_LOST)

    def _check_heartbeats(self, t: float) -> None:
        if self._state is SafetyState.ARMED and self._operator_timeout is not None \
                and t - self._op_seen[1] > self._operator_timeout:
            self._begin_stop(t, CAUSE_KIND[StopCause.DEADMAN], StopCause.DEADMAN,
                             f"no operator heartbeat for {self._operator_timeout:g} s")
        if self._state in (SafetyState.ARMED, SafetyState.STOPPING) and self._ui_timeout is not None \
                and t - self._ui_seen[1] > self._ui_timeout and _KIND_RANK[self._kind] < _KIND_RANK[StopKind.FAST]:
            self._begin_stop(t, CAUSE_KIND[StopCause.UI_STALL], StopCause.UI_STALL,
                             f"no UI heartbeat for {self._ui_timeout:g} s")

    def _arm(self, t: float) -> None:
        refusal = None
        if self._state is SafetyState.ARMED:
            return
        if self._state is SafetyState.STOPPING:
            refusal = "still stopping"
        elif self._port_gone:
            refusal = "the link is lost"
        elif self._last_tel_t is None or self._stale:
            refusal = "no current telemetry from the robot"
        elif self._flags & _FAULT_FLAGS:
            refusal = f"the robot reports {Flags(self._flags & _FAULT_FLAGS)!s}"
        if refusal is not None:
            self._log(t, f"arming refused: {refusal}", "safety")
            return
        self._shaper.reset()
        self._state, self._cause, self._kind = SafetyState.ARMED, None, None
        self._arm_seq, self._arm_t = self._seq, t
        self._op_seen = (self._op_seen[0], t)
        self._ui_seen = (self._ui_seen[0], t)
        self._log(t, "armed", "safety")

    def _begin_stop(self, t: float, kind: StopKind, cause: StopCause, why: str = "") -> None:
        why = f": {why}" if why else ""
        if self._state in (SafetyState.ARMED, SafetyState.STOPPING):
            if self._state is SafetyState.STOPPING and _KIND_RANK[kind] <= _KIND_RANK[self._kind]:
                return
            self._shaper.stop(kind)
            self._state, self._cause, self._kind = SafetyState.STOPPING, cause, kind
            self._log(t, f"{kind.value} stop ({cause.value}){why}", "safety")
        elif self._state is SafetyState.DISARMED or _KIND_RANK[kind] > _KIND_RANK[self._kind]:
            self._state, self._cause, self._kind = SafetyState.STOPPED, cause, kind
            self._log(t, f"{kind.value} stop ({cause.value}) while not armed{why}", "safety")

    def _send(self, t_abs: float, cmd: tuple[float, float]) -> None:
        if self._port_gone:
            return
        state, seq = self._state, self._seq
        if state is SafetyState.ARMED or state is SafetyState.STOPPING:
            frame: Any = WheelCommand(seq, *cmd)
        elif state is SafetyState.STOPPED:
            frame = StopCommand(seq, STOP_CATEGORY[self._kind])
        else:
            frame = Heartbeat(seq)
        data = self._codec.encode(frame)
        self._seq = next_seq(seq)
        if not data:
            return                  # a template heartbeat: nothing goes on the wire
        try:
            self._transport.write(data)
        except LinkLost as error:
            self._lose_port(t_abs - self._t0, error)
            return
        self._sent_at[seq] = self.clock.now()
        self._frames_sent += 1

    def _note_bound(self, t: float, bound: Bound | None) -> None:
        if bound not in ENVELOPE_BOUNDS:
            bound = None            # ramp limits bind in every transition: shown live, not logged
        if bound is not self._bound:
            self._bound, self._bound_since = bound, t
        elif bound is not self._logged_bound and t - self._bound_since >= LIMIT_EVENT_HOLD_S:
            self._logged_bound = bound
            self._log(t, f"limit: {bound.value} clips the request" if bound is not None else "limit: request within the envelope", "limit")

    def _dead_reckon(self, dt: float) -> None:
        if self._sim is not None:
            self._pose = self._sim.pose
        elif self._meas is not None and not self._stale and not self._port_gone:
            v, omega = self.profile.geometry.to_body(*self._meas)
            self._pose = arc_step(*self._pose, v, omega, dt)

    def _refresh_stats(self, t: float) -> None:
        mark_t, mark_frames = self._rate_mark
        self._rate_hz = (self._frames_sent - mark_frames) / (t - mark_t) if t > mark_t else 0.0
        self._rate_mark = (t, self._frames_sent)
        self._loop_stats = self.stats()

    def _log(self, t: float, text: str, kind: str) -> None:
        self._events.append(Event(t, text, kind))
        self._events_tuple = tuple(self._events)

    def _make_snapshot(self, t: float, shaped: Shaped, cmd: tuple[float, float]) -> Snapshot:
        codec = self._codec
        meas = self._meas
        link = LinkStats(self._url, self._rate_hz, self._rtt, codec.crc_errors, codec.overlong_lines,
                         codec.unknown_frames, None if self._last_tel_t is None else t - self._last_tel_t,
                         self._frames_sent, self._telemetry_received)
        return Snapshot(t, self._state, self._cause, shaped, cmd[0], cmd[1],
                        None if meas is None else meas[0], None if meas is None else meas[1],
                        self._battery, self._flags, self._pose, link, self._loop_stats, self._events_tuple,
                        self._recorder.dropped if self._recorder is not None else 0)

    def _record(self, s: Snapshot) -> None:
        shaped = s.shaped
        row: tuple[object, ...] = (s.t_s, shaped.v_req_mps, shaped.omega_req_radps, shaped.v_mps, shaped.omega_radps,
                                   shaped.left_radps, shaped.right_radps, s.left_meas_radps, s.right_meas_radps,
                                   s.state.value)
        if self._pose_columns:
            row += s.pose if s.pose is not None else (None, None, None)
        self._recorder.put(row)
