"""Robot profiles: a TOML file read with tomllib, validated into frozen dataclasses.

Validation is strict because a profile drives real motors: a typo'd key that silently fell back to a default, or a
speed the wheels can never reach, would only show up as a surprise on the bench. Every problem is reported as one
line naming the file, the dotted key, the value and what is allowed (`ProfileError`, exit code 2).
"""

from __future__ import annotations

import math
import re
import string
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from console.errors import InputError
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
SECTIONS = ("robot", "geometry", "limits", "units", "link", "sim")


SIM_DEFAULTS = SimConfig()
LINK_DEFAULTS = LinkConfig()


class _Missing:
    def __repr__(self) -> str:
        return "(missing)"


MISSING: Any = _Missing()


class _Table:
    """One TOML table being read: typed getters that raise ProfileError, and a final check for unknown keys."""

    def __init__(self, file: str, name: str, table: object) -> None:
        if not isinstance(table, dict):
            raise ProfileError(file, name, table, "a table: write it as a [" + name + "] section")
        self.file, self.name, self.table = file, name, table
        self.seen: set[str] = set()

    def error(self, key: str, value: object, allowed: str) -> ProfileError:
        return ProfileError(self.file, f"{self.name}.{key}", value, allowed)

    def raw(self, key: str, default: object, allowed: str) -> object:
        self.seen.add(key)
        if key in self.table:
            return self.table[key]
        if default is MISSING:
            raise self.error(key, MISSING, "required; " + allowed)
        return default

    def number(self, key: str, unit: str, default: object = MISSING, *, low: float = 0.0, high: float = math.inf,
               low_inclusive: bool = False) -> float:
        """A finite int or float (never a bool) in (low, high] or [low, high]."""
        if high < math.inf:
            span = f"from {low:g} to {high:g}" if low_inclusive else f"> {low:g} and <= {high:g}"
        else:
            span = f">= {low:g}" if low_inclusive else f"> {low:g}"
        allowed = f"a number {span} ({unit})"
        value = self.raw(key, default, allowed)
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(key, value, allowed)
        number = float(value)
        if not math.isfinite(number) or number > high or number < low or (number == low and not low_inclusive):
            raise self.error(key, value, allowed)
        return number

    def optional(self, key: str, unit: str) -> float | None:
        """An optional positive number; None when left out."""
        if key not in self.table:
            self.seen.add(key)
            return None
        return self.number(key, unit + "; optional")

    def integer(self, key: str, default: object = MISSING, *, low: int = 1, high: int | None = None) -> int:
        allowed = f"a whole number from {low} to {high}" if high is not None else f"a whole number >= {low}"
        value = self.raw(key, default, allowed)
        if isinstance(value, bool) or not isinstance(value, int) or value < low or (high is not None and value > high):
            raise self.error(key, value, allowed)
        return value

    def boolean(self, key: str, default: bool) -> bool:
        value = self.raw(key, default, "true or false")
        if not isinstance(value, bool):
            raise self.error(key, value, "true or false")
        return value

    def text(self, key: str, default: object = MISSING, *, choices: tuple[str, ...] = ()) -> str:
        allowed = "one of " + ", ".join(f'"{c}"' for c in choices) if choices else "a non-empty string"
        value = self.raw(key, default, allowed)
        if not isinstance(value, str) or not value.strip() or (choices and value not in choices):
            raise self.error(key, value, allowed)
        return value

    def finish(self, *, subtables: tuple[str, ...] = ()) -> None:
        """Unknown keys are errors: a misspelt limit must never fall back to a default silently."""
        for key in self.table:
            if key not in self.seen and key not in subtables:
                known = ", ".join(sorted(self.seen | set(subtables)))
                raise self.error(key, self.table[key], f"unknown key; [{self.name}] takes {known}")


def load_profile(path: str | Path) -> Profile:
    """Read and validate a profile; raises ProfileError (one line) on anything that cannot be used."""
    path = Path(path)
    file = str(path)
    data = _parse(path)
    for section in data:
        if section not in SECTIONS:
            raise ProfileError(file, section, data[section], "unknown section; a profile has " + ", ".join(
                f"[{s}]" for s in SECTIONS))
    robot = _required_table(file, data, "robot")
    name = robot.text("name")
    robot.finish()
    geometry = _geometry(_required_table(file, data, "geometry"))
    limits = _limits(_required_table(file, data, "limits"), geometry)
    units = _units(_Table(file, "units", data.get("units", {})), limits)
    sim = _sim(_Table(file, "sim", data.get("sim", {})), limits)
    link = _link(_Table(file, "link", data.get("link", {})), sim)
    return Profile(path=path, name=name, geometry=geometry, limits=limits, units=units, link=link, sim=sim, data=data)


