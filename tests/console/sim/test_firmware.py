"""The simulated firmware over an in-memory link, spoken to with the real codec, as the console would.

Outside references: 1 rpm = 2*pi/60 rad/s (SI Brochure, 9th ed., 2019, table 4: the radian; one minute is 60 s);
stopping distance at constant deceleration a from speed v is v^2 / (2a) (common practice); a first-order lag
tau*y' + y = u passes the area of its input plus tau*(y(0) - y(end)) (integrate the ODE once; Ogata, "Modern Control
Engineering", 5th ed., 2010, section 5-2, first-order systems).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import pytest

from console.errors import InputError
from console.profile import Profile, load_profile
from console.protocol import RATE_MAX, Decoder, Flags, Heartbeat, StopCommand, Telemetry, WheelCommand, encode
from console.sim.firmware import SimRobot
from console.templates import TemplateCodec
from shaping.units import WheelUnit, WheelUnits

ROOT = Path(__file__).resolve().parents[3]
WREN = ROOT / "profiles" / "wren.toml"
GEAR = 30.0   # profiles/wren.toml [units] gear_ratio: the firmware takes motor-side rpm


def _rpm(wheel_radps: float) -> float:
    return wheel_radps * GEAR * 60.0 / (2.0 * math.pi)


def _profile(**sim: object) -> Profile:
    profile = load_profile(WREN)
    return dataclasses.replace(profile, sim=dataclasses.replace(profile.sim, noise_radps=0.0, **sim))


class Console:
    """The console side of the link: real encoder and decoder, a sequence counter, the telemetry received."""

    def __init__(self, robot: SimRobot) -> None:
        assert robot.console_end is not None
        self.robot = robot
        self.end = robot.console_end
        self.decoder = Decoder()
        self.seq = 0
        self.telemetry: list[Telemetry] = []

    def send(self, frame_type: type, *fields: float) -> int:
        self.seq = (self.seq + 1) % 65536
        self.end.write(encode(frame_type(self.seq, *fields)))
        return self.seq

    def run(self, seconds: float, frame_type: type | None = None, *fields: float, period_s: float = 0.01) -> None:
        """Send one frame (if any) per period and advance the robot by it, like a control loop on a virtual clock."""
        for _ in range(round(seconds / period_s)):
            if frame_type is not None:
                self.send(frame_type, *fields)
            self.robot.advance(period_s)
            self.collect()

    def collect(self) -> list[Telemetry]:
        frames = [f for f in self.decoder.feed(self.end.read()) if isinstance(f, Telemetry)]
        self.telemetry += frames
        return frames


def _released(profile: Profile | None = None) -> Console:
    console = Console(SimRobot(profile or _profile()))
    console.send(WheelCommand, 0.0, 0.0)
    console.robot.advance(0.01)
    assert console.robot.flags == 0
    return console


def test_power_up_holds_until_a_release_frame() -> None:
    console = Console(SimRobot(_profile()))
    console.run(0.5)
    assert console.telemetry[-1].flags == Flags.STOPPED
    console.run(1.0, WheelCommand, _rpm(5.0), _rpm(5.0))      # motion before the release: ignored
    assert console.robot.plant.wheel_radps == (0.0, 0.0)
    assert console.telemetry[-1].flags & Flags.STOPPED
    console.run(0.02, WheelCommand, 0.0, 0.0)                  # the release
    console.run(1.0, WheelCommand, _rpm(5.0), _rpm(5.0))
    assert console.telemetry[-1].flags == 0
    assert console.robot.plant.wheel_radps[0] == pytest.approx(5.0, rel=1e-6)


def test_commands_in_firmware_units_become_wheel_rates_and_come_back_as_telemetry() -> None:
    console = _released()
    console.run(2.0, WheelCommand, _rpm(6.0), _rpm(-9.0))
    assert console.robot.plant.wheel_radps == pytest.approx((6.0, -9.0), rel=1e-6)
    last = console.telemetry[-1]
    assert (last.left, last.right) == pytest.approx((_rpm(6.0), _rpm(-9.0)), abs=0.001)   # 3 decimals on the wire
    assert last.left_ticks > 0 > last.right_ticks
    # wren: 1440 ticks per wheel revolution; the counts follow the wheel angle
    left_angle, right_angle = console.robot.plant.wheel_angles_rad
    assert last.left_ticks == pytest.approx(left_angle * 1440 / (2.0 * math.pi), abs=200)


@pytest.mark.parametrize(
    ("fault", "fix"),
    [
        ({}, {}),
        ({"invert_left_motor": True}, {"invert_left": True, "invert_left_encoder": True}),
        ({"invert_right_encoder": True}, {"invert_right_encoder": True}),
        ({"invert_left_motor": True, "invert_left_encoder": True}, {"invert_left": True}),   # a mirrored side
        ({"swap_motors": True}, {"swap_motors": True}),
    ],
    ids=["none", "motor", "encoder", "mirrored", "swap"],
)
def test_a_wiring_fault_with_its_profile_fix_drives_and_measures_true(fault: dict[str, bool],
                                                                      fix: dict[str, bool]) -> None:
    """The firmware applies none of the console's [units] corrections: the fix in the profile undoes the fault."""
    profile = _profile(**fault)
    profile = dataclasses.replace(profile, units=dataclasses.replace(profile.units, **fix))
    console = _released(profile)
    console.run(2.0, WheelCommand, *profile.units.to_motor(4.0, 6.0))   # what the console sends for (4, 6) rad/s
    assert console.robot.plant.wheel_radps == pytest.approx((4.0, 6.0), rel=1e-6)
    last = console.telemetry[-1]
    assert profile.units.measured_from_motor(last.left, last.right) == pytest.approx((4.0, 6.0), abs=1e-3)


