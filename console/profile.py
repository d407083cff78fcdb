"""Robot profiles: a TOML file read with tomllib, validated into frozen dataclasses.

Validation is strict because a profile drives real motors: a typo'd key that silently fell back to a default, or a
speed the wheels can never reach, would only show up as a surprise on the bench. Every problem is reported as one
line naming the file, the dotted key, the value and what is allowed (`ProfileError`, exit code 2).
"""

from __future__ import annotations

import difflib
import functools
import json
import math
import re
import string
import subprocess
import sys
import tomllib
import urllib.parse
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from console.errors import InputError
from console.files import read_input
from console.inputs.mapper import InputConfig
from console.protocol import SEQ_MODULUS
from console.templates import MAX_TEMPLATE_LINE
from console.tomltable import MISSING, TomlTable, short
from shaping.body import Body
from shaping.envelope import Envelope, Limits
from shaping.geometry import Geometry
from shaping.units import WheelUnit, WheelUnits


class ProfileError(InputError):
    """A profile that cannot be used: file, dotted key, value, what is allowed."""


@dataclass(frozen=True, slots=True)
class TemplateConfig:
    """Line formats for firmware with its own protocol (see console/templates.py)."""

    command_format: str
    stop_format: str
    telemetry_regex: str


@dataclass(frozen=True, slots=True)
class LinkConfig:
    url: str = "sim"
    baud: int = 115200
    rate_hz: float = 100.0
    protocol: str = "diffdeck"
    watchdog_s: float = 0.25
    telemetry_timeout_s: float = 0.5
    template: TemplateConfig | None = None


@dataclass(frozen=True, slots=True)
class SimConfig:
    """The simulated robot's plant and firmware; the wiring faults exist to rehearse the polarity check."""

    motor_time_constant_s: float = 0.08
    motor_dead_time_s: float = 0.01
    deadband_radps: float = 0.2
    wheel_accel_radps2: float = 60.0
    max_wheel_rate_radps: float = math.inf  # load_profile resolves it to 1.2 x limits.wheel_rate_radps when omitted
    encoder_ticks_per_rev: int = 2048
    wheel_radius_ratio: float = 1.0
    track_width_scale: float = 1.0
    noise_radps: float = 0.0
    seed: int = 1
    telemetry_rate_hz: float = 50.0
    battery_v: float = 24.0
    swap_motors: bool = False
    invert_left_motor: bool = False
    invert_right_motor: bool = False
    invert_left_encoder: bool = False
    invert_right_encoder: bool = False
    dead_left: bool = False
    dead_right: bool = False
    unit_scale: float = 1.0
    # "closed": the wheels follow their commands through a lag (a speed loop assumed in the firmware); "open": the
    # command is a duty driving a DC motor (console/sim/motor.py); "pi": the firmware's PI loop on that motor
    wheel_loop: str = "closed"
    motor_resistance_ohm: float = 2.0             # the motor seen at the wheel (constants through the gearbox)
    motor_torque_constant_nm_per_a: float = 0.6
    wheel_inertia_kgm2: float = 0.004
    viscous_friction_nms: float = 0.002
    coulomb_friction_nm: float = 0.05
    pi_kp: float = 0.0                            # duty per rad/s of error
    pi_ki: float = 0.0                            # duty per rad of integrated error
    ff_ks: float = 0.0                            # duty to break static friction
    ff_kv: float = 0.0                            # duty per rad/s of reference


@dataclass(frozen=True, slots=True)
class Profile:
    path: Path
    name: str
    geometry: Geometry
    limits: Limits
    units: WheelUnits
    link: LinkConfig
    sim: SimConfig
    data: dict[str, Any] = field(compare=False, repr=False)
    body: Body | None = None
    input: InputConfig = InputConfig()

    @property
    def envelope(self) -> Envelope:
        return Envelope(self.geometry, self.limits)


