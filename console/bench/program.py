"""Bench test programs: segments of hold / step / ramp / chirp / square on one axis, loaded from TOML and validated.

A program is written without knowing the robot (amplitudes may be a percentage of the envelope); `bind` resolves it
against a profile, checks every level against the envelope (one line naming file, key, value, what is allowed), and
samples it at the loop period into arrays, so a run only indexes precomputed requests.
The built-in programs are TOML text parsed by the same loader, so they obey the same rules as user programs.
"""

from __future__ import annotations

import enum
import math
import tomllib
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np

from console.errors import InputError
from console.files import read_input
from console.tomltable import MISSING, TomlTable
from shaping.envelope import Envelope


class ProgramError(InputError):
    """A program that cannot run: file, key, value, what is allowed (exit code 2)."""


class Axis(enum.Enum):
    """What a segment drives: body speed (m/s), body turn rate (rad/s) or one wheel (rad/s, wheels-up)."""

    SPEED = "speed"
    TURN = "turn"
    LEFT = "left"
    RIGHT = "right"

    @property
    def is_wheel(self) -> bool:
        return self in (Axis.LEFT, Axis.RIGHT)

    @property
    def partner(self) -> Axis:
        """The other axis of the same pair (a segment may hold it at a constant with `with`)."""
        return {Axis.SPEED: Axis.TURN, Axis.TURN: Axis.SPEED, Axis.LEFT: Axis.RIGHT, Axis.RIGHT: Axis.LEFT}[self]


class Kind(enum.Enum):
    HOLD = "hold"
    STEP = "step"
    RAMP = "ramp"
    CHIRP = "chirp"
    SQUARE = "square"
    RECORD = "record"
    """A recording with no program (`play`, `drive`) read back as one stretch: not a kind a program may use."""


@dataclass(frozen=True, slots=True)
class Level:
    """An amplitude as written: absolute (axis unit) or a percentage of the envelope on that axis."""

    value: float
    percent: bool = False

    def resolve(self, axis: Axis, envelope: Envelope) -> float:
        if not self.percent:
            return self.value
        if axis is Axis.SPEED:
            top = envelope.top_speed_mps if self.value >= 0.0 else envelope.top_reverse_speed_mps
        elif axis is Axis.TURN:
            top = envelope.top_turn_rate_radps
        else:
            top = envelope.limits.wheel_rate_radps
        return self.value / 100.0 * top


ZERO = Level(0.0)
LEVEL_FIELDS = ("start", "end", "amplitude", "partner")
"""The fields of a Segment that are levels as written (resolved into the BoundSegment's fields of the same name)."""
CHIRP_METHODS = ("linear", "logarithmic")


@dataclass(frozen=True, slots=True)
class Segment:
    """One piece of a program. `start`/`end` are hold value, step from/to, ramp from/to, or the offset of a wave."""

    index: int
    name: str
    kind: Kind
    axis: Axis
    duration_s: float
    start: Level = ZERO
    end: Level = ZERO
    amplitude: Level = ZERO
    lead_s: float = 0.0           # step: time at `start` before the step
    f0_hz: float = 0.0            # chirp start frequency
    f1_hz: float = 0.0            # chirp end frequency
    method: str = "linear"        # chirp sweep
    period_s: float = 0.0         # square wave period
    partner: Level = ZERO         # constant on the partner axis (`with`)
    bypass: bool = False          # deliberately around the shaper (raw wheel requests)


@dataclass(frozen=True, slots=True)
class Program:
    name: str
    description: str
    source: str                    # the file path, or "built-in"
    segments: tuple[Segment, ...]

    @property
    def duration_s(self) -> float:
        return sum(segment.duration_s for segment in self.segments)

    @property
    def bypasses(self) -> bool:
        return any(segment.bypass for segment in self.segments)


# --- loading -----------------------------------------------------------------------------------------------------