def test_watchdog_trips_after_watchdog_time_sets_the_flag_and_brings_the_motors_to_zero() -> None:
    profile = _profile()
    watchdog_s = profile.link.watchdog_s
    console = _released(profile)
    console.run(1.0, WheelCommand, _rpm(10.0), _rpm(10.0))
    robot = console.robot
    last_command_s = robot.t_s - 0.01          # the last frame was taken in at the start of the last advance
    trip_s = None
    for _ in range(round(2.0 / 0.001)):
        console.send(Heartbeat)                # heartbeats do not feed the motion watchdog
        robot.advance(0.001)
        if trip_s is None and robot.flags & Flags.WATCHDOG:
            trip_s = robot.t_s
    assert trip_s is not None
    assert watchdog_s < trip_s - last_command_s <= watchdog_s + 0.0011
    assert robot.plant.wheel_radps == (0.0, 0.0)
    assert robot.flags == Flags.WATCHDOG | Flags.STOPPED | Flags.POWER_OFF
    console.collect()
    assert console.telemetry[-1].flags & Flags.WATCHDOG
    # Latched: motion is ignored; a frame at rest releases it.
    console.run(0.5, WheelCommand, _rpm(3.0), _rpm(3.0))
    assert robot.plant.wheel_radps == (0.0, 0.0) and robot.flags & Flags.WATCHDOG
    console.run(0.02, WheelCommand, 0.0, 0.0)
    assert robot.flags == 0


def test_watchdog_ramp_respects_the_torque_limit() -> None:
    profile = _profile()
    console = _released(profile)
    console.run(1.0, WheelCommand, _rpm(15.0), _rpm(15.0))
    rates = []
    for _ in range(2500):
        console.robot.advance(0.001)
        rates.append(console.robot.plant.wheel_radps[0])
    decel = max(a - b for a, b in zip(rates, rates[1:], strict=False)) / 0.001
    assert 0.5 * profile.sim.wheel_accel_radps2 < decel <= profile.sim.wheel_accel_radps2 * (1 + 1e-9)
    assert rates[-1] == 0.0


def test_stop_category_0_zeroes_the_wheels_at_once_and_removes_power() -> None:
    console = _released()
    console.run(1.0, WheelCommand, _rpm(10.0), _rpm(12.0))
    console.send(StopCommand, 0)
    console.robot.advance(0.001)
    assert console.robot.plant.wheel_radps == (0.0, 0.0)
    assert console.robot.flags == Flags.STOPPED | Flags.POWER_OFF


@pytest.mark.parametrize(("category", "power_off"), [(1, True), (2, False)])
def test_stop_categories_1_and_2_ramp_down_at_the_torque_limit(category: int, power_off: bool) -> None:
    profile = _profile(deadband_radps=0.0)
    sim = profile.sim
    console = _released(profile)
    w0 = 15.0
    console.run(2.0, WheelCommand, _rpm(w0), _rpm(w0))
    x0 = console.robot.pose[0]
    console.send(StopCommand, category)
    console.run(3.0)
    assert console.robot.plant.wheel_radps == (0.0, 0.0)
    assert bool(console.robot.flags & Flags.POWER_OFF) == power_off
    assert console.robot.flags & Flags.STOPPED
    # Distance: v^2 / (2a) for the commanded ramp, plus v * dead time, plus v * tau for the lag (area theorem).
    r = profile.geometry.wheel_radius_m
    v, a = r * w0, r * sim.wheel_accel_radps2
    expected = v * v / (2.0 * a) + v * (sim.motor_dead_time_s + sim.motor_time_constant_s)
    assert console.robot.pose[0] - x0 == pytest.approx(expected, rel=0.01)