PROTOCOLS = ("diffdeck", "template")
COMMAND_FIELDS = frozenset({"left", "right", "seq"})
STOP_FIELDS = frozenset({"seq"})
TELEMETRY_GROUPS = frozenset({"left", "right", "seq", "battery_v", "watchdog", "fault"})
TRIM_RANGE = (0.5, 1.5)
SIM_SCALE_RANGE = (0.5, 1.5)
RATE_HZ_RANGE = (10.0, 1000.0)
TELEMETRY_RATE_HZ_RANGE = (1.0, 1000.0)
DEFAULT_STOP_JERK_FACTOR = 4.0
DEFAULT_SIM_RATE_FACTOR = 1.2
SECTIONS = ("robot", "geometry", "limits", "units", "link", "sim", "body", "input")
MAX_NAME = 80
MAX_PROFILE_BYTES = 1 << 20   # a profile is a few kB; a megabyte is a mistake (or not a profile at all)
WIRE_RATE_MAX = 2_000_000.0   # PROTOCOL.md section 10: wheel rates travel as +-2000000.000 firmware units
# Bounds on every number, so that no figure derived from them (ramp times and distances, wheel rates in the firmware
# unit, the simulated plant) overflows or loses all precision: from a 1 mm/s crawl to 100 m/s, from a 1 mm wheel to a
# 10 m one. The README tables state them. (low, high), both allowed.
RANGES: dict[str, tuple[float, float]] = {
    "geometry.wheel_radius_m": (0.001, 10.0),
    "geometry.track_width_m": (0.01, 100.0),
    "limits.speed_mps": (0.001, 100.0),
    "limits.reverse_speed_mps": (0.001, 100.0),
    "limits.turn_rate_radps": (0.001, 1000.0),
    "limits.accel_mps2": (0.001, 1000.0),
    "limits.decel_mps2": (0.001, 1000.0),
    "limits.jerk_mps3": (0.001, 100_000.0),
    "limits.stop_decel_mps2": (0.001, 1000.0),
    "limits.stop_jerk_mps3": (0.001, 400_000.0),
    "limits.turn_accel_radps2": (0.001, 10_000.0),
    "limits.turn_jerk_radps3": (0.001, 1_000_000.0),
    "limits.sideways_accel_mps2": (0.001, 1000.0),
    "limits.wheel_rate_radps": (0.001, 10_000.0),
    "limits.wheel_accel_radps2": (0.001, 1_000_000.0),
    "units.ticks_per_rev": (1.0, 10_000_000.0),
    "units.gear_ratio": (0.001, 10_000.0),
    "units.full_duty_radps": (0.001, 100_000.0),
    "link.watchdog_s": (0.002, 60.0),
    "link.telemetry_timeout_s": (0.002, 60.0),
    "sim.motor_time_constant_s": (0.0001, 5.0),
    "sim.deadband_radps": (0.0, 10_000.0),
    "sim.wheel_accel_radps2": (0.001, 1_000_000.0),
    "sim.max_wheel_rate_radps": (0.001, 100_000.0),
    "sim.noise_radps": (0.0, 1000.0),
    "sim.battery_v": (0.01, 999.99),       # PROTOCOL.md section 4: battery 0.00..999.99 V, 0.00 = not measured
    "sim.unit_scale": (0.001, 1000.0),
    "sim.motor_resistance_ohm": (0.001, 1000.0),
    "sim.motor_torque_constant_nm_per_a": (0.0001, 1000.0),
    "sim.wheel_inertia_kgm2": (1e-7, 1000.0),
    "sim.viscous_friction_nms": (0.0, 1000.0),
    "sim.coulomb_friction_nm": (0.0, 10_000.0),
    "sim.pi_kp": (0.0, 1000.0),
    "sim.pi_ki": (0.0, 100_000.0),
    "sim.ff_ks": (0.0, 1.0),
    "sim.ff_kv": (0.0, 1000.0),
    "body.mass_kg": (0.01, 100_000.0),
    "body.cog_height_m": (0.001, 100.0),
    "body.cog_ahead_m": (-100.0, 100.0),
    "body.support_ahead_m": (0.0, 100.0),
    "body.support_behind_m": (0.0, 100.0),
    "body.drive_load_share": (0.01, 1.0),
    "body.tyre_friction": (0.01, 3.0),
    "input.deadzone": (0.0, 0.9),
    "input.expo": (0.0, 1.0),      # common practice: rubber on dry concrete is about 0.8, ice far below 0.1
}
# a plain number format: [[fill]align][sign][z][#][0][width][grouping][.precision][type]
PLAIN_SPEC = re.compile(r"(?:.?[<>=^])?[-+ ]?z?#?0?(?P<width>\d*)[,_]?(?:\.(?P<precision>\d+))?(?P<type>[a-zA-Z%]?)")
REGEX_LINE_BUDGET_S = 0.05    # per adversarial telemetry line; a sane pattern needs microseconds
REGEX_TOTAL_BUDGET_S = 2.0    # for all of them, starting the trial process included
NETWORK_SCHEMES = ("socket", "rfc2217")
BAUD_RANGE = (50, 12_000_000)             # common practice: from the slowest UART rate to fast USB serial adapters
ENCODER_TICKS_RANGE = (1, 10_000_000)
SEED_RANGE = (0, 2**63 - 1)


SIM_DEFAULTS = SimConfig()
LINK_DEFAULTS = LinkConfig()


def _keys(cls: type) -> frozenset[str]:
    return frozenset(f.name for f in fields(cls))


