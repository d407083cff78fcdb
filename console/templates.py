"""Firmware templates: speak a robot's own line protocol, described in the profile's [link.template].

The console side (`TemplateCodec`) renders commands with the profile's str.format lines and reads telemetry with its
regular expression; the simulated robot (`TemplateRobotCodec`) does the reverse, so a template profile can be
rehearsed end to end. Both have the surface of `console.protocol.Codec` (encode, feed, the error counters), so the
control loop holds either. Template lines have no CRC: `crc_errors` stays 0.

Choices (see PROTOCOL.md, "Firmware templates"):
- A heartbeat renders nothing: re-sending the last command would keep a robot moving that the console meant to hold
  (the loop sends heartbeats only while disarmed or stopped); the firmware's own watchdog then sees silence.
- A stop carries no category on a template line; the simulated robot reads every stop line as category 0 (drive
  power removed at once), the most conservative reading of a firmware's "halt".
- 0 V battery reads as None (not measured), as in the diffdeck protocol.
- The simulated robot reads command lines back with a regular expression derived from the format string (one number
  per field). For its telemetry it needs the inverse of telemetry_regex, which does not exist in general: a regex of
  literal text and named groups (the usual line protocol) is turned into a str.format line by
  `telemetry_format_from_regex`; for any other regex the caller gives the line as `telemetry_format`.
- A template seq echo outside 0..65535 is not one the console sent: it reads as None.
"""

from __future__ import annotations

import math
import re
import string
from collections.abc import Mapping
from typing import TYPE_CHECKING

from console.protocol import SEQ_MODULUS, Flags, Heartbeat, StopCommand, Telemetry, WheelCommand

if TYPE_CHECKING:
    from console.profile import TemplateConfig

MAX_TEMPLATE_LINE = 256          # bytes per line (either direction) before it counts as overlong and is dropped
TELEMETRY_FIELDS = ("left", "right", "seq", "battery_v", "watchdog", "fault")
TEMPLATE_STOP_CATEGORY = 0
# sample values for the read-back checks (the same ones the profile loader renders with)
SAMPLE_COMMAND = {"left": -12.5, "right": 3.25, "seq": 42}
SAMPLE_TELEMETRY = {"left": -12.5, "right": 3.25, "seq": 42, "battery_v": 24.5, "watchdog": 1, "fault": 0}
# what str.format can render for one number: padding, sign, digit grouping, exponent, percent
_NUMBER = r" *[-+]? *(?:\d[\d,_]*(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?%?"


class _LineReader:
    """Text lines from bytes, bounded: a line longer than MAX_TEMPLATE_LINE is dropped (and counted) whole."""

    crc_errors = 0              # template lines carry no checksum
    noise_bytes = 0             # a line that is no template is counted as an unknown frame instead

    def __init__(self) -> None:
        self._pending = b""
        self._skipping = False      # inside a line already counted as overlong
        self.overlong_lines = 0
        self.unknown_frames = 0     # lines that match no template
        self.malformed = 0          # lines that match, but a value is not a finite number

    @property
    def pending(self) -> int:
        """Bytes held back waiting for the end of their line (never more than MAX_TEMPLATE_LINE - 1)."""
        return len(self._pending)

    def _lines(self, data: bytes) -> list[str]:
        if type(data) is not bytes:
            data = bytes(data)
        parts = (self._pending + data).split(b"\n")
        self._pending = parts.pop()
        lines = []
        for raw in parts:
            if self._skipping:
                self._skipping = False
            elif len(raw) >= MAX_TEMPLATE_LINE:
                self.overlong_lines += 1
            elif raw.strip():
                lines.append(raw.rstrip(b"\r").decode("utf-8", "replace"))
        if len(self._pending) >= MAX_TEMPLATE_LINE:
            if not self._skipping:
                self.overlong_lines += 1
            self._skipping = True
            self._pending = b""
        return lines