SEGMENT_KEYS: dict[Kind, frozenset[str]] = {
    Kind.HOLD: frozenset({"value"}),
    Kind.STEP: frozenset({"from", "to", "lead_s"}),
    Kind.RAMP: frozenset({"from", "to"}),
    Kind.CHIRP: frozenset({"offset", "amplitude", "f0_hz", "f1_hz", "method"}),
    Kind.SQUARE: frozenset({"offset", "amplitude", "period_s"}),
}
COMMON_KEYS = frozenset({"name", "kind", "axis", "duration_s", "with", "bypass_shaper"})
PROGRAM_KEYS = frozenset({"name", "description"})
MAX_DURATION_S = 4 * 3600.0
MAX_PROGRAM_BYTES = 1 << 20  # a program is a few kB


LEVEL_ALLOWED = 'a number in the axis unit, or a percentage of the envelope as a string such as "40%"'


def _level(table: TomlTable, key: str, default: Level | None = None) -> Level:
    """A level: a number in the axis unit, or "NN%" of the envelope (at most 100 %)."""
    value = table.raw(key, MISSING if default is None else default, LEVEL_ALLOWED)
    if isinstance(value, Level):
        return value
    if isinstance(value, str):
        text = value.strip()
        try:
            number = float(text[:-1]) if text.endswith("%") else math.nan
        except ValueError:
            number = math.nan
        if not math.isfinite(number) or abs(number) > 100.0:
            raise table.error(key, value, LEVEL_ALLOWED + " (at most 100 %)")
        return Level(number, percent=True)
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise table.error(key, value, LEVEL_ALLOWED)
    return Level(float(value))


def _table(where: str, name: str, table: object, known: frozenset[str], written_as: str) -> TomlTable:
    return TomlTable(where, name, table, error=ProgramError, known=known, written_as=written_as)


def _segment(where: str, index: int, data: object) -> Segment:
    table = _table(where, f"segment[{index}]", data, COMMON_KEYS | frozenset().union(*SEGMENT_KEYS.values()),
                   "a [[segment]] table")
    kind = Kind(table.text("kind", choices=tuple(k.value for k in SEGMENT_KEYS)))
    axis = Axis(table.text("axis", Axis.SPEED.value, choices=tuple(a.value for a in Axis)))
    duration = table.number("duration_s", high=MAX_DURATION_S)
    fields: dict[str, Any] = {}
    if kind is Kind.HOLD:
        fields["start"] = fields["end"] = _level(table, "value", ZERO)
    elif kind in (Kind.STEP, Kind.RAMP):
        fields["start"], fields["end"] = _level(table, "from", ZERO), _level(table, "to", ZERO)
        if kind is Kind.STEP:
            fields["lead_s"] = table.number("lead_s", default=0.0, high=duration, low_inclusive=True)
            if fields["lead_s"] >= duration:
                raise table.error("lead_s", fields["lead_s"], f"less than duration_s = {duration:g}")
    else:
        fields["start"] = fields["end"] = _level(table, "offset", ZERO)
        fields["amplitude"] = _level(table, "amplitude")
        if kind is Kind.CHIRP:
            fields["f0_hz"] = table.number("f0_hz", high=1000.0)
            fields["f1_hz"] = table.number("f1_hz", high=1000.0)
            fields["method"] = table.text("method", "linear", choices=CHIRP_METHODS)
        else:
            fields["period_s"] = table.number("period_s", high=duration)
    partner_key = axis.partner.value
    partner = _table(where, f"segment[{index}].with", table.raw("with", {}, f"a table {{ {partner_key} = ... }}"),
                     frozenset({partner_key}), f"a table with only the key {partner_key!r} (the constant on the "
                     "other axis)")
    fields["partner"] = _level(partner, partner_key, ZERO)
    partner.finish()
    name = table.text("name", f"{index} {kind.value} {axis.value}", empty=True)
    bypass = table.boolean("bypass_shaper", False)
    table.finish()                    # a key of another kind (or a typo) is an error, with the closest name
    return Segment(index=index, name=name, kind=kind, axis=axis, duration_s=duration, bypass=bypass, **fields)