# what each table may hold, to tell a misspelt required key from a known key that is simply read later
_KNOWN_KEYS: dict[str, frozenset[str]] = {
    "robot": frozenset({"name"}), "geometry": _keys(Geometry), "limits": _keys(Limits), "units": _keys(WheelUnits),
    "link": _keys(LinkConfig), "link.template": _keys(TemplateConfig), "sim": _keys(SimConfig), "body": _keys(Body),
    "input": _keys(InputConfig),
}


def _table(file: str, name: str, table: object) -> TomlTable:
    """One section of a profile: ProfileError for anything wrong in it, RANGES for the bounded keys."""
    return TomlTable(file, name, table, error=ProfileError, known=_KNOWN_KEYS.get(name, ()), ranges=RANGES)


def load_profile(path: str | Path) -> Profile:
    """Read and validate a profile; raises ProfileError (one line) on anything that cannot be used."""
    path = Path(path)
    return profile_from_data(path, _parse(path))


def profile_from_data(path: Path, data: dict[str, Any]) -> Profile:
    """A profile from its parsed tables (a recording's sidecar keeps them); errors name `path`."""
    file = str(path)
    for section in data:
        if section not in SECTIONS:
            close = difflib.get_close_matches(section, SECTIONS, n=1)
            hint = f"did you mean [{close[0]}]?" if close else "a profile has " + ", ".join(f"[{s}]" for s in SECTIONS)
            raise ProfileError(file, f"[{section}]", short(data[section]), f"unknown section ({hint})")
    robot = _required_table(file, data, "robot")
    name = robot.text("name")
    if len(name) > MAX_NAME or not name.isprintable():
        raise robot.error("name", name, f"a name of at most {MAX_NAME} characters on one line, without control "
                                        "characters (it is shown in the console and stored with recordings)")
    robot.finish()
    geometry = _geometry(_required_table(file, data, "geometry"))
    limits = _limits(_required_table(file, data, "limits"), geometry)
    units = _units(_table(file, "units", data.get("units", {})), limits)
    sim = _sim(_table(file, "sim", data.get("sim", {})), limits)
    if sim.wheel_loop == "open" and units.unit is not WheelUnit.DUTY:
        raise ProfileError(file, "sim.wheel_loop", sim.wheel_loop, f'"closed" or "pi" with units.unit = '
                           f'"{units.unit.value}": open loop the firmware takes a duty (units.unit = "duty")')
    link = _link(_table(file, "link", data.get("link", {})), sim, _top_command(units, limits))
    body = _body(_table(file, "body", data["body"])) if "body" in data else None
    inputs = _input(_table(file, "input", data.get("input", {})))
    return Profile(path=path, name=name, geometry=geometry, limits=limits, units=units, link=link, sim=sim, data=data,
                   body=body, input=inputs)


@functools.cache
def _event_codes(prefixes: tuple[str, ...]) -> tuple[str, ...]:
    """The kernel's event-code names with these prefixes (evdev's table of the Linux input ABI); without evdev (not
    Linux) an empty tuple, and names are then only checked for their form."""
    try:
        from evdev import ecodes
    except ImportError:
        return ()
    return tuple(sorted(name for name in ecodes.ecodes if name.startswith(prefixes)))


def _input(table: TomlTable) -> InputConfig:
    """The optional [input]: which stick axes and buttons drive, in the kernel's event-code names."""
    defaults = InputConfig()

    def code(key: str, prefixes: tuple[str, ...]) -> str:
        name = table.text(key, getattr(defaults, key))
        known = _event_codes(prefixes)
        well_formed = name.startswith(prefixes) and re.fullmatch(r"[A-Z0-9_]+", name) is not None
        if (known and name not in known) or not well_formed:
            close = difflib.get_close_matches(name, known, n=1)
            hint = f" (did you mean {close[0]}?)" if close else ""
            raise table.error(key, name, f"an event code named {' or '.join(p + '...' for p in prefixes)} as the "
                                         f"kernel names it{hint}")
        return name

    axes, buttons = ("ABS_",), ("BTN_", "KEY_")
    config = InputConfig(
        speed_axis=code("speed_axis", axes),
        speed_axis_inverted=table.boolean("speed_axis_inverted", defaults.speed_axis_inverted),
        turn_axis=code("turn_axis", axes),
        turn_axis_inverted=table.boolean("turn_axis_inverted", defaults.turn_axis_inverted),
        deadzone=table.number("deadzone", "fraction of half travel", defaults.deadzone),
        expo=table.number("expo", "0 linear .. 1 cubic", defaults.expo),
        hold_to_drive_button=code("hold_to_drive_button", buttons),
        fast_stop_button=code("fast_stop_button", buttons),
        slower_button=code("slower_button", buttons),
        faster_button=code("faster_button", buttons),
    )
    if config.speed_axis == config.turn_axis:
        raise table.error("turn_axis", config.turn_axis, "an axis other than speed_axis")
    named = [config.hold_to_drive_button, config.fast_stop_button, config.slower_button, config.faster_button]
    if len(set(named)) < len(named):
        raise table.error("fast_stop_button", config.fast_stop_button, "four different buttons for hold-to-drive, "
                                                                         "fast stop, slower and faster")
    table.finish()
    return config