def test_a_stronger_stop_overrides_a_weaker_one_in_progress() -> None:
    console = _released()
    console.run(1.0, WheelCommand, _rpm(10.0), _rpm(10.0))
    console.send(StopCommand, 2)
    console.robot.advance(0.05)
    assert console.robot.plant.wheel_radps[0] > 5.0
    console.send(StopCommand, 0)
    console.robot.advance(0.001)
    assert console.robot.plant.wheel_radps == (0.0, 0.0)
    console.send(StopCommand, 2)                      # a weaker one afterwards does not bring power back
    console.robot.advance(0.01)
    assert console.robot.flags & Flags.POWER_OFF


@pytest.mark.parametrize("rate_hz", [50.0, 200.0])
def test_telemetry_rate_and_echo_of_the_last_command(rate_hz: float) -> None:
    console = _released(_profile(telemetry_rate_hz=rate_hz))
    console.telemetry.clear()
    console.collect()
    echoes = []
    for _ in range(1000):                 # 10 s at 100 Hz
        seq = console.send(WheelCommand, _rpm(2.0), _rpm(2.0))
        console.robot.advance(0.01)
        frames = console.collect()
        assert all(f.echo_seq == seq for f in frames)
        echoes += frames
    assert len(echoes) == round(10.0 * rate_hz)
    seqs = [f.seq for f in echoes]
    assert all(b - a == 1 for a, b in zip(seqs, seqs[1:], strict=False))


def test_echo_follows_every_console_frame_type_and_the_16_bit_wrap() -> None:
    console = _released()
    console.seq = 65534
    console.send(WheelCommand, 0.0, 0.0)       # seq 65535
    console.run(0.05)
    assert console.telemetry[-1].echo_seq == 65535
    console.send(Heartbeat)                     # seq 0 after the wrap
    console.run(0.05)
    assert console.telemetry[-1].echo_seq == 0


def test_saturated_flag_when_a_command_exceeds_the_top_rate() -> None:
    profile = _profile()
    console = _released(profile)
    top = profile.sim.max_wheel_rate_radps
    console.run(2.0, WheelCommand, _rpm(top * 1.5), _rpm(1.0))
    assert console.telemetry[-1].flags == Flags.SATURATED
    assert console.robot.plant.wheel_radps[0] == pytest.approx(top, rel=1e-9)
    console.run(0.1, WheelCommand, _rpm(1.0), _rpm(1.0))
    assert console.telemetry[-1].flags == 0


def test_fault_stops_at_once_and_blocks_the_release_until_cleared() -> None:
    console = _released()
    console.run(1.0, WheelCommand, _rpm(8.0), _rpm(8.0))
    console.robot.set_fault(True)
    console.run(0.1, WheelCommand, 0.0, 0.0)
    assert console.robot.plant.wheel_radps == (0.0, 0.0)
    assert console.telemetry[-1].flags & Flags.FAULT
    assert console.telemetry[-1].flags & Flags.STOPPED
    console.robot.set_fault(False)
    console.run(0.1, WheelCommand, 0.0, 0.0)
    assert console.telemetry[-1].flags == 0


def test_battery_sags_under_load_and_recovers_at_rest() -> None:
    profile = _profile()
    console = _released(profile)
    console.run(0.5, WheelCommand, 0.0, 0.0)
    assert console.telemetry[-1].battery_v == pytest.approx(profile.sim.battery_v, abs=0.005)
    console.run(0.1, WheelCommand, _rpm(20.0), _rpm(20.0))       # accelerating hard
    assert console.telemetry[-1].battery_v < profile.sim.battery_v - 0.1


def test_closed_link_keeps_the_robot_running_and_the_watchdog_stops_it() -> None:
    console = _released()
    console.run(1.0, WheelCommand, _rpm(10.0), _rpm(10.0))
    console.end.close()
    console.robot.advance(2.0)                  # no exception: the firmware does not crash when the cable goes
    assert not console.robot.link_open
    assert console.robot.plant.wheel_radps == (0.0, 0.0)
    assert console.robot.flags & Flags.WATCHDOG