def _parse(path: Path) -> dict[str, Any]:
    file = str(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise ProfileError(file, "file", file, "no such file; give the path of a TOML profile") from None
    except UnicodeDecodeError as error:
        raise ProfileError(file, "file", f"byte {error.start}", "not UTF-8 text; a profile is a UTF-8 TOML file") \
            from None
    except OSError as error:
        raise ProfileError(file, "file", file, f"cannot be read ({error.strerror})") from None
    try:
        return tomllib.loads(text)
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


def _required_table(file: str, data: dict[str, Any], name: str) -> _Table:
    if name not in data:
        raise ProfileError(file, name, MISSING, f"required section [{name}]")
    return _Table(file, name, data[name])


def _geometry(table: _Table) -> Geometry:
    geometry = Geometry(wheel_radius_m=table.number("wheel_radius_m", "m"),
                        track_width_m=table.number("track_width_m", "m, between the wheel contact centres"))
    table.finish()
    return geometry


def _limits(table: _Table, geometry: Geometry) -> Limits:
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


def _units(table: _Table, limits: Limits) -> WheelUnits:
    names = tuple(unit.value for unit in WheelUnit)
    unit = WheelUnit(table.text("unit", WheelUnit.RADPS.value, choices=names))
    ticks = table.number("ticks_per_rev", "encoder ticks per motor revolution", 0.0 if unit is not WheelUnit.TICKS_PER_S
                         else MISSING, low_inclusive=unit is not WheelUnit.TICKS_PER_S)
    full_duty = table.number("full_duty_radps", "wheel rad/s at duty 1.0", 0.0 if unit is not WheelUnit.DUTY
                             else MISSING, low_inclusive=unit is not WheelUnit.DUTY)
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
    return units


def _sim(table: _Table, limits: Limits) -> SimConfig:
    low, high = SIM_SCALE_RANGE
    sim = SimConfig(
        motor_time_constant_s=table.number("motor_time_constant_s", "s", SIM_DEFAULTS.motor_time_constant_s, high=5.0),
        motor_dead_time_s=table.number("motor_dead_time_s", "s", SIM_DEFAULTS.motor_dead_time_s, high=1.0,
                                       low_inclusive=True),
        deadband_radps=table.number("deadband_radps", "rad/s", SIM_DEFAULTS.deadband_radps, low_inclusive=True),
        wheel_accel_radps2=table.number("wheel_accel_radps2", "rad/s^2", SIM_DEFAULTS.wheel_accel_radps2),
        max_wheel_rate_radps=table.number("max_wheel_rate_radps", "rad/s; default 1.2 x limits.wheel_rate_radps",
                                          DEFAULT_SIM_RATE_FACTOR * limits.wheel_rate_radps),
        encoder_ticks_per_rev=table.integer("encoder_ticks_per_rev", SIM_DEFAULTS.encoder_ticks_per_rev),
        wheel_radius_ratio=table.number("wheel_radius_ratio", "actual right / left radius",
                                        SIM_DEFAULTS.wheel_radius_ratio, low=low, high=high, low_inclusive=True),
        track_width_scale=table.number("track_width_scale", "actual / nominal track width",
                                       SIM_DEFAULTS.track_width_scale, low=low, high=high, low_inclusive=True),
        noise_radps=table.number("noise_radps", "rad/s, standard deviation", SIM_DEFAULTS.noise_radps,
                                 low_inclusive=True),
        seed=table.integer("seed", SIM_DEFAULTS.seed, low=0),
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
    )
    table.finish()
    return sim


def _link(table: _Table, sim: SimConfig) -> LinkConfig:
    url = table.text("url", LINK_DEFAULTS.url)
    baud = table.integer("baud", LINK_DEFAULTS.baud)
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
        template = _template(_Table(table.file, "link.template", table.raw("template", MISSING,
                                                                            'a [link.template] section')))
    elif "template" in table.table:
        raise table.error("template", table.table["template"], 'only with protocol = "template"')
    table.finish(subtables=("template",))
    return LinkConfig(url=url, baud=baud, rate_hz=rate_hz, protocol=protocol, watchdog_s=watchdog,
                      telemetry_timeout_s=timeout, template=template)


def _template(table: _Table) -> TemplateConfig:
    template = TemplateConfig(
        command_format=_line_format(table, "command_format", COMMAND_FIELDS, {"left", "right"}),
        stop_format=_line_format(table, "stop_format", STOP_FIELDS, set()),
        telemetry_regex=_telemetry_regex(table),
    )
    table.finish()
    return template


def _line_format(table: _Table, key: str, allowed_fields: frozenset[str], required: set[str]) -> str:
    """A str.format line using only the allowed fields, which renders with sample numbers to one line."""
    names = " ".join("{" + name + "}" for name in sorted(allowed_fields))
    fmt = table.text(key)
    try:
        used = {name for _, name, _, _ in string.Formatter().parse(fmt) if name is not None}
    except ValueError as error:
        raise table.error(key, fmt, f"a Python format string ({error}); fields: {names}") from None
    bases = {re.split(r"[.\[]", name, maxsplit=1)[0] for name in used}
    unknown = sorted(bases - allowed_fields)
    if unknown:
        raise table.error(key, fmt, f"unknown field {{{unknown[0]}}}; allowed fields: {names}")
    missing = sorted(required - bases)
    if missing:
        raise table.error(key, fmt, f"must contain {{{missing[0]}}}; allowed fields: {names}")
    try:
        rendered = fmt.format(left=-12.5, right=3.25, seq=42)
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as error:
        raise table.error(key, fmt, f"cannot render with left = -12.5, right = 3.25, seq = 42 ({error})") from None
    if "\n" in rendered or "\r" in rendered:
        raise table.error(key, fmt, "one line without line breaks (the newline is added when sending)")
    return fmt


def _telemetry_regex(table: _Table) -> str:
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
    return pattern