def parse_program(data: dict[str, Any], where: str, source: str) -> Program:
    """Validate a parsed TOML document into a Program (raises ProgramError)."""
    for key in data:
        if key not in ("program", "segment"):
            raise ProgramError(where, key, data[key], "only the tables [program] and [[segment]]")
    header = _table(where, "program", data.get("program", {}), PROGRAM_KEYS, "a [program] table")
    segments_data = data.get("segment")
    if not isinstance(segments_data, list) or not segments_data:
        raise ProgramError(where, "segment", segments_data if segments_data is not None else "(missing)",
                           "one or more [[segment]] tables")
    segments = tuple(_segment(where, index, table) for index, table in enumerate(segments_data))
    total = sum(segment.duration_s for segment in segments)
    if total > MAX_DURATION_S:
        raise ProgramError(where, "segment[*].duration_s", f"{total:g} s in all", f"at most {MAX_DURATION_S:g} s")
    name = header.text("name", Path(where).stem)
    description = header.text("description", "", empty=True)
    header.finish()
    return Program(name=name, description=description, source=source, segments=segments)


def load_program(path: str | Path) -> Program:
    """Read a TOML program file (raises ProgramError: unreadable, not TOML, or invalid)."""
    path = Path(path)
    try:
        text = read_input(path, "a bench program (TOML)", max_bytes=MAX_PROGRAM_BYTES).decode("utf-8")
    except UnicodeDecodeError as error:
        raise ProgramError(str(path), "file", f"byte {error.start}", "a UTF-8 TOML file") from None
    except InputError as error:
        raise ProgramError(error.where, error.key, error.value, error.allowed) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ProgramError(str(path), "syntax", " ".join(str(error).split()), "valid TOML") from None
    except RecursionError:
        raise ProgramError(str(path), "syntax", "", "arrays or tables nested too deeply for a program") from None
    return parse_program(data, str(path), str(path))


BUILTIN_TOML: dict[str, str] = {
    "step": """
[program]
description = "speed and turn-rate steps to half the envelope and back, through the shaper"
[[segment]]
kind = "step"
name = "speed up"
to = "50%"
lead_s = 0.5
duration_s = 4.0
[[segment]]
kind = "step"
name = "speed down"
from = "50%"
duration_s = 4.0
[[segment]]
kind = "step"
name = "turn up"
axis = "turn"
to = "50%"
lead_s = 0.5
duration_s = 4.0
[[segment]]
kind = "step"
name = "turn down"
axis = "turn"
from = "50%"
duration_s = 4.0
""",
    "ramp": """
[program]
description = "speed ramp to 80 % of the envelope and back over 4 s each, through the shaper"
[[segment]]
kind = "ramp"
name = "ramp up"
to = "80%"
duration_s = 4.0
[[segment]]
kind = "hold"
name = "top"
value = "80%"
duration_s = 1.0
[[segment]]
kind = "ramp"
name = "ramp down"
from = "80%"
to = 0.0
duration_s = 4.0
[[segment]]
kind = "hold"
name = "rest"
duration_s = 1.0
""",
    "chirp": """
[program]
description = "60 s linear sine sweep 0.2 -> 3 Hz on speed, 10 % to 50 % of the envelope, through the shaper"
[[segment]]
kind = "chirp"
name = "sweep"
offset = "30%"
amplitude = "20%"
f0_hz = 0.2
f1_hz = 3.0
duration_s = 60.0
[[segment]]
kind = "hold"
name = "rest"
duration_s = 1.0
""",
    "square": """
[program]
description = "square wave on speed between 0 and 40 % of the envelope, period 4 s, through the shaper"
[[segment]]
kind = "square"
name = "square"
offset = "20%"
amplitude = "20%"
period_s = 4.0
duration_s = 16.0
[[segment]]
kind = "hold"
name = "rest"
duration_s = 1.0
""",
    "spin": """
[program]
description = "spin on the spot: turn-rate steps to +50 % and -50 % of the envelope, through the shaper"
[[segment]]
kind = "step"
name = "spin left"
axis = "turn"
to = "50%"
lead_s = 0.5
duration_s = 4.0
[[segment]]
kind = "step"
name = "spin right"
axis = "turn"
from = "50%"
to = "-50%"
duration_s = 4.0
[[segment]]
kind = "step"
name = "rest"
axis = "turn"
from = "-50%"
duration_s = 3.0
""",
    "arc": """
[program]
description = "a left arc at 40 % speed and 20 % turn rate, through the shaper"
[[segment]]
kind = "hold"
name = "wait"
duration_s = 0.5
[[segment]]
kind = "hold"
name = "arc"
value = "40%"
with = { turn = "20%" }
duration_s = 6.0
[[segment]]
kind = "hold"
name = "rest"
duration_s = 3.0
""",
    "polarity": """
[program]
description = "each wheel pulsed slowly forwards then backwards in turn (wheels off the ground), through the shaper"
[[segment]]
kind = "hold"
name = "wait"
axis = "left"
duration_s = 1.0
[[segment]]
kind = "step"
name = "left forwards"
axis = "left"
to = "15%"
duration_s = 2.5
[[segment]]
kind = "hold"
name = "pause 1"
axis = "left"
duration_s = 1.5
[[segment]]
kind = "step"
name = "left backwards"
axis = "left"
to = "-15%"
duration_s = 2.5
[[segment]]
kind = "hold"
name = "pause 2"
axis = "left"
duration_s = 1.5
[[segment]]
kind = "step"
name = "right forwards"
axis = "right"
to = "15%"
duration_s = 2.5
[[segment]]
kind = "hold"
name = "pause 3"
axis = "right"
duration_s = 1.5
[[segment]]
kind = "step"
name = "right backwards"
axis = "right"
to = "-15%"
duration_s = 2.5
[[segment]]
kind = "hold"
name = "rest"
axis = "right"
duration_s = 1.5
""",
}

