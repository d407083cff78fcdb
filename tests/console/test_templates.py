"""Firmware templates: the console and the simulated robot speaking a profile's own line protocol."""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from console.core.safety import SafetyState
from console.loop import ControlLoop, VirtualClock
from console.profile import TemplateConfig, load_profile
from console.sim.firmware import SimRobot
from console.protocol import Flags, Heartbeat, StopCommand, Telemetry, WheelCommand
from console.templates import (
    MAX_TEMPLATE_LINE,
    TEMPLATE_STOP_CATEGORY,
    TemplateCodec,
    TemplateRobotCodec,
    check_robot_side,
    telemetry_format_from_regex,
)
from console.transport import memory_pair
from shaping.shaper import StopKind

ROOT = Path(__file__).resolve().parents[2]
DEMO_PROFILE = load_profile(ROOT / "profiles" / "wren-template.toml")
DEMO = DEMO_PROFILE.link.template
# what the demo firmware's telemetry looks like (profiles/wren-template.toml, comment at the top)
DEMO_TELEMETRY = "fb {seq:05d} L{left:+.4f} R{right:+.4f} bat{battery_v:.2f} wd{watchdog:d} flt{fault:d}"
rates = st.floats(-1000.0, 1000.0, allow_nan=False)


def test_demo_profile_lines_as_its_comment_shows():
    console = TemplateCodec(DEMO)
    assert console.encode(WheelCommand(42, 0.25, -0.125)) == b"drv 00042 L+0.2500 R-0.1250\n"
    assert console.encode(StopCommand(43, 1)) == b"halt 00043\n"
    [t] = console.feed(b"fb 00042 L+0.2480 R-0.1230 bat12.41 wd0 flt0\n")
    assert t == Telemetry(None, 42, 0.248, -0.123, None, None, 12.41, 0)


def test_heartbeat_renders_nothing():
    assert TemplateCodec(DEMO).encode(Heartbeat(7)) == b""


def test_non_finite_command_refused():
    with pytest.raises(ValueError):
        TemplateCodec(DEMO).encode(WheelCommand(1, math.nan, 0.0))


def test_status_fields_become_flags():
    console = TemplateCodec(DEMO)
    [wd, fault] = console.feed(b"fb 1 L+0.0 R+0.0 bat12.00 wd1 flt0\nfb 2 L+0.0 R+0.0 bat12.00 wd0 flt1\n")
    assert wd.flags == Flags.WATCHDOG and fault.flags == Flags.FAULT


def test_end_to_end_over_a_memory_pair():
    console_end, robot_end = memory_pair()
    console, robot = TemplateCodec(DEMO), TemplateRobotCodec(DEMO, DEMO_TELEMETRY)
    for seq in range(1, 20):
        console_end.write(console.encode(WheelCommand(seq, seq * 0.01, -seq * 0.02)))
    console_end.write(console.encode(StopCommand(20, 2)))
    got = robot.feed(robot_end.read())
    assert got[:-1] == [WheelCommand(seq, round(seq * 0.01, 4), round(-seq * 0.02, 4)) for seq in range(1, 20)]
    assert got[-1] == StopCommand(20, TEMPLATE_STOP_CATEGORY)
    robot_end.write(robot.encode(Telemetry(7, 20, 0.19, -0.38, 100, -200, 12.4, int(Flags.WATCHDOG))))
    [t] = console.feed(console_end.read())
    assert (t.echo_seq, t.left, t.right, t.battery_v, t.flags) == (20, 0.19, -0.38, 12.4, Flags.WATCHDOG)