TEMPLATE = ROOT / "profiles" / "wren-template.toml"


def _template_profile() -> Profile:
    profile = load_profile(TEMPLATE)
    return dataclasses.replace(profile, sim=dataclasses.replace(profile.sim, noise_radps=0.0))


def test_template_robot_end_to_end() -> None:
    """profiles/wren-template.toml: duty-fraction command lines in, 'fb ...' telemetry lines out, via the console's
    TemplateCodec exactly as the control loop uses it."""
    profile = _template_profile()
    robot = SimRobot(profile)
    end = robot.console_end
    codec = TemplateCodec(profile.link.template)
    received: list[Telemetry] = []

    def cycle(frame: WheelCommand | StopCommand | None, seconds: float = 0.02) -> None:
        if frame is not None:
            end.write(codec.encode(frame))
        robot.advance(seconds)
        received.extend(codec.feed(end.read()))

    cycle(WheelCommand(1, 0.0, 0.0))                           # the release
    for seq in range(2, 102):                                  # 2 s at 50 Hz (the profile's rate_hz)
        cycle(WheelCommand(seq, *profile.units.to_motor(4.0, 6.0)))
    assert codec.unknown_frames == codec.malformed == 0
    last = received[-1]
    assert last.echo_seq == 100 and last.flags == 0   # telemetry at 25 Hz: last sent in the cycle of seq 100
    # duty = rate / full_duty_radps; 4 decimals of duty on the line: 22 rad/s * 0.5e-4 resolution
    resolution = profile.units.full_duty_radps * 0.5e-4
    assert robot.plant.wheel_radps == pytest.approx((4.0, 6.0), abs=resolution * 1.01)
    assert profile.units.measured_from_motor(last.left, last.right) == pytest.approx((4.0, 6.0), abs=3 * resolution)
    # A stop line: read as category 0 (templates carry no category): wheels to zero at once.
    cycle(StopCommand(102, 2), 0.001)
    assert robot.plant.wheel_radps == (0.0, 0.0)
    # Silence after a new release and motion: the template's watchdog flag.
    cycle(WheelCommand(103, 0.0, 0.0))
    cycle(WheelCommand(104, *profile.units.to_motor(4.0, 4.0)))
    for _ in range(100):
        cycle(None)
    assert received[-1].flags & Flags.WATCHDOG
    assert robot.plant.wheel_radps == (0.0, 0.0)


def test_a_template_the_simulated_robot_cannot_speak_is_a_profile_error() -> None:
    profile = load_profile(TEMPLATE)
    template = dataclasses.replace(profile.link.template, command_format="L{left}{right}")   # numbers run together
    bad = dataclasses.replace(profile, link=dataclasses.replace(profile.link, template=template))
    with pytest.raises(InputError) as raised:
        SimRobot(bad)
    assert str(TEMPLATE) in str(raised.value) and "link.template" in str(raised.value)


def test_telemetry_saturates_at_what_the_wire_can_carry() -> None:
    """A fine encoder behind a big gearbox, in ticks/s, near the protocol's largest number, with a firmware that
    misreads the unit (unit_scale 1.5): the measured rate would not fit the wire; the firmware saturates it instead of
    failing (PROTOCOL: |rate| <= RATE_MAX)."""
    units = WheelUnits(WheelUnit.TICKS_PER_S, ticks_per_rev=100_000.0, gear_ratio=100.0)
    profile = dataclasses.replace(_profile(unit_scale=1.5), units=units)
    console = _released(profile)
    console.run(1.0, WheelCommand, 0.9 * RATE_MAX, 0.5 * RATE_MAX)
    last = console.telemetry[-1]
    assert last.left == RATE_MAX                                 # 1.35 x RATE_MAX measured
    assert last.right == pytest.approx(0.75 * RATE_MAX, rel=1e-6)


def test_stop_frames_repeated_while_stopped_hold_and_category_1_then_removes_power() -> None:
    console = _released()
    console.run(1.0, WheelCommand, _rpm(10.0), _rpm(10.0))
    console.run(2.0, StopCommand, 2)                 # the console repeats its stop frame every cycle
    assert console.robot.plant.wheel_radps == (0.0, 0.0)
    assert console.robot.flags == Flags.STOPPED      # power kept, no watchdog trip while held
    console.run(0.1, StopCommand, 1)
    assert console.robot.flags == Flags.STOPPED | Flags.POWER_OFF