def _body(table: TomlTable) -> Body:
    """The optional [body]: what the static tip-over and traction limits are worked out from (shaping.body)."""
    body = Body(
        mass_kg=table.optional("mass_kg", "kg, for the record"),
        cog_height_m=table.number("cog_height_m", "m, the centre of mass above the ground"),
        cog_ahead_m=table.number("cog_ahead_m", "m, ahead of the drive axle (behind: negative)", 0.0),
        support_ahead_m=table.number("support_ahead_m", "m, casters or skids ahead of the drive axle", 0.0),
        support_behind_m=table.number("support_behind_m", "m, casters or skids behind the drive axle", 0.0),
        drive_load_share=table.number("drive_load_share", "share of the weight on the drive wheels", 1.0),
        tyre_friction=table.number("tyre_friction", "friction coefficient of the drive tyres on the floor"),
    )
    if not -body.support_behind_m <= body.cog_ahead_m <= body.support_ahead_m:
        raise table.error("cog_ahead_m", body.cog_ahead_m,
                          f"from -support_behind_m = {-body.support_behind_m:g} to support_ahead_m = "
                          f"{body.support_ahead_m:g} m: a centre of mass outside its supports tips over at rest")
    table.finish()
    return body


def _parse(path: Path) -> dict[str, Any]:
    file = str(path)
    try:
        text = read_input(path, "a TOML profile", max_bytes=MAX_PROFILE_BYTES).decode("utf-8")
    except UnicodeDecodeError as error:
        raise ProfileError(file, "file", f"byte {error.start}", "not UTF-8 text; a profile is a UTF-8 TOML file") \
            from None
    except InputError as error:
        raise ProfileError(error.where, error.key, error.value, error.allowed) from None
    try:
        return tomllib.loads(text)
    except RecursionError:
        raise ProfileError(file, "TOML syntax", "", "arrays or tables nested too deeply for a profile") from None
    except tomllib.TOMLDecodeError as error:
        message = str(error)
        found = re.search(r"\(at line (\d+), column \d+\)", message)
        reason = message[: found.start()].strip() if found else message
        if found:
            line = int(found.group(1))
            lines = text.splitlines()
            source = lines[line - 1].strip() if 0 < line <= len(lines) else ""
            raise ProfileError(f"{file}, line {line}", "TOML syntax", source, reason + "; see https://toml.io") \
                from None
        raise ProfileError(file, "TOML syntax", "", reason + "; see https://toml.io") from None


def _required_table(file: str, data: dict[str, Any], name: str) -> TomlTable:
    if name not in data:
        raise ProfileError(file, name, MISSING, f"required section [{name}]")
    return _table(file, name, data[name])


def _geometry(table: TomlTable) -> Geometry:
    geometry = Geometry(wheel_radius_m=table.number("wheel_radius_m", "m"),
                        track_width_m=table.number("track_width_m", "m, between the wheel contact centres"))
    table.finish()
    return geometry