@pytest.mark.parametrize(
    ("command_format", "resolution"),
    [   # resolution: one unit in the last place the format renders (relative for the exponent form)
        ("drv {seq:05d} L{left:+.4f} R{right:+.4f}", lambda x: 1e-4),
        ("M{left:8.2f},{right:8.2f}", lambda x: 1e-2),              # width padding with spaces
        ("v {left:,.1f} {right:_.1f} #{seq}", lambda x: 1e-1),      # digit grouping
        ("duty {left:.1%} {right:.1%}", lambda x: 1e-3),            # percent
        ("w {left:.3e} {right:.3E} {seq:d}", lambda x: 1e-3 * max(abs(x), 1e-300)),   # exponent
        ("{left:.0f} {right:.0f} {left:.0f}", lambda x: 1.0),       # a field twice
        ("speed {left!r} {right!s}", lambda x: 0.0),                # conversions: shortest repr, exact
    ],
)
@given(left=rates, right=rates, seq=st.integers(0, 65535))
def test_robot_reads_back_what_the_console_rendered(command_format, resolution, left, right, seq):
    # The numbers as Python's format mini-language renders them (Python Library Reference, "Format Specification
    # Mini-Language"): read back within half a unit in the last place, and rendering them again gives the same line.
    template = TemplateConfig(command_format, "stop {seq}", DEMO.telemetry_regex)
    line = TemplateCodec(template).encode(WheelCommand(seq, left, right))
    [command] = TemplateRobotCodec(template, DEMO_TELEMETRY).feed(line)
    assert command.seq == (seq if "{seq" in command_format else 0)
    assert (command_format.format(left=command.left, right=command.right, seq=command.seq) + "\n").encode() == line
    for sent, read in ((left, command.left), (right, command.right)):
        assert abs(read - sent) <= 0.5 * resolution(sent) * (1 + 1e-9) + 1e-12


@given(rates, rates, st.integers(0, 65535), st.floats(0.01, 60.0), st.booleans(), st.booleans())
def test_telemetry_round_trip_through_the_regex(left, right, echo, battery, watchdog, fault):
    robot, console = TemplateRobotCodec(DEMO, DEMO_TELEMETRY), TemplateCodec(DEMO)
    flags = (Flags.WATCHDOG if watchdog else 0) | (Flags.FAULT if fault else 0)
    [t] = console.feed(robot.encode(Telemetry(1, echo, left, right, 0, 0, battery, int(flags))))
    assert t.echo_seq == echo and t.flags == flags
    assert t.left == float(f"{left:+.4f}") and t.right == float(f"{right:+.4f}")
    assert t.battery_v == (float(f"{battery:.2f}") or None)


def test_optional_groups_missing_are_none():
    template = TemplateConfig("m {left} {right}", "s", r"^r (?P<left>\S+) (?P<right>\S+)(?: v(?P<battery_v>\S+))?$")
    [with_v, without] = TemplateCodec(template).feed(b"r 1.5 -2.5 v11.9\r\nr 1.5 -2.5\n")
    assert with_v.battery_v == 11.9 and without.battery_v is None and without.echo_seq is None


def test_console_counters():
    template = TemplateConfig("m {left} {right}", "s", r"^r (?P<left>\S+) (?P<right>\S+)$")
    console = TemplateCodec(template)
    assert console.feed(b"hello\n" + b"r abc 1.0\n" + b"r nan 1.0\n" + b"x" * 300 + b"\n" + b"\n\r\n") == []
    assert (console.unknown_frames, console.malformed, console.overlong_lines, console.crc_errors) == (1, 2, 1, 0)
    # an overlong line arriving in pieces is counted once, the buffer stays bounded, the next line is read
    for _ in range(10):
        console.feed(b"y" * 100)
        assert console.pending < MAX_TEMPLATE_LINE
    assert console.feed(b"tail\nr 1 2\n") == [Telemetry(None, None, 1.0, 2.0, None, None, None, 0)]
    assert console.overlong_lines == 2 and console.unknown_frames == 1


