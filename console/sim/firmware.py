"""The simulated robot's firmware: the robot side of the wire protocol (or of a firmware template) over a transport end.

Behaviour (what PROTOCOL.md asks of real firmware; the flags are `console.protocol.Flags`):
- Power-up: STOPPED, motors at zero, motion watchdog not armed.
- Release: a valid W frame with both wheels exactly 0 clears STOPPED, WATCHDOG and POWER_OFF and arms the watchdog
  (never while FAULT or ESTOP is set). The firmware never restarts into motion by itself: a W frame with motion while
  STOPPED is ignored (it still counts as received and is echoed).
- Running: W frames set the wheel commands (firmware unit -> wheel rad/s); SATURATED is set while a command exceeds
  the motors' top rate (the plant clamps it).
- Watchdog: no valid W frame for more than link.watchdog_s while running -> WATCHDOG and STOPPED latched, the
  commands ramp to zero at the motors' torque limit, then drive power goes off (POWER_OFF), as for category 1.
  Heartbeats and stop frames never feed it (they carry no motion).
- Stop frames: category 0 -> wheels to zero at once (idealized power removal), POWER_OFF; 1 -> ramp to zero at the
  torque limit, then POWER_OFF; 2 -> the same ramp, power kept. A stronger category overrides a weaker one in progress.
- Telemetry every 1 / sim.telemetry_rate_hz of simulated time, whether or not anybody listens: own seq, the seq of the
  last valid console frame (any type), measured wheel rates (firmware unit), encoder counts (int32, wrapping),
  battery voltage, flags.

The firmware converts only the UNIT (`WheelUnits.from_motor` / `to_motor` on the profile's unit, gear ratio, ticks and
full-duty rate alone). The profile's polarity, swap and trim keys are the CONSOLE's corrections for the wiring; the
wiring itself lives in the plant (`SimConfig` faults). Real firmware does not know the console's corrections either,
so a fault in [sim] plus the matching fix in [units] drives correctly - the polarity check relies on that.

A software stop, in this simulation as on a real robot, is not a safety function.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from console.errors import InputError, LinkLost
from console.protocol import RATE_MAX, SEQ_MODULUS, Codec, Flags, Frame, StopCommand, Telemetry, WheelCommand
from console.sim.plant import Plant
from console.templates import TemplateRobotCodec
from console.transport import Transport, memory_pair
from shaping.units import WheelUnits

if TYPE_CHECKING:
    from console.profile import Profile

SUBSTEP_S = 0.001
"""Internal plant step: advance(dt) runs ceil(dt / SUBSTEP_S) equal sub-steps."""
SAG_AT_FULL_TORQUE = 0.05
"""Battery sag (fraction of the rest voltage) with both motors at the torque limit: an invented, simple load model."""
SAG_AT_FULL_SPEED = 0.02
"""Battery sag (fraction) with both wheels at the top rate (friction and back-EMF losses; invented, simple)."""
_EVENT_SLACK = 1e-6
"""Rounding slack, in sub-steps, when finding the sub-step at whose end telemetry falls due."""
_INT32 = 1 << 32

_WATCHDOG = int(Flags.WATCHDOG)
_FAULT = int(Flags.FAULT)
_ESTOP = int(Flags.ESTOP)
_NO_RELEASE = _FAULT | _ESTOP
_STOPPED = int(Flags.STOPPED)
_POWER_OFF = int(Flags.POWER_OFF)
_SATURATED = int(Flags.SATURATED)
_RELEASABLE = _STOPPED | _WATCHDOG | _POWER_OFF


def _robot_codec(profile: Profile) -> Codec | TemplateRobotCodec:
    """The robot side of the profile's protocol; a template the simulated robot cannot speak is a profile error."""
    template = profile.link.template
    if profile.link.protocol != "template" or template is None:
        return Codec()
    try:
        return TemplateRobotCodec(template)
    except ValueError as error:
        raise InputError(str(profile.path), "link.template", template, f"the simulated robot: {error}") from None