def _limits(table: TomlTable, geometry: Geometry) -> Limits:
    wheel_rate = table.number("wheel_rate_radps", "rad/s")
    wheel_speed = wheel_rate * geometry.wheel_radius_m  # the fastest a wheel rim can move
    speed = table.number("speed_mps", "m/s")
    reverse = table.number("reverse_speed_mps", "m/s; default speed_mps", speed)
    for key, value in (("speed_mps", speed), ("reverse_speed_mps", reverse)):
        if value > wheel_speed * (1 + 1e-12):
            raise table.error(key, value, f"at most wheel_rate_radps x wheel_radius_m = {wheel_speed:.4g} m/s: "
                                          "the wheels cannot go faster")
    turn_rate = table.number("turn_rate_radps", "rad/s")
    spin_rate = 2.0 * wheel_speed / geometry.track_width_m  # spinning in place with both wheels at full rate
    if turn_rate > spin_rate * (1 + 1e-12):
        raise table.error("turn_rate_radps", turn_rate,
                          f"at most 2 x wheel_rate_radps x wheel_radius_m / track_width_m = {spin_rate:.4g} rad/s: "
                          "the wheels cannot spin the robot faster")
    accel = table.number("accel_mps2", "m/s^2")
    decel = table.number("decel_mps2", "m/s^2; default accel_mps2", accel)
    jerk = table.number("jerk_mps3", "m/s^3")
    stop_decel = table.number("stop_decel_mps2", "m/s^2")
    if stop_decel < decel:
        raise table.error("stop_decel_mps2", stop_decel,
                          f"at least decel_mps2 = {decel:g} m/s^2: the fast stop may not be gentler than slowing down")
    stop_jerk = table.number("stop_jerk_mps3", "m/s^3; default 4 x jerk_mps3", DEFAULT_STOP_JERK_FACTOR * jerk)
    if stop_jerk < jerk:
        raise table.error("stop_jerk_mps3", stop_jerk,
                          f"at least jerk_mps3 = {jerk:g} m/s^3: the fast stop may not be gentler than slowing down")
    turn_accel = table.number("turn_accel_radps2", "rad/s^2")
    wheel_accel = table.optional("wheel_accel_radps2", "rad/s^2")
    if wheel_accel is not None:
        # On a straight line both wheels carry the body acceleration; in a spin each carries omega_dot * W / 2.
        rim_accel = wheel_accel * geometry.wheel_radius_m
        for key, value in (("accel_mps2", accel), ("decel_mps2", decel), ("stop_decel_mps2", stop_decel)):
            if value > rim_accel * (1 + 1e-12):
                raise table.error(key, value, f"at most wheel_accel_radps2 x wheel_radius_m = {rim_accel:.4g} m/s^2: "
                                              "the wheels may not accelerate faster")
        spin_accel = 2.0 * rim_accel / geometry.track_width_m
        if turn_accel > spin_accel * (1 + 1e-12):
            raise table.error("turn_accel_radps2", turn_accel,
                              f"at most 2 x wheel_accel_radps2 x wheel_radius_m / track_width_m = {spin_accel:.4g} "
                              "rad/s^2: the wheels may not accelerate faster")
    limits = Limits(
        speed_mps=speed, reverse_speed_mps=reverse, turn_rate_radps=turn_rate,
        accel_mps2=accel, decel_mps2=decel, jerk_mps3=jerk,
        turn_accel_radps2=turn_accel,
        turn_jerk_radps3=table.number("turn_jerk_radps3", "rad/s^3"),
        sideways_accel_mps2=table.optional("sideways_accel_mps2", "m/s^2"),
        wheel_rate_radps=wheel_rate,
        wheel_accel_radps2=wheel_accel,
        stop_decel_mps2=stop_decel, stop_jerk_mps3=stop_jerk,
    )
    table.finish()
    return limits


def _units(table: TomlTable, limits: Limits) -> WheelUnits:
    names = tuple(unit.value for unit in WheelUnit)
    unit = WheelUnit(table.text("unit", WheelUnit.RADPS.value, choices=names))
    ticks = 0.0
    if unit is WheelUnit.TICKS_PER_S or "ticks_per_rev" in table.table:
        ticks = table.number("ticks_per_rev", "encoder ticks per motor revolution")
    full_duty = 0.0
    if unit is WheelUnit.DUTY or "full_duty_radps" in table.table:
        full_duty = table.number("full_duty_radps", "wheel rad/s at duty 1.0")
    if unit is WheelUnit.DUTY and full_duty < limits.wheel_rate_radps:
        raise table.error("full_duty_radps", full_duty, f"at least limits.wheel_rate_radps = "
                                                        f"{limits.wheel_rate_radps:g} rad/s, or duty would pass 1.0")
    low, high = TRIM_RANGE
    units = WheelUnits(
        unit=unit, ticks_per_rev=ticks,
        gear_ratio=table.number("gear_ratio", "motor revolutions per wheel revolution", 1.0),
        full_duty_radps=full_duty,
        invert_left=table.boolean("invert_left", False), invert_right=table.boolean("invert_right", False),
        trim_left=table.number("trim_left", "command factor", 1.0, low=low, high=high, low_inclusive=True),
        trim_right=table.number("trim_right", "command factor", 1.0, low=low, high=high, low_inclusive=True),
        invert_left_encoder=table.boolean("invert_left_encoder", False),
        invert_right_encoder=table.boolean("invert_right_encoder", False),
        swap_motors=table.boolean("swap_motors", False),
        swap_encoders=table.boolean("swap_encoders", False),
    )
    table.finish()
    _check_wire_range(table, units, limits)
    return units


def _top_command(units: WheelUnits, limits: Limits) -> float:
    """The largest number a wheel command can carry, in the firmware unit (trim included)."""
    return limits.wheel_rate_radps * units.per_radps * max(units.trim_left, units.trim_right)