def test_robot_counters():
    robot = TemplateRobotCodec(DEMO, DEMO_TELEMETRY)
    assert robot.feed(b"drv 00001 L+1.0000\n" + b"drv 00001 L+1.0.00 R+1.0000\n" + b"z" * 400 + b"\n") == []
    assert (robot.unknown_frames, robot.overlong_lines) == (2, 1)
    assert robot.feed(b"halt 00009\n") == [StopCommand(9, TEMPLATE_STOP_CATEGORY)]


@given(st.binary(max_size=1500))
def test_random_bytes_never_raise(data):
    for codec in (TemplateCodec(DEMO), TemplateRobotCodec(DEMO, DEMO_TELEMETRY)):
        codec.feed(data)
        assert codec.pending < MAX_TEMPLATE_LINE


@pytest.mark.parametrize(
    ("command_format", "stop_format", "telemetry_format", "complaint"),
    [
        ("{left}{right}", "halt {seq}", DEMO_TELEMETRY, "command_format"),              # no text between numbers
        ("d {left.real} {right}", "halt {seq}", DEMO_TELEMETRY, "plain field names"),
        ("d {left} {right}", "halt {seq:x}", DEMO_TELEMETRY, "stop_format"),             # hex cannot be read back
        ("d {left} {right}", "d {seq} 3.25", DEMO_TELEMETRY, "also matches a command"),
        ("d {left} {right}", "halt", DEMO_TELEMETRY + " {speed}", "fields other than"),
        ("d {left} {right}", "halt", "fb {seq} L{left:+.4f} R{right:+.4f}", "exactly the telemetry_regex groups"),
        ("d {left} {right}", "halt", DEMO_TELEMETRY.replace("{battery_v:.2f}", "{battery_v:.0f}"), "not read back"),
    ],
)
def test_templates_the_simulated_robot_cannot_speak(command_format, stop_format, telemetry_format, complaint):
    template = TemplateConfig(command_format, stop_format, DEMO.telemetry_regex)
    with pytest.raises(ValueError, match=complaint) as error:
        check_robot_side(template, telemetry_format)
    assert "\n" not in str(error.value)
    with pytest.raises(ValueError):
        TemplateRobotCodec(template, telemetry_format)


def test_demo_template_passes_the_check_and_its_telemetry_reads_back_with_the_standard_library():
    assert check_robot_side(DEMO, DEMO_TELEMETRY) == DEMO_TELEMETRY  # the format the simulated robot will use
    # independent of our codecs: Python's own str.format renders the demo firmware's line, re reads it back
    line = DEMO_TELEMETRY.format(seq=42, left=-1.5, right=2.25, battery_v=12.4, watchdog=0, fault=1)
    match = re.fullmatch(DEMO.telemetry_regex, line)
    assert match is not None
    assert (int(match["seq"]), float(match["left"]), float(match["right"])) == (42, -1.5, 2.25)
    assert (float(match["battery_v"]), match["watchdog"], match["fault"]) == (12.4, "0", "1")


@pytest.mark.parametrize(
    "regex",
    [
        DEMO.telemetry_regex,
        r"^r\s+(?P<left>\S+) (?P<right>\S+)$",
        r"T:(?P<left>-?\d+)\t(?P<right>-?\d+)\r?",
        r"^x (?P<left>[+-]\d{1,3}\.\d{2}) (?P<right>[+-]\d{1,3}\.\d{2}) s=(?P<seq>\d{5}) \[ok\]$",
        r"^\{(?P<left>[-\d.]+),(?P<right>[-\d.]+),(?P<fault>[01])\}$",
    ],
)
@given(left=st.floats(-999.0, 999.0), right=st.floats(-999.0, 999.0), echo=st.integers(0, 65535))
def test_telemetry_line_derived_from_a_plain_regex(regex, left, right, echo):
    template = TemplateConfig("d {left} {right} {seq}", "halt {seq}", regex)
    robot, console = TemplateRobotCodec(template), TemplateCodec(template)
    assert robot.telemetry_format == telemetry_format_from_regex(regex)
    [t] = console.feed(robot.encode(Telemetry(1, echo, left, right, 0, 0, 24.0, int(Flags.FAULT))))
    # the values come back as the derived format rendered them (most precise rendering the group accepts)
    fmt = robot.telemetry_format
    assert (fmt.format(left=t.left, right=t.right, seq=t.echo_seq or 0, battery_v=24.0, watchdog=0,
                       fault=1 if t.flags & Flags.FAULT else 0) + "\n").encode() == robot.encode(
        Telemetry(1, echo, left, right, 0, 0, 24.0, int(Flags.FAULT)))
    assert abs(t.left - left) <= 0.5 and abs(t.right - right) <= 0.5