def _wrap_int32(count: int) -> int:
    return (count + _INT32 // 2) % _INT32 - _INT32 // 2


class SimRobot:
    """The simulated robot: plant + firmware behind one transport end. Drive it with `advance(dt_s)`.

    Without a transport it makes an in-memory pair and keeps the other end in `console_end`.
    """

    def __init__(self, profile: Profile, transport: Transport | None = None) -> None:
        if transport is None:
            self.console_end: Transport | None
            self.console_end, transport = memory_pair()
        else:
            self.console_end = None
        self.transport: Transport = transport
        self.profile = profile
        sim = profile.sim
        self.plant = Plant(profile.geometry, sim, profile.units.full_duty_radps)
        units = profile.units    # the unit only: polarity, swap and trim are the console's corrections
        self._units = WheelUnits(units.unit, units.ticks_per_rev, units.gear_ratio, units.full_duty_radps)
        self._codec = _robot_codec(profile)
        self._watchdog_s = profile.link.watchdog_s
        self._ramp_radps2 = sim.wheel_accel_radps2
        self._max_rate = sim.max_wheel_rate_radps
        self._period_s = 1.0 / sim.telemetry_rate_hz
        self.t_s = 0.0
        self._next_telemetry_s = self._period_s
        self._left_cmd = 0.0           # channel commands driving the motors, wheel rad/s
        self._right_cmd = 0.0
        self._flags = _STOPPED
        self._running = False          # released: follows W frames, watchdog armed
        self._stop_category: int | None = None   # category (1 or 2) of the ramp-down in progress
        self._last_command_s = 0.0
        self._echo_seq = 0
        self._tx_seq = 0
        self._last_wheel = self.plant.wheel_radps
        self.link_open = True
        self.telemetry_dropped = 0     # frames the transport refused (the other end stopped reading)

    # -- what tests, the control loop and the UI may look at -----------------------------------------------------
    @property
    def pose(self) -> tuple[float, float, float]:
        """True pose (x_m, y_m, heading_rad)."""
        return self.plant.pose

    @property
    def flags(self) -> Flags:
        return Flags(self._flags)

    def set_fault(self, active: bool) -> None:
        """Inject (or clear) a firmware-detected fault: FAULT set, wheels to zero at once, no release until cleared."""
        if active:
            self._flags |= _FAULT
            self._halt()
        else:
            self._flags &= ~_FAULT

    def set_estop(self, open_circuit: bool) -> None:
        """Open (or close again) the emergency-stop circuit: ESTOP set, wheels to zero at once, no release while
        open."""
        if open_circuit:
            self._flags |= _ESTOP
            self._halt()
        else:
            self._flags &= ~_ESTOP

    # -- firmware ------------------------------------------------------------------------------------------------
    def advance(self, dt_s: float) -> None:
        """Take in what arrived, then step the plant by dt in equal sub-steps, sending telemetry when it is due.

        Sub-steps with constant commands run as one plant batch up to the next event (telemetry due, watchdog
        deadline); that is the same physics as one sub-step at a time, only faster.
        """
        self._receive()
        if dt_s <= 0.0:
            return
        n = max(1, math.ceil(dt_s / SUBSTEP_S - 1e-9))
        h = dt_s / n
        t = self.t_s
        while n > 0:
            if self._stop_category is not None:
                self._ramp_down(h)               # the commands change every sub-step while ramping
                m = 1
            else:                                # constant commands up to the next event: one plant batch
                m = min(n, max(1, math.ceil((self._next_telemetry_s - t) / h - _EVENT_SLACK)))
                if self._running:
                    m = min(m, max(1, math.floor((self._last_command_s + self._watchdog_s - t) / h) + 1))
            self.plant.run(m, h, self._left_cmd, self._right_cmd)
            t += m * h
            n -= m
            if self._running and t - self._last_command_s > self._watchdog_s:
                self._flags |= _WATCHDOG
                self._begin_stop(1)
            if t >= self._next_telemetry_s - _EVENT_SLACK * h:
                self._next_telemetry_s += self._period_s
                self._send_telemetry()
        self.t_s = t

    def _receive(self) -> None:
        if not self.link_open:
            return
        try:
            data = self.transport.read()
        except LinkLost:
            self.link_open = False   # the cable is gone: the watchdog will stop the motors
            return
        if data:
            for frame in self._codec.feed(data):
                self._apply(frame)

    def _apply(self, frame: Frame) -> None:
        if isinstance(frame, Telemetry):
            return                           # not meant for a robot
        self._echo_seq = frame.seq           # every valid console frame is echoed (round-trip time)
        if isinstance(frame, WheelCommand):
            self._last_command_s = self.t_s
            self._command(*self._units.from_motor(frame.left, frame.right), frame.left == 0.0 and frame.right == 0.0)
        elif isinstance(frame, StopCommand):
            if frame.category == 0:
                self._halt()
            else:
                self._begin_stop(frame.category)
        # A Heartbeat only proves the console is there: echoed, nothing else.

    def _command(self, left_radps: float, right_radps: float, at_rest: bool) -> None:
        if not self._running:
            if not (at_rest and self._flags & _NO_RELEASE == 0):
                return                       # held: motion needs a release first
            self._flags &= ~_RELEASABLE
            self._running = True
            self._stop_category = None
        self._left_cmd = left_radps
        self._right_cmd = right_radps
        if abs(left_radps) > self._max_rate or abs(right_radps) > self._max_rate:
            self._flags |= _SATURATED
        else:
            self._flags &= ~_SATURATED

    def _begin_stop(self, category: int) -> None:
        self._running = False
        self._flags = (self._flags | _STOPPED) & ~_SATURATED
        if self._flags & _POWER_OFF:
            return                           # already off: nothing weaker may bring power back
        if self._stop_category is None or category < self._stop_category:
            self._stop_category = category

    def _halt(self) -> None:
        """Category 0 (and faults): wheels to zero at once, drive power off."""
        self._running = False
        self._stop_category = None
        self._left_cmd = self._right_cmd = 0.0
        self._flags = (self._flags | _STOPPED | _POWER_OFF) & ~_SATURATED
        self.plant.halt()
        self._last_wheel = (0.0, 0.0)    # power removed: no current, so no sag from the sudden stop

    def _ramp_down(self, h: float) -> None:
        """Commands toward zero at the torque limit; category 1 removes power once they are there."""
        step = self._ramp_radps2 * h
        self._left_cmd = math.copysign(max(abs(self._left_cmd) - step, 0.0), self._left_cmd)
        self._right_cmd = math.copysign(max(abs(self._right_cmd) - step, 0.0), self._right_cmd)
        if self._left_cmd == 0.0 and self._right_cmd == 0.0:    # ramp done: holding zero (STOPPED stays latched)
            if self._stop_category == 1:
                self._flags |= _POWER_OFF
            self._stop_category = None

    def _battery_v(self) -> float:
        sim = self.profile.sim
        left, right = self.plant.wheel_radps
        last_left, last_right = self._last_wheel
        self._last_wheel = (left, right)
        accel = (abs(left - last_left) + abs(right - last_right)) / (2.0 * self._period_s * sim.wheel_accel_radps2)
        speed = (abs(left) + abs(right)) / (2.0 * sim.max_wheel_rate_radps)
        return sim.battery_v * (1.0 - SAG_AT_FULL_TORQUE * min(accel, 1.0) - SAG_AT_FULL_SPEED * min(speed, 1.0))

    def _send_telemetry(self) -> None:
        state = self.plant.measure()
        left, right = self._units.to_motor(state.left_radps, state.right_radps)
        frame = Telemetry(
            seq=self._tx_seq,
            echo_seq=self._echo_seq,
            left=max(-RATE_MAX, min(RATE_MAX, left)),    # what the wire can carry, as firmware would saturate
            right=max(-RATE_MAX, min(RATE_MAX, right)),
            left_ticks=_wrap_int32(state.left_ticks),
            right_ticks=_wrap_int32(state.right_ticks),
            battery_v=self._battery_v(),
            flags=self._flags,
        )
        self._tx_seq = (self._tx_seq + 1) % SEQ_MODULUS
        if not self.link_open:
            return
        try:
            self.transport.write(self._codec.encode(frame))
        except LinkLost:
            self.telemetry_dropped += 1