def _check_wire_range(table: TomlTable, units: WheelUnits, limits: Limits) -> None:
    """The fastest wheel command, in the firmware unit and trimmed, must fit the wire (PROTOCOL.md section 10).

    Named after the unit's own setting: ticks_per_rev for ticks/s, gear_ratio for rpm (the only setting that
    scales it), the wheel rate limit for rad/s. A duty never passes 1.0 (full_duty_radps is checked above).
    """
    top = _top_command(units, limits)
    if top <= WIRE_RATE_MAX:
        return
    key = {WheelUnit.TICKS_PER_S: "ticks_per_rev", WheelUnit.RPM: "gear_ratio"}.get(units.unit)
    setting = {"ticks_per_rev": units.ticks_per_rev, "gear_ratio": units.gear_ratio}.get(key or "")
    allowed = (f"with unit = \"{units.unit.value}\", gear_ratio = {units.gear_ratio:g}, ticks_per_rev = "
               f"{units.ticks_per_rev:g}, limits.wheel_rate_radps = {limits.wheel_rate_radps:g} and the trim, the "
               f"fastest wheel command is {top:.4g} {units.unit.value}: beyond the wire's +-{WIRE_RATE_MAX:.3f} "
               "(PROTOCOL.md section 10)")
    if key is None:
        raise ProfileError(table.file, "limits.wheel_rate_radps", limits.wheel_rate_radps, allowed)
    raise table.error(key, setting, allowed)


def _sim(table: TomlTable, limits: Limits) -> SimConfig:
    low, high = SIM_SCALE_RANGE
    sim = SimConfig(
        motor_time_constant_s=table.number("motor_time_constant_s", "s", SIM_DEFAULTS.motor_time_constant_s, high=5.0),
        motor_dead_time_s=table.number("motor_dead_time_s", "s", SIM_DEFAULTS.motor_dead_time_s, high=1.0,
                                       low_inclusive=True),
        deadband_radps=table.number("deadband_radps", "rad/s", SIM_DEFAULTS.deadband_radps, low_inclusive=True),
        wheel_accel_radps2=table.number("wheel_accel_radps2", "rad/s^2", SIM_DEFAULTS.wheel_accel_radps2),
        max_wheel_rate_radps=table.number("max_wheel_rate_radps", "rad/s; default 1.2 x limits.wheel_rate_radps",
                                          DEFAULT_SIM_RATE_FACTOR * limits.wheel_rate_radps),
        encoder_ticks_per_rev=table.integer("encoder_ticks_per_rev", SIM_DEFAULTS.encoder_ticks_per_rev,
                                            low=ENCODER_TICKS_RANGE[0], high=ENCODER_TICKS_RANGE[1]),
        wheel_radius_ratio=table.number("wheel_radius_ratio", "actual right / left radius",
                                        SIM_DEFAULTS.wheel_radius_ratio, low=low, high=high, low_inclusive=True),
        track_width_scale=table.number("track_width_scale", "actual / nominal track width",
                                       SIM_DEFAULTS.track_width_scale, low=low, high=high, low_inclusive=True),
        noise_radps=table.number("noise_radps", "rad/s, standard deviation", SIM_DEFAULTS.noise_radps,
                                 low_inclusive=True),
        seed=table.integer("seed", SIM_DEFAULTS.seed, low=SEED_RANGE[0], high=SEED_RANGE[1]),
        telemetry_rate_hz=table.number("telemetry_rate_hz", "Hz", SIM_DEFAULTS.telemetry_rate_hz,
                                       low=TELEMETRY_RATE_HZ_RANGE[0], high=TELEMETRY_RATE_HZ_RANGE[1],
                                       low_inclusive=True),
        battery_v=table.number("battery_v", "V", SIM_DEFAULTS.battery_v),
        swap_motors=table.boolean("swap_motors", False),
        invert_left_motor=table.boolean("invert_left_motor", False),
        invert_right_motor=table.boolean("invert_right_motor", False),
        invert_left_encoder=table.boolean("invert_left_encoder", False),
        invert_right_encoder=table.boolean("invert_right_encoder", False),
        dead_left=table.boolean("dead_left", False),
        dead_right=table.boolean("dead_right", False),
        unit_scale=table.number("unit_scale", "factor the firmware misreads commands by", SIM_DEFAULTS.unit_scale),
        wheel_loop=table.text("wheel_loop", SIM_DEFAULTS.wheel_loop, choices=WHEEL_LOOPS),
        **{key: table.number(key, unit, getattr(SIM_DEFAULTS, key)) for key, unit in _MOTOR_KEYS},
    )
    table.finish()
    return sim


WHEEL_LOOPS = ("closed", "open", "pi")
_MOTOR_KEYS = (
    ("motor_resistance_ohm", "ohm, armature"), ("motor_torque_constant_nm_per_a", "N m/A at the wheel"),
    ("wheel_inertia_kgm2", "kg m^2 at the wheel"), ("viscous_friction_nms", "N m s"),
    ("coulomb_friction_nm", "N m"), ("pi_kp", "duty per rad/s"), ("pi_ki", "duty per rad"),
    ("ff_ks", "duty"), ("ff_kv", "duty per rad/s"),
)