def _value(field: str, text: str) -> float | int:
    """One number as str.format rendered it; ValueError if it is not a finite number."""
    clean = text.replace(" ", "").replace(",", "").replace("_", "")
    number = float(clean.rstrip("%")) / (100.0 if clean.endswith("%") else 1.0)
    if not math.isfinite(number):
        raise ValueError(f"{field} = {text!r}: not a finite number")
    if field in ("seq", "watchdog", "fault"):
        if number != int(number):
            raise ValueError(f"{field} = {text!r}: not an integer")
        return int(number)
    return number


class _FormatReader:
    """Reads back the numbers a str.format line rendered, with a regular expression derived from the format."""

    def __init__(self, fmt: str) -> None:
        self.format = fmt
        parts, seen = [], set()
        for literal, name, _spec, _conversion in string.Formatter().parse(fmt):
            parts.append(re.escape(literal))
            if name is not None:
                if not name.isidentifier():
                    raise ValueError(f"field {{{name}}}: only plain field names such as {{left:+.3f}} can be read back")
                parts.append(f"(?P={name})" if name in seen else f"(?P<{name}>{_NUMBER})")
                seen.add(name)
        self.regex = re.compile("".join(parts))

    def read(self, line: str) -> dict[str, float | int] | None:
        """The values in `line`, None if it is not this format; ValueError if a value is not a finite number."""
        m = self.regex.fullmatch(line)
        return None if m is None else {k: _value(k, v) for k, v in m.groupdict().items()}


_METACHARACTERS = frozenset(".^$*+?{}[]|()\\")
_WHITESPACE = {"s": " ", "t": "\t", "r": "\r"}
_QUANTIFIER = re.compile(r"[*+?]|\{(\d+)(?:,\d*)?\}")
_RATE_FORMATS = tuple(f":{sign}.{digits}f" for digits in (4, 3, 2, 1, 0) for sign in ("", "+"))
# per telemetry field: the renderings tried (most precise first) and the values each must render acceptably
_FIELD_FORMATS: dict[str, tuple[tuple[str, ...], tuple[float, ...]]] = {
    "left": (_RATE_FORMATS, (-12.5, 3.25, 0.0)),
    "right": (_RATE_FORMATS, (-12.5, 3.25, 0.0)),
    "battery_v": (_RATE_FORMATS, (24.5, 12.0, 0.0)),
    "seq": ((":d", ":05d"), (0, 42, 65535)),
    "watchdog": ((":d",), (0, 1)),
    "fault": ((":d",), (0, 1)),
}


def _group_end(regex: str, start: int) -> int:
    """Index of the ")" closing the group that opens at `start` (escapes and [...] classes skipped)."""
    depth, i, in_class = 0, start, False
    while i < len(regex):
        c = regex[i]
        if c == "\\":
            i += 1
        elif in_class:
            in_class = c != "]"
        elif c == "[":
            in_class = True
            i += 2 if regex.startswith("^]", i + 1) else 1 if regex.startswith("]", i + 1) else 0  # leading "]"
        elif c == "(":
            depth += 1
        elif c == ")":
            depth -= 1
            if depth == 0:
                return i
        i += 1
    raise ValueError("unbalanced parentheses")


def _field_format(name: str, inner: str) -> str:
    """"{name:spec}" with the first spec whose rendering the group's own pattern accepts for every sample value."""
    if name not in _FIELD_FORMATS:
        raise ValueError(f"group (?P<{name}>...) is not a telemetry field")
    try:
        pattern = re.compile(inner)
    except re.error as e:
        raise ValueError(f"group (?P<{name}>{inner}) on its own: {e}") from None
    specs, samples = _FIELD_FORMATS[name]
    for spec in specs:
        if all(pattern.fullmatch(format(value, spec[1:])) for value in samples):
            return "{" + name + spec + "}"
    raise ValueError(f"group (?P<{name}>{inner}) accepts none of the plain number renderings tried")