IDENTIFY_LEVELS_PCT = (25, 50, 75)
"""Duty steps of `identify`, in % of the wheel-rate limit: one from rest, two between moving levels (the linear
region, where static friction does not change), then back to rest."""
IDENTIFY_RAMP_PCT = 20
IDENTIFY_RAMP_S = 8.0       # slow against any wheel's time constant: the break-away is read as if static
IDENTIFY_HOLD_S = 1.5       # per level: 5 time constants of a wheel up to 0.3 s


def _identify_toml() -> str:
    """The `identify` program as TOML text (written out by a loop: 25 segments of the same few shapes)."""
    lines = ["[program]",
             'description = "open-loop identification, WHEELS OFF THE GROUND: per wheel and direction a slow '
             f'break-away ramp to {IDENTIFY_RAMP_PCT} %, then steps to '
             f'{", ".join(str(level) for level in IDENTIFY_LEVELS_PCT)} % of the wheel-rate limit and back to rest, '
             'around the shaper"',
             '[[segment]]', 'kind = "hold"', 'name = "rest at start"', 'axis = "left"', "duration_s = 1.0",
             "bypass_shaper = true"]

    def segment(kind: str, name: str, wheel: str, start: str, end: str, duration_s: float) -> None:
        lines.extend(["[[segment]]", f'kind = "{kind}"', f'name = "{name}"', f'axis = "{wheel}"', f'from = "{start}"',
                      f'to = "{end}"', f"duration_s = {duration_s}", "bypass_shaper = true"])

    for wheel in ("left", "right"):
        for sign, way in (("", "forwards"), ("-", "backwards")):
            ramp_top = f"{sign}{IDENTIFY_RAMP_PCT}%"
            segment("ramp", f"{wheel} break-away {way}", wheel, "0%", ramp_top, IDENTIFY_RAMP_S)
            segment("step", f"{wheel} ramp end {way}", wheel, ramp_top, "0%", 1.0)
            before = "0%"
            for level in IDENTIFY_LEVELS_PCT:
                segment("step", f"{wheel} {sign or '+'}{level} %", wheel, before, f"{sign}{level}%", IDENTIFY_HOLD_S)
                before = f"{sign}{level}%"
            segment("step", f"{wheel} rest {way}", wheel, before, "0%", IDENTIFY_HOLD_S)
    return "\n".join(lines) + "\n"


BUILTIN_TOML["identify"] = _identify_toml()
BUILTINS: dict[str, str] = {name: tomllib.loads(text)["program"]["description"] for name, text in BUILTIN_TOML.items()}


def builtin(name: str) -> Program:
    if name not in BUILTIN_TOML:
        raise ProgramError("program", "name", name, "a built-in (" + ", ".join(BUILTIN_TOML) + ") or a .toml file")
    data = tomllib.loads(BUILTIN_TOML[name])
    data["program"]["name"] = name
    return parse_program(data, f"built-in program {name!r}", "built-in")