def link_url_problem(url: str) -> str | None:
    """What is wrong with a link URL before anything is opened (None: it looks usable), so that a malformed URL is
    bad input (exit 2), not a lost link. Host and port are checked for the network schemes; the rest is pyserial's."""
    allowed = '"sim", a device path such as /dev/ttyUSB0, or a pyserial URL such as socket://host:port'
    if not url.strip() or any(c.isspace() or not c.isprintable() for c in url):
        return f"{allowed}, without spaces or control characters"
    scheme, sep, _ = url.partition("://")
    if not sep:
        return None if url == "sim" or url.startswith("/") else f"{allowed} (a device path starts with /)"
    if scheme.lower() in NETWORK_SCHEMES:
        parts = urllib.parse.urlsplit(url)
        try:
            port = parts.port
        except ValueError:
            return f"{scheme}://host:port with a port from 1 to 65535"
        if not parts.hostname or port is None or not 1 <= port <= 65535:
            return f"{scheme}://host:port with a host and a port from 1 to 65535"
    return None


def _link(table: TomlTable, sim: SimConfig, top_command: float) -> LinkConfig:
    url = table.text("url", LINK_DEFAULTS.url)
    problem = link_url_problem(url)
    if problem is not None:
        raise table.error("url", url, problem)
    baud = table.integer("baud", LINK_DEFAULTS.baud, low=BAUD_RANGE[0], high=BAUD_RANGE[1])
    rate_hz = table.number("rate_hz", "Hz", LINK_DEFAULTS.rate_hz, low=RATE_HZ_RANGE[0], high=RATE_HZ_RANGE[1],
                           low_inclusive=True)
    protocol = table.text("protocol", LINK_DEFAULTS.protocol, choices=PROTOCOLS)
    watchdog = table.number("watchdog_s", "s", LINK_DEFAULTS.watchdog_s)
    if watchdog < 2.0 / rate_hz:
        raise table.error("watchdog_s", watchdog, f"at least two command periods (2 / rate_hz = {2.0 / rate_hz:g} s)"
                                                  ", or the robot's watchdog trips between commands")
    timeout = table.number("telemetry_timeout_s", "s", LINK_DEFAULTS.telemetry_timeout_s)
    if timeout < 2.0 / sim.telemetry_rate_hz:
        raise table.error("telemetry_timeout_s", timeout,
                          f"at least two telemetry periods (2 / sim.telemetry_rate_hz = {2.0 / sim.telemetry_rate_hz:g}"
                          " s), or the link counts as lost between telemetry lines")
    template = None
    if protocol == "template":
        template = _template(_table(table.file, "link.template", table.raw("template", MISSING,
                                                                            'a [link.template] section')),
                             top_command)
    elif "template" in table.table:
        raise table.error("template", table.table["template"], 'only with protocol = "template"')
    table.finish(subtables=("template",))
    return LinkConfig(url=url, baud=baud, rate_hz=rate_hz, protocol=protocol, watchdog_s=watchdog,
                      telemetry_timeout_s=timeout, template=template)


def _template(table: TomlTable, top_command: float) -> TemplateConfig:
    template = TemplateConfig(
        command_format=_line_format(table, "command_format", COMMAND_FIELDS, {"left", "right"}, top_command),
        stop_format=_line_format(table, "stop_format", STOP_FIELDS, set(), top_command),
        telemetry_regex=_telemetry_regex(table),
    )
    table.finish()
    return template