def telemetry_format_from_regex(regex: str) -> str:
    """The str.format line that renders what `regex` reads, for a regex of literal text and named groups.

    Outside the groups only literal characters (escaped or not), \\s \\t \\r, the quantifiers + * ? {n} on a single
    character, and ^ / $ at the ends are understood; anything else raises ValueError saying what.
    """
    out: list[str] = []
    i = 0
    while i < len(regex):
        c = regex[i]
        if regex.startswith("(?P<", i):
            close = _group_end(regex, i)
            name, _, inner = regex[i + 4:close].partition(">")
            out.append(_field_format(name, inner))
            i = close + 1
            if _QUANTIFIER.match(regex, i):
                raise ValueError(f"group (?P<{name}>...) with a quantifier after it")
            continue
        if (c == "^" and i == 0) or (c == "$" and i == len(regex) - 1):
            i += 1
            continue
        if c == "\\" and regex[i + 1:i + 2] in _WHITESPACE:
            atom = _WHITESPACE[regex[i + 1]]
        elif c == "\\" and regex[i + 1:i + 2] in _METACHARACTERS | set(" -:,;/=#@!%&'\"<>~`"):
            atom = regex[i + 1]
        elif c in _METACHARACTERS:
            raise ValueError(f"{regex[i:i + 12]!r}... (position {i}) is more than literal text and named groups")
        else:
            atom = c
        i += 2 if c == "\\" else 1
        m = _QUANTIFIER.match(regex, i)
        count = 1 if m is None or m[0] == "+" else 0 if m[0] in "*?" else int(m[1])
        i = i if m is None else m.end()
        out.append((atom * count).replace("{", "{{").replace("}", "}}"))
    return "".join(out)


def _read_telemetry(values: Mapping[str, str | None]) -> Telemetry:
    """Telemetry from the regex groups that matched (missing ones None); ValueError on a bad number."""
    read = {k: _value(k, v) for k, v in values.items() if v is not None}
    flags = (Flags.WATCHDOG if read.get("watchdog") else 0) | (Flags.FAULT if read.get("fault") else 0)
    seq = read.get("seq")
    echo = seq if isinstance(seq, int) and 0 <= seq < SEQ_MODULUS else None
    return Telemetry(seq=None, echo_seq=echo, left=read.get("left"), right=read.get("right"),
                     left_ticks=None, right_ticks=None, battery_v=read.get("battery_v") or None, flags=int(flags))


def _render(fmt: str, values: Mapping[str, float | int]) -> bytes:
    return (fmt.format(**values) + "\n").encode("utf-8")


class TemplateCodec(_LineReader):
    """Console side: WheelCommand / StopCommand -> the firmware's lines; its telemetry lines -> Telemetry."""

    def __init__(self, template: TemplateConfig) -> None:
        super().__init__()
        self._template = template
        self._telemetry = re.compile(template.telemetry_regex)

    def encode(self, frame: WheelCommand | StopCommand | Heartbeat) -> bytes:
        """The line to send (b"" for a heartbeat); ValueError for a non-finite wheel rate."""
        if type(frame) is WheelCommand:
            if not (math.isfinite(frame.left) and math.isfinite(frame.right)):
                raise ValueError(f"wheel rates {frame.left!r}, {frame.right!r}: finite numbers")
            return _render(self._template.command_format, {"left": frame.left, "right": frame.right, "seq": frame.seq})
        if type(frame) is StopCommand:
            return _render(self._template.stop_format, {"seq": frame.seq})
        if type(frame) is Heartbeat:
            return b""
        raise TypeError(f"not a console frame: {frame!r}")

    def feed(self, data: bytes) -> list[Telemetry]:
        """Every telemetry line matched by telemetry_regex (searched, so anchor it with ^ and $ to be strict)."""
        out = []
        for line in self._lines(data):
            m = self._telemetry.search(line)
            if m is None:
                self.unknown_frames += 1
                continue
            try:
                out.append(_read_telemetry(m.groupdict()))
            except ValueError:
                self.malformed += 1
        return out


