"""The loop core: one control cycle as a pure function of time, the caller's inputs and the bytes received.

`LoopCore.step(now_s, dt_s, inputs, received)` -> (bytes to send, Snapshot). It holds the shaper, the codec, the link
monitor and the safety machine; the runner (`console.loop.ControlLoop`) owns the clock, the port, the simulated
robot and the recorder. An error inside a cycle never escapes: the core moves to STOPPED (cause "loop failure"),
returns a category-0 stop frame that cycle and every later one, and keeps the error in `failure`.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

from console.core.codec import make_codec
from console.core.link import LinkMonitor, LinkStats
from console.core.safety import (
    CAUSES,
    KIND_RANK,
    STOP_CATEGORY,
    SafetyMachine,
    SafetyState,
    StopCause,
    Transition,
    Trigger,
)
from console.protocol import Flags, Heartbeat, StopCommand, Telemetry, WheelCommand, flag_names, next_seq
from shaping.envelope import Bound
from shaping.odometry import arc_step
from shaping.shaper import Shaped, Shaper, StopKind

if TYPE_CHECKING:
    from console.profile import Profile

EVENTS_KEPT = 50
RATE_REFRESH_S = 1.0
LIMIT_EVENT_HOLD_S = 0.25
"""An envelope limit is logged once it has clipped the request this long (a brief brush stays out of the log)."""
ENVELOPE_BOUNDS = frozenset({Bound.SPEED, Bound.REVERSE_SPEED, Bound.TURN_RATE, Bound.WHEEL_RATE, Bound.SIDEWAYS_ACCEL})
_FLAG_CAUSES = ((Flags.WATCHDOG, StopCause.WATCHDOG), (Flags.ESTOP, StopCause.ESTOP), (Flags.FAULT, StopCause.FAULT))
_NO_ARMING_FLAGS = Flags.FAULT | Flags.ESTOP


@dataclass(frozen=True, slots=True)
class Event:
    t_s: float
    text: str
    kind: str   # "safety", "link", "limit"


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
class SourceStatus:
    """What a request source (console.session.RequestSource) shows the operator; carried in every snapshot so a
    screen in another process sees it. Sources with more to show subclass it."""

    name: str                       # "trace laps.csv", "program step-v", "gamepad /dev/input/event5"
    detail: str                     # one line for the screen


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
    arm_refusal: str | None = None  # why arming would be refused now (None: arming is possible)
    source: SourceStatus | None = None   # the request source's status (None: the caller surface only)


@dataclass(frozen=True, slots=True)
class Inputs:
    """What the caller side handed over since the last cycle."""

    request: tuple[float, float] = (0.0, 0.0)
    wheels: tuple[float, float] | None = None     # wheel rates around the shaper (bench step tests), rad/s
    arm: bool = False
    stop: tuple[StopKind, StopCause] | None = None
    operator_beat: bool = False
    ui_beat: bool = False
    true_pose: tuple[float, float, float] | None = None   # the simulated robot's pose, when there is one
    dropped_rows: int = 0
    source: SourceStatus | None = None


class LoopCore:
    """Shaper + codec + link monitor + safety machine; see the module docstring. One caller (the runner) only."""

    def __init__(self, profile: Profile, url: str, *, operator_timeout_s: float | None = None,
                 ui_timeout_s: float | None = None) -> None:
        self.profile = profile
        self.codec = make_codec(profile.link)
        self.link = LinkMonitor(url, profile.link.telemetry_timeout_s)
        self.safety = SafetyMachine()
        self.failure: BaseException | None = None
        self.loop_stats = LoopStats(1.0 / profile.link.rate_hz, 0, 0, 0.0, 0.0, 0.0, 0.0)
        self._units = profile.units
        self._shaper = Shaper(profile.geometry, profile.limits)
        self._operator_timeout = operator_timeout_s
        self._ui_timeout = ui_timeout_s
        self._seq = 0
        self._bypass: tuple[float, float] | None = None
        self._op_seen = 0.0
        self._ui_seen = 0.0
        self._meas: tuple[float, float] | None = None
        self._battery: float | None = None
        self._flags = 0
        self._pose: tuple[float, float, float] | None = None
        self._events: deque[Event] = deque(maxlen=EVENTS_KEPT)
        self._events_tuple: tuple[Event, ...] = ()
        self._bound: Bound | None = None
        self._bound_since = 0.0
        self._logged_bound: Bound | None = None
        self._rate_mark = (0.0, 0)
        self._rate_hz = 0.0
        self._started = False
        self.snapshot = self._make_snapshot(0.0, self._shaper.step(0.0, 0.0, 0.0), (0.0, 0.0), 0)

    # -- the step -------------------------------------------------------------------------------------------------

    def step(self, now_s: float, dt_s: float, inputs: Inputs, received: bytes) -> tuple[bytes, Snapshot]:
        """One cycle at `now_s` (seconds since the first cycle), `dt_s` scheduled since the previous one."""
        if self.failure is not None:
            return self._failed_frame(), self.snapshot
        try:
            data = self._step(now_s, dt_s, inputs, received)
        except Exception as error:   # noqa: BLE001 - a bug must not leave the robot running on stale commands
            return self.fail(now_s, error), self.snapshot
        return data, self.snapshot

    def link_gone(self, now_s: float, reason: str) -> None:
        """The port went away (the runner's read or write raised LinkLost): nothing more is written."""
        if self.link.port_gone is not None:
            return
        self.link.port_gone = reason
        self._log(now_s, reason, "link")
        self._stop(now_s, StopCause.LINK_LOST)

    def link_reopened(self, now_s: float) -> None:
        """The runner opened the same URL again after a loss: a new link monitor (and codec: no half line from the
        old link); the robot's state is unknown until telemetry comes, and moving needs a new arming."""
        url = self.link.url
        self.link = LinkMonitor(url, self.profile.link.telemetry_timeout_s, opened_t=now_s)
        self.codec = make_codec(self.profile.link)
        self._meas = None
        self._flags = 0
        self._log(now_s, f"link reopened: {url}; arm again once telemetry is back", "link")

    def fail(self, now_s: float, error: BaseException) -> bytes:
        """An error inside a cycle: STOPPED (loop failure) and the strongest stop frame the codec can make."""
        self.failure = error
        self.safety.fire(Trigger.FAIL)
        self._log(now_s, f"control loop failed: {error!r}; stop category 0 sent", "safety")
        self.snapshot = replace(self.snapshot, t_s=now_s, state=self.safety.state, cause=self.safety.cause,
                                events=self._events_tuple, arm_refusal="the control loop failed")
        return self._failed_frame()

    def _failed_frame(self) -> bytes:
        if self.link.port_gone is not None:
            return b""
        seq, self._seq = self._seq, next_seq(self._seq)
        try:
            return self.codec.encode(StopCommand(seq, STOP_CATEGORY[StopKind.IMMEDIATE]))
        except Exception:   # noqa: BLE001 - a codec that cannot even say stop: the robot's watchdog is the backstop
            return b""

    def _step(self, now: float, dt: float, inputs: Inputs, received: bytes) -> bytes:
        if not self._started:
            self._started = True
            self._ui_seen = self._op_seen = now
        if inputs.operator_beat:
            self._op_seen = now
        if inputs.ui_beat:
            self._ui_seen = now
        if received:
            for frame in self.codec.feed(received):
                if type(frame) is Telemetry:
                    self._telemetry(now, frame)
        lost = self.link.check(now)
        if lost is not None:
            self._log(now, lost, "link")
            self._stop(now, StopCause.LINK_LOST)
        self._check_heartbeats(now)
        request, wheels = inputs.request, inputs.wheels
        if inputs.arm:
            self._arm(now)
            request, wheels = (0.0, 0.0), None     # the arming cycle sends W(0, 0), the robot's release frame
        if inputs.stop is not None:
            self._stop(now, inputs.stop[1], inputs.stop[0])
        safety = self.safety
        moving = safety.moving
        if moving and (wheels is not None or self._bypass is not None):
            shaped = self._around_the_shaper(now, dt, wheels)
        else:
            shaped = self._shaper.step(dt, *request) if moving else self._shaper.step(dt, 0.0, 0.0)
        if safety.state is SafetyState.STOPPING and shaped.settled and shaped.v_mps == 0.0 \
                and shaped.omega_radps == 0.0:
            safety.fire(Trigger.SETTLED)
            self._log(now, f"stopped ({safety.cause_text}); stop category {safety.category} sent", "safety")
        cmd = self._units.to_motor(shaped.left_radps, shaped.right_radps)
        data = self._frame(now, cmd)
        self._note_bound(now, shaped.bound)
        self._dead_reckon(dt, inputs.true_pose)
        if now - self._rate_mark[0] >= RATE_REFRESH_S:
            mark_t, mark_frames = self._rate_mark
            self._rate_hz = (self.link.frames_sent - mark_frames) / (now - mark_t)
            self._rate_mark = (now, self.link.frames_sent)
        self.snapshot = self._make_snapshot(now, shaped, cmd, inputs.dropped_rows, inputs.source)
        return data

    # -- safety ---------------------------------------------------------------------------------------------------

    def arming_refusal(self) -> str | None:
        """Why an arm request would be refused now, or None."""
        if self.safety.state is SafetyState.STOPPING:
            return "still stopping"
        if self.link.port_gone is not None:
            return "the link is lost"
        if not self.link.live:
            return "no current telemetry from the robot"
        if self._flags & _NO_ARMING_FLAGS:
            return "the robot reports " + ", ".join(flag_names(self._flags & _NO_ARMING_FLAGS))
        return None

    def _arm(self, now: float) -> None:
        if self.safety.state is SafetyState.ARMED:
            return
        outcome = self.safety.fire(Trigger.ARM, arming_refusal=self.arming_refusal())
        if isinstance(outcome, str):
            self._log(now, f"arming refused: {outcome}", "safety")
            return
        self._shaper.reset()
        self._bypass = None
        self.link.release_sent(self._seq, now)
        self._op_seen = now
        self._ui_seen = now
        self._log(now, "armed", "safety")

    def _stop(self, now: float, cause: StopCause, kind: StopKind | None = None, why: str = "") -> None:
        outcome = self.safety.fire(Trigger.STOP, cause=cause, kind=kind)
        if not isinstance(outcome, Transition):
            return
        why = f": {why}" if why else ""
        assert outcome.kind is not None
        if outcome.target is SafetyState.STOPPING:
            self._shaper.stop(outcome.kind)
            self._log(now, f"{outcome.kind.value} stop ({cause.value}){why}", "safety")
        else:
            self._log(now, f"{outcome.kind.value} stop ({cause.value}) while not armed{why}", "safety")

    def _check_heartbeats(self, now: float) -> None:
        safety = self.safety
        if self._operator_timeout is not None and safety.watches(StopCause.DEADMAN) \
                and now - self._op_seen > self._operator_timeout:
            self._stop(now, StopCause.DEADMAN, why=f"no operator keep-alive for {self._operator_timeout:g} s")
        if self._ui_timeout is not None and safety.watches(StopCause.UI_STALL) \
                and now - self._ui_seen > self._ui_timeout \
                and KIND_RANK[safety.kind] < KIND_RANK[CAUSES[StopCause.UI_STALL].kind]:
            self._stop(now, StopCause.UI_STALL, why=f"no UI heartbeat for {self._ui_timeout:g} s")

    def _telemetry(self, now: float, frame: Telemetry) -> None:
        event = self.link.telemetry(now, frame)
        if event is not None:
            self._log(now, event, "link")
        if frame.left is not None and frame.right is not None:
            self._meas = self._units.measured_from_motor(frame.left, frame.right)
        if frame.battery_v is not None:
            self._battery = frame.battery_v or None     # 0.00 on the wire: not measured
        self._flags = flags = frame.flags
        if not flags or not self.safety.moving or not self.link.flags_current(now, frame):
            return
        for flag, cause in _FLAG_CAUSES:
            if flags & flag:
                self._stop(now, cause, why="the robot reports " + ", ".join(flag_names(flags)))
                return

    # -- the frame ------------------------------------------------------------------------------------------------

    def _frame(self, now: float, cmd: tuple[float, float]) -> bytes:
        if self.link.port_gone is not None:
            return b""
        state, seq = self.safety.state, self._seq
        frame: WheelCommand | StopCommand | Heartbeat
        if state is SafetyState.ARMED or state is SafetyState.STOPPING:
            frame = WheelCommand(seq, *cmd)
        elif state is SafetyState.STOPPED:
            frame = StopCommand(seq, self.safety.category)
        else:
            frame = Heartbeat(seq)
        data = self.codec.encode(frame)
        self._seq = next_seq(seq)
        if data:
            self.link.sent(seq, now)
        return data

    def _around_the_shaper(self, now: float, dt: float, wheels: tuple[float, float] | None) -> Shaped:
        """One cycle of wheel rates sent as requested (bench tests); ramps to zero on a stop or on hand-back."""
        limits, geometry = self.profile.limits, self.profile.geometry
        if self._bypass is None:
            shaped = self.snapshot.shaped          # from where the shaper left the wheels
            self._bypass = (shaped.left_radps, shaped.right_radps)
            self._shaper.reset()     # the shaper stays at rest while bypassed; it starts from rest on hand-back
            self._log(now, "around the shaper: wheel rates as requested", "safety")
        left, right = self._bypass
        stopping = self.safety.state is SafetyState.STOPPING
        kind = self.safety.kind
        if stopping and kind is StopKind.IMMEDIATE:
            left = right = 0.0
        elif stopping or wheels is None:
            decel = limits.stop_decel_mps2 if stopping and kind is StopKind.FAST else limits.decel_mps2
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
                self._log(now, "back through the shaper", "safety")
        v, omega = geometry.to_body(left, right)
        v_req, omega_req = geometry.to_body(*wheels) if wheels is not None else (0.0, 0.0)
        return Shaped(v_req, omega_req, v, omega, v, omega, 0.0, 0.0, 0.0, 0.0, left, right, None, 0.0, 0.0,
                      wheels is not None and not all(math.isfinite(w) for w in wheels), kind if stopping
                      else None, stopping and kind is StopKind.IMMEDIATE, at_rest)

    # -- what the snapshot shows ----------------------------------------------------------------------------------

    def _note_bound(self, now: float, bound: Bound | None) -> None:
        if bound not in ENVELOPE_BOUNDS:
            bound = None            # ramp limits bind in every transition: shown live, not logged
        if bound is not self._bound:
            self._bound, self._bound_since = bound, now
        elif bound is not self._logged_bound and now - self._bound_since >= LIMIT_EVENT_HOLD_S:
            self._logged_bound = bound
            self._log(now, f"limit: {bound.value} clips the request" if bound is not None
                      else "limit: request within the envelope", "limit")

    def _dead_reckon(self, dt: float, true_pose: tuple[float, float, float] | None) -> None:
        if true_pose is not None:
            self._pose = true_pose
        elif self._meas is not None and self.link.live:
            v, omega = self.profile.geometry.to_body(*self._meas)
            self._pose = arc_step(*(self._pose or (0.0, 0.0, 0.0)), v, omega, dt)

    def note(self, now_s: float, text: str, kind: str) -> None:
        """An event from the runner (a reconnect that failed) into the same log."""
        self._log(now_s, text, kind)

    def _log(self, now: float, text: str, kind: str) -> None:
        self._events.append(Event(now, text, kind))
        self._events_tuple = tuple(self._events)

    def _make_snapshot(self, now: float, shaped: Shaped, cmd: tuple[float, float], dropped: int,
                       source: SourceStatus | None = None) -> Snapshot:
        meas = self._meas
        return Snapshot(now, self.safety.state, self.safety.cause, shaped, cmd[0], cmd[1],
                        None if meas is None else meas[0], None if meas is None else meas[1],
                        self._battery, self._flags, self._pose, self.link.stats(now, self._rate_hz, self.codec),
                        self.loop_stats, self._events_tuple, dropped, self.arming_refusal(), source)