@pytest.mark.parametrize(
    ("regex", "why"),
    [
        (r"^r (?P<left>\S+) (?P<right>\S+)|^x$", "more than literal text"),           # alternation
        (r"^r (?P<left>\S+) (?P<right>\S+)(?: v(?P<battery_v>\S+))?$", "more than literal text"),  # optional part
        (r"^r \d+ (?P<left>\S+) (?P<right>\S+)$", "more than literal text"),       # a number outside a group
        (r"^r (?P<left>\S+)+ (?P<right>\S+)$", "quantifier after it"),
        (r"^r (?P<left>[a-f]+) (?P<right>\S+)$", "accepts none of the plain number renderings"),
    ],
)
def test_regexes_the_simulated_robot_cannot_invert_ask_for_telemetry_format(regex, why):
    template = TemplateConfig("d {left} {right}", "halt", regex)
    with pytest.raises(ValueError, match=why):
        telemetry_format_from_regex(regex)
    with pytest.raises(ValueError, match="give it as telemetry_format") as error:
        TemplateRobotCodec(template)
    assert "\n" not in str(error.value)


def test_template_robot_drives_end_to_end_through_the_control_loop():
    # The whole stack on the demo template profile: shaper -> units (duty) -> template lines -> simulated robot
    # (template side) -> template telemetry -> measured wheel rates. Steady state of a first-order motor: the
    # measured rate equals the command (common practice); the sim's deadband is far below the commanded rate.
    clock = VirtualClock()
    console_end, robot_end = memory_pair()
    sim = SimRobot(DEMO_PROFILE, robot_end)
    wire: list[bytes] = []

    class Tap:
        url = console_end.url

        def write(self, data: bytes) -> None:
            wire.append(data)
            console_end.write(data)

        def read(self) -> bytes:
            return console_end.read()

        def close(self) -> None:
            console_end.close()

    loop = ControlLoop(DEMO_PROFILE, Tap(), clock, sim=sim)
    rate = DEMO_PROFILE.link.rate_hz
    loop.run_cycles(round(0.5 * rate))
    assert wire == []                              # disarmed: heartbeats render nothing on a template link
    loop.arm()
    loop.request(0.3, 0.0)
    loop.run_cycles(round(4.0 * rate))
    snap = loop.snapshot()
    assert snap.state is SafetyState.ARMED
    assert snap.left_meas_radps == pytest.approx(snap.shaped.left_radps, rel=0.02)
    assert snap.right_meas_radps == pytest.approx(snap.shaped.right_radps, rel=0.02)
    assert snap.shaped.left_radps == pytest.approx(0.3 / DEMO_PROFILE.geometry.wheel_radius_m, rel=1e-6)
    assert snap.link.decoder.total == 0 and snap.link.rtt_s is not None
    assert wire[0].startswith(b"drv ") and wire[0].endswith(b" L+0.0000 R+0.0000\n")   # the release line
    loop.stop(StopKind.CONTROLLED)
    loop.run_cycles(round(3.0 * rate))
    assert loop.snapshot().state is SafetyState.STOPPED
    assert wire[-1].startswith(b"halt ")
    assert sim.plant.wheel_radps == pytest.approx((0.0, 0.0), abs=1e-6)