def check_robot_side(template: TemplateConfig, telemetry_format: str | None = None) -> str:
    """The telemetry line the simulated robot renders; ValueError naming the key and what is wrong if the simulated
    robot cannot speak this template.

    It must read back the command and stop lines the console renders (and tell them apart), and its telemetry line
    (`telemetry_format`, or derived from telemetry_regex when None) must be read back by telemetry_regex to the same
    values. Checked by a fixpoint: render the sample values, read them back, render again: the lines must be equal.
    """
    readers = {}
    for key in ("command_format", "stop_format"):
        try:
            readers[key] = _FormatReader(getattr(template, key))
        except ValueError as e:
            raise ValueError(f"{key} = {getattr(template, key)!r}: {e}") from None
    command, stop = readers["command_format"], readers["stop_format"]
    for key, reader, sample in (("command_format", command, SAMPLE_COMMAND), ("stop_format", stop, {"seq": 42})):
        line = reader.format.format(**sample)
        try:
            back = reader.read(line)
            same = back is not None and reader.format.format(**back) == line
        except (ValueError, KeyError):
            same = False
        if not same:
            raise ValueError(f"{key} = {reader.format!r}: the simulated robot cannot read back its own line {line!r} "
                             "(use plain number fields such as {left:+.3f} with text between them)")
    if stop.regex.fullmatch(template.command_format.format(**SAMPLE_COMMAND)) is not None:
        raise ValueError(f"stop_format = {template.stop_format!r}: also matches a command line; make them differ")
    if telemetry_format is None:
        try:
            telemetry_format = telemetry_format_from_regex(template.telemetry_regex)
        except ValueError as e:
            raise ValueError(f"telemetry_regex = {template.telemetry_regex!r}: the simulated robot cannot derive its "
                             f"telemetry line from it ({e}); give it as telemetry_format") from None
    names = {name for _, name, _, _ in string.Formatter().parse(telemetry_format) if name is not None}
    if not names <= set(TELEMETRY_FIELDS):
        raise ValueError(f"telemetry_format = {telemetry_format!r}: fields other than {', '.join(TELEMETRY_FIELDS)}")
    groups = set(re.compile(template.telemetry_regex).groupindex)
    if names != groups:
        raise ValueError(f"telemetry_format = {telemetry_format!r}: must render exactly the telemetry_regex groups "
                         f"({', '.join(sorted(groups))})")
    try:
        line = telemetry_format.format(**SAMPLE_TELEMETRY)
        m = re.search(template.telemetry_regex, line)
        back = None if m is None else {k: _value(k, v) for k, v in m.groupdict().items() if v is not None}
        same = back is not None and back.keys() == names and telemetry_format.format(**back) == line
    except (ValueError, KeyError, TypeError):
        same = False
    if not same:
        raise ValueError(f"telemetry_format = {telemetry_format!r}: its line {line!r} is not read back by "
                         f"telemetry_regex = {template.telemetry_regex!r}")
    return telemetry_format


class TemplateRobotCodec(_LineReader):
    """Robot side (the simulated robot): the console's template lines -> WheelCommand / StopCommand; Telemetry ->
    a line rendered with `telemetry_format` (None: derived from telemetry_regex). Construction checks the template
    (check_robot_side)."""

    def __init__(self, template: TemplateConfig, telemetry_format: str | None = None) -> None:
        self.telemetry_format = check_robot_side(template, telemetry_format)
        super().__init__()
        self._command = _FormatReader(template.command_format)
        self._stop = _FormatReader(template.stop_format)

    def feed(self, data: bytes) -> list[WheelCommand | StopCommand]:
        """Commands and stops in the bytes; a template without {seq} gives seq 0."""
        out: list[WheelCommand | StopCommand] = []
        for line in self._lines(data):
            try:
                stop = self._stop.read(line)
                command = None if stop is not None else self._command.read(line)
            except ValueError:
                self.malformed += 1
                continue
            if stop is not None:
                out.append(StopCommand(int(stop.get("seq", 0)), TEMPLATE_STOP_CATEGORY))
            elif command is not None:
                out.append(WheelCommand(int(command.get("seq", 0)), float(command["left"]), float(command["right"])))
            else:
                self.unknown_frames += 1
        return out

    def encode(self, telemetry: Telemetry) -> bytes:
        """The telemetry line; the template's seq field carries `echo_seq`, missing numbers render as 0."""
        flags = telemetry.flags
        return _render(self.telemetry_format, {
            "left": telemetry.left or 0.0, "right": telemetry.right or 0.0, "seq": telemetry.echo_seq or 0,
            "battery_v": telemetry.battery_v or 0.0,
            "watchdog": int(bool(flags & Flags.WATCHDOG)), "fault": int(bool(flags & Flags.FAULT)),
        })