def resolve_program(spec: str) -> Program:
    """A built-in name, or the path of a TOML program."""
    if spec in BUILTIN_TOML:
        return builtin(spec)
    if not spec.endswith(".toml") and not Path(spec).exists():
        return builtin(spec)   # raises with the list of built-ins
    return load_program(spec)


# --- binding to a profile and sampling ---------------------------------------------------------------------------

@dataclass(frozen=True, slots=True)
class BoundSegment:
    """A segment with its levels resolved to SI and its place on a time line: the program's while it runs, the
    recording's once read back (`shifted` by the program's start). The one segment type a report reads."""

    segment: Segment
    t_start_s: float
    t_end_s: float
    start: float
    end: float
    amplitude: float
    partner: float

    def wave(self, tau: np.ndarray) -> np.ndarray:
        """The segment's axis value at times tau (s since the segment start), vectorized."""
        from scipy import signal  # here, not at the top: the CLI imports every verb to build its help

        seg = self.segment
        if seg.kind is Kind.HOLD:
            return np.full_like(tau, self.start)
        if seg.kind is Kind.STEP:
            return np.where(tau < seg.lead_s, self.start, self.end)
        if seg.kind is Kind.RAMP:
            return self.start + (self.end - self.start) * np.clip(tau / seg.duration_s, 0.0, 1.0)
        if seg.kind is Kind.CHIRP:
            # phi = -90 deg: a sine sweep, so the wave starts at the offset without a jump
            return self.start + self.amplitude * signal.chirp(tau, seg.f0_hz, seg.duration_s, seg.f1_hz,
                                                              method=seg.method, phi=-90.0)
        return self.start + self.amplitude * signal.square(2.0 * np.pi * tau / seg.period_s)

    def shifted(self, offset_s: float) -> BoundSegment:
        """The same segment with its times moved by `offset_s` (program time to recording time)."""
        return replace(self, t_start_s=self.t_start_s + offset_s, t_end_s=self.t_end_s + offset_s)

    def to_json(self) -> dict[str, Any]:
        """Everything needed to rebuild this segment exactly (`from_json`): the segment as written, its levels as
        written (`levels`) and resolved (`start`, `end`, `amplitude`, `partner`), and its times."""
        seg = self.segment
        return {"index": seg.index, "name": seg.name, "kind": seg.kind.value, "axis": seg.axis.value,
                "bypass": seg.bypass, "duration_s": seg.duration_s, "t_start_s": self.t_start_s,
                "t_end_s": self.t_end_s, "start": self.start, "end": self.end, "amplitude": self.amplitude,
                "partner": self.partner, "lead_s": seg.lead_s, "period_s": seg.period_s, "f0_hz": seg.f0_hz,
                "f1_hz": seg.f1_hz, "method": seg.method,
                "levels": {name: asdict(getattr(seg, name)) for name in LEVEL_FIELDS}}

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> BoundSegment:
        """The segment `to_json` wrote (KeyError, TypeError or ValueError on anything else)."""
        levels = data["levels"]
        written = {name: Level(float(levels[name]["value"]), bool(levels[name]["percent"])) for name in LEVEL_FIELDS}
        segment = Segment(index=int(data["index"]), name=str(data["name"]), kind=Kind(data["kind"]),
                          axis=Axis(data["axis"]), duration_s=float(data["duration_s"]), lead_s=float(data["lead_s"]),
                          f0_hz=float(data["f0_hz"]), f1_hz=float(data["f1_hz"]), method=str(data["method"]),
                          period_s=float(data["period_s"]), bypass=bool(data["bypass"]), **written)
        return cls(segment, float(data["t_start_s"]), float(data["t_end_s"]), float(data["start"]),
                   float(data["end"]), float(data["amplitude"]), float(data["partner"]))

    @property
    def extremes(self) -> tuple[float, float]:
        """Lowest and highest value the axis takes in this segment."""
        if self.segment.kind in (Kind.CHIRP, Kind.SQUARE):
            return self.start - abs(self.amplitude), self.start + abs(self.amplitude)
        return min(self.start, self.end), max(self.start, self.end)