def _line_format(table: TomlTable, key: str, allowed_fields: frozenset[str], required: set[str],
                 top_command: float) -> str:
    """A str.format line of plain number fields from the allowed ones, one line that fits the robot's line length
    whatever the values (checked with the fastest command either way and the last sequence number)."""
    names = " ".join("{" + name + "}" for name in sorted(allowed_fields))
    fmt = table.text(key)
    try:
        parsed = [(name, spec, conversion) for _, name, spec, conversion in string.Formatter().parse(fmt)
                  if name is not None]
    except ValueError as error:
        raise table.error(key, fmt, f"a Python format string ({error}); fields: {names}") from None
    for name, spec, conversion in parsed:
        if name not in allowed_fields:
            raise table.error(key, fmt, f"unknown field {{{name}}}; allowed fields: {names}")
        number_types = "d" if name == "seq" else "eEfFgG%"
        plain = PLAIN_SPEC.fullmatch(spec or "")
        if conversion is not None or plain is None or (plain["type"] and plain["type"] not in number_types):
            raise table.error(key, fmt, f"{{{name}{'!' + conversion if conversion else ''}:{spec}}} is not a plain "
                                        f"number field; write it as {{{name}}} or with a number format such as "
                                        f"{{{name}:{'05d' if name == 'seq' else '+.3f'}}}")
        if int(plain["width"] or 0) >= MAX_TEMPLATE_LINE or int(plain["precision"] or 0) >= MAX_TEMPLATE_LINE:
            raise table.error(key, fmt, f"{{{name}:{spec}}} renders wider than the robot's line "
                                        f"({MAX_TEMPLATE_LINE - 1} bytes)")
    missing = sorted(required - {name for name, _, _ in parsed})
    if missing:
        raise table.error(key, fmt, f"must contain {{{missing[0]}}}; allowed fields: {names}")
    try:
        rendered = fmt.format(left=-12.5, right=3.25, seq=42)
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as error:
        raise table.error(key, fmt, f"cannot render with left = -12.5, right = 3.25, seq = 42 ({error})") from None
    if "\n" in rendered or "\r" in rendered:
        raise table.error(key, fmt, "one line without line breaks (the newline is added when sending)")
    for extreme in (-top_command, top_command, -1.0 / 3.0):
        longest = fmt.format(left=extreme, right=extreme, seq=SEQ_MODULUS - 1)
        if len(longest.encode("utf-8")) >= MAX_TEMPLATE_LINE:
            raise table.error(key, fmt, f"renders {len(longest.encode('utf-8'))} bytes with left = right = "
                                        f"{extreme:g} (the fastest command), more than the robot's line of "
                                        f"{MAX_TEMPLATE_LINE - 1} bytes")
    return fmt


def _telemetry_regex(table: TomlTable) -> str:
    allowed = ", ".join(sorted(TELEMETRY_GROUPS))
    pattern = table.text("telemetry_regex")
    try:
        groups = set(re.compile(pattern).groupindex)
    except re.error as error:
        raise table.error("telemetry_regex", pattern, f"a Python regular expression ({error})") from None
    unknown = sorted(groups - TELEMETRY_GROUPS)
    if unknown:
        raise table.error("telemetry_regex", pattern, f"unknown group (?P<{unknown[0]}>); allowed groups: {allowed}")
    missing = sorted({"left", "right"} - groups)
    if missing:
        raise table.error("telemetry_regex", pattern, f"needs the named group (?P<{missing[0]}>...); "
                                                      f"allowed groups: {allowed}")
    slow = _slow_line(pattern)
    if slow is not None:
        raise table.error("telemetry_regex", pattern, f"takes more than {REGEX_LINE_BUDGET_S:g} s on {slow} "
                                                      "(catastrophic backtracking: a quantifier inside a repeated "
                                                      "group); match each field once, e.g. (?P<left>[-+]?\\d+\\.\\d+)")
    return pattern


# Tries the regex on each line it is given (JSON on stdin) in a process of its own, printing the line's index before
# each try: Python's re cannot be interrupted, so a runaway match is ended by killing the process.
_REGEX_TRIAL = """
import json, re, sys, time
pattern, lines, budget = json.load(sys.stdin)
regex = re.compile(pattern)
for index, line in enumerate(lines):
    print(index, flush=True)
    start = time.perf_counter()
    regex.search(line)
    if time.perf_counter() - start > budget:
        break
"""


@functools.lru_cache(maxsize=64)
def _slow_line(pattern: str) -> str | None:
    """A description of the first adversarial line `pattern` takes too long on, or None when it copes with all.

    The lines are as long as a telemetry line may be (MAX_TEMPLATE_LINE - 1): long runs of digits, signs, points,
    spaces and of the pattern's own literal characters, each ended by a character that makes the match fail late,
    the shape that sends a backtracking matcher into exponential time.
    """
    length = MAX_TEMPLATE_LINE - 1
    alphabet = sorted(set("0123456789-+., :=_") | {c for c in pattern if c.isalnum()})
    units = alphabet + ["1.", "-1.0 ", "1 "] + [word for word in re.findall(r"[A-Za-z_]{2,}", pattern)]
    lines, names = [], []
    for unit in units:
        run = (unit * length)[: length - 1]
        for end in ("\x00", "!"):
            lines.append(run + end)
            names.append(f"a line of {len(run)} characters repeating {unit!r} then {end!r}")
    command = [sys.executable, "-I", "-S", "-c", _REGEX_TRIAL]
    try:
        done = subprocess.run(command, input=json.dumps([pattern, lines, REGEX_LINE_BUDGET_S]), capture_output=True,
                              text=True, timeout=REGEX_TOTAL_BUDGET_S, check=False)
        out = done.stdout
    except subprocess.TimeoutExpired as timeout:
        out = timeout.stdout.decode() if isinstance(timeout.stdout, bytes) else (timeout.stdout or "")
        tried = out.split()
        return names[int(tried[-1])] if tried else "the first line tried"
    tried = out.split()
    if len(tried) < len(lines):
        return names[int(tried[-1])] if tried else "the first line tried"
    return None