@dataclass(frozen=True, slots=True)
class Samples:
    """A program sampled at the loop period: one row per cycle k at t_s[k] = k * period."""

    t_s: np.ndarray
    segment: np.ndarray      # segment index per cycle
    first: np.ndarray        # v (m/s) for body requests, left wheel (rad/s) for wheel requests
    second: np.ndarray       # omega (rad/s), or right wheel (rad/s)
    wheels: np.ndarray       # bool: the row is a wheel request (bypass) rather than a body request


class BoundProgram:
    """A program resolved against one profile's envelope; every level checked before anything moves."""

    def __init__(self, program: Program, envelope: Envelope) -> None:
        self.program = program
        self.envelope = envelope
        where = program.source if program.source != "built-in" else f"built-in program {program.name!r}"
        segments: list[BoundSegment] = []
        t = 0.0
        for seg in program.segments:
            bound = BoundSegment(seg, t, t + seg.duration_s, seg.start.resolve(seg.axis, envelope),
                                 seg.end.resolve(seg.axis, envelope), seg.amplitude.resolve(seg.axis, envelope),
                                 seg.partner.resolve(seg.axis.partner, envelope))
            self._check(where, bound)
            segments.append(bound)
            t += seg.duration_s
        self.segments = tuple(segments)
        self.duration_s = t

    def _check(self, where: str, bound: BoundSegment) -> None:
        seg, env, limits = bound.segment, self.envelope, self.envelope.limits
        key = {Kind.HOLD: "value", Kind.STEP: "to", Kind.RAMP: "to"}.get(seg.kind, "amplitude")
        low, high = bound.extremes
        prefix = f"segment[{seg.index}]."

        def fail(name: str, value: object, allowed: str) -> ProgramError:
            return ProgramError(where, prefix + name, value, allowed + " (the profile's envelope)")

        if seg.axis.is_wheel:
            bound_rate = limits.wheel_rate_radps
            for name, value in ((key, max(abs(low), abs(high))), ("with", abs(bound.partner))):
                if value > bound_rate * (1 + 1e-9):
                    raise fail(name, value, f"|wheel rate| <= {bound_rate:g} rad/s")
            return
        speeds = (low, high) if seg.axis is Axis.SPEED else (bound.partner,)
        turns = (low, high) if seg.axis is Axis.TURN else (bound.partner,)
        speed_key = key if seg.axis is Axis.SPEED else "with"
        turn_key = key if seg.axis is Axis.TURN else "with"
        for v in speeds:
            if v > env.top_speed_mps * (1 + 1e-9) or -v > env.top_reverse_speed_mps * (1 + 1e-9):
                raise fail(speed_key, v, f"between {-env.top_reverse_speed_mps:g} and {env.top_speed_mps:g} m/s")
            for omega in turns:
                available = env.max_turn_rate_at(v)
                if abs(omega) > available * (1 + 1e-9):
                    raise fail(turn_key, omega, f"|turn rate| <= {available:g} rad/s at {v:g} m/s")

    def sample(self, period_s: float) -> Samples:
        """Requests for cycles k = 0 .. ceil(duration / period) - 1, vectorized per segment."""
        count = max(1, math.ceil(self.duration_s / period_s - 1e-9))
        t = np.arange(count) * period_s
        index = np.minimum(np.searchsorted([s.t_end_s for s in self.segments], t, side="right"),
                           len(self.segments) - 1)
        first = np.zeros(count)
        second = np.zeros(count)
        wheels = np.zeros(count, dtype=bool)
        geometry = self.envelope.geometry
        for i, bound in enumerate(self.segments):
            rows = index == i
            value = bound.wave(t[rows] - bound.t_start_s)
            partner = np.full_like(value, bound.partner)
            axis = bound.segment.axis
            v: np.ndarray
            omega: np.ndarray
            if axis is Axis.SPEED:
                v, omega = value, partner
            elif axis is Axis.TURN:
                v, omega = partner, value
            else:
                left, right = (value, partner) if axis is Axis.LEFT else (partner, value)
                v, omega = geometry.to_body(left, right)   # type: ignore[arg-type,assignment]  # arithmetic: arrays too
            if bound.segment.bypass:
                first[rows], second[rows] = geometry.to_wheels(v, omega)   # type: ignore[arg-type]  # arrays too
                wheels[rows] = True
            else:
                first[rows], second[rows] = v, omega
        return Samples(t_s=t, segment=index, first=first, second=second, wheels=wheels)
