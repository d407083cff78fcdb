"""The diffdeck wire protocol as a sans-I/O codec: frames in -> bytes out, bytes in -> frames out.

Written so that firmware on a small microcontroller can speak it without a heap and a person can read it on a plain
serial terminal; PROTOCOL.md at the project root is the specification for firmware authors. One frame per ASCII line:

    @<version> <type> <seq> <fields...>*<crc>\\n      e.g.  @1 W 42 +12.500 -3.250*AB0A

The codec knows no ports or clocks: `encode` turns a frame into one line, `Decoder.feed` turns any bytes into the
frames they contain, never raises, keeps at most one line of pending bytes and counts what it had to throw away.
"""

from __future__ import annotations

import binascii
import enum
import re
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

PROTOCOL_VERSION = 1
MAX_LINE = 96            # bytes of one frame from "@" through "\n" inclusive (an optional "\r" counts)
SEQ_MODULUS = 65536      # sequence numbers are 16-bit unsigned and wrap
RATE_MAX = 2_000_000.0   # |wheel rate| in firmware units: 3 decimals still fit an int32 of thousandths
TICKS_MIN, TICKS_MAX = -(2**31), 2**31 - 1   # encoder counts are int32 and wrap on the robot
BATTERY_MAX_V = 999.99
FLAGS_MAX = 0xFFFF
STOP_CATEGORIES = (0, 1, 2)
CRC_INIT = 0xFFFF        # CRC-16/CCITT-FALSE: poly 0x1021, init 0xFFFF, no reflection, no final xor


class Flags(enum.IntFlag):
    """Telemetry status bits (4 hex digits on the wire); bits 7..15 are reserved and passed through unchanged."""

    WATCHDOG = 0x01     # no valid W frame within the watchdog time: motors brought to zero; latched until release
    FAULT = 0x02        # the firmware detected a fault (driver, over-current, encoder); motors at zero
    STOPPED = 0x04      # holding zero after a stop, a watchdog trip or power-up; needs a release frame (W with 0, 0)
    POWER_OFF = 0x08    # drive power removed (stop category 0, or category 1 after standstill)
    ESTOP = 0x10        # the hardware emergency-stop circuit is open (if the firmware can read it)
    LOW_BATTERY = 0x20  # battery below the firmware's own threshold
    SATURATED = 0x40    # the firmware clamped a commanded rate to its own limit


_FLAG_NAMES = {int(flag): str(flag.name) for flag in Flags}


def flag_names(flags: int) -> tuple[str, ...]:
    """Each set bit by name, low bit first; a reserved bit as "bit N" (shown, never hidden)."""
    return tuple(_FLAG_NAMES.get(1 << bit, f"bit {bit}") for bit in range(16) if flags >> bit & 1)


@dataclass(frozen=True, slots=True)
class WheelCommand:
    """Console -> robot: wheel rates in the profile's firmware unit; feeds the robot's watchdog."""

    seq: int
    left: float
    right: float


@dataclass(frozen=True, slots=True)
class StopCommand:
    """Console -> robot: stop with a stop category (0 remove power at once, 1 controlled then off, 2 controlled,
    held)."""

    seq: int
    category: int


@dataclass(frozen=True, slots=True)
class Heartbeat:
    """Console -> robot: 'still here' while not commanding motion; echoed, but never feeds the motion watchdog."""

    seq: int


@dataclass(frozen=True, slots=True)
class Telemetry:
    """Robot -> console at the robot's own rate.

    The diffdeck protocol fills every field. Template firmware (console.templates) may report only some of them; the
    missing ones are None.
    """

    seq: int | None               # the robot's own counter (gaps = lost telemetry)
    echo_seq: int | None          # seq of the last valid console frame the robot received (round-trip time)
    left: float | None            # measured wheel rates, firmware unit
    right: float | None
    left_ticks: int | None        # encoder counts, int32, wrapping
    right_ticks: int | None
    battery_v: float | None       # None: not measured (0.00 on the wire)
    flags: int                    # Flags bit set


Frame = WheelCommand | StopCommand | Heartbeat | Telemetry


def next_seq(seq: int) -> int:
    """The sequence number after `seq` (16-bit wrap)."""
    return (seq + 1) % SEQ_MODULUS


def crc16(data: bytes) -> int:
    """CRC-16/CCITT-FALSE of `data` (what the frame trailer carries)."""
    return binascii.crc_hqx(data, CRC_INIT)


def _seq(seq: int | None) -> int:
    if not (type(seq) is int and 0 <= seq < SEQ_MODULUS):
        raise ValueError(f"seq = {seq!r}: an int 0..{SEQ_MODULUS - 1}")
    return seq


def _rate(name: str, value: float | None) -> float:
    if not (isinstance(value, (int, float)) and -RATE_MAX <= value <= RATE_MAX):     # also rejects NaN and None
        raise ValueError(f"{name} = {value!r}: a finite rate within +-{RATE_MAX:.0f}")
    return value


def _ticks(name: str, value: int | None) -> int:
    if not (type(value) is int and TICKS_MIN <= value <= TICKS_MAX):
        raise ValueError(f"{name} = {value!r}: an int32")
    return value


# bodies as bytes %-formats (twice as fast as str formatting plus encoding); version and type fixed in each
_W = b"%d W %%d %%+.3f %%+.3f" % PROTOCOL_VERSION
_T = b"%d T %%d %%d %%+.3f %%+.3f %%d %%d %%.2f %%04X" % PROTOCOL_VERSION
_S = b"%d S %%d %%d" % PROTOCOL_VERSION
_H = b"%d H %%d" % PROTOCOL_VERSION


def _wheel_body(f: WheelCommand) -> bytes:
    return _W % (_seq(f.seq), _rate("left", f.left), _rate("right", f.right))


def _telemetry_body(f: Telemetry) -> bytes:
    battery = 0.0 if f.battery_v is None else f.battery_v
    if not (isinstance(battery, (int, float)) and 0.0 <= battery <= BATTERY_MAX_V):
        raise ValueError(f"battery_v = {battery!r}: 0..{BATTERY_MAX_V} V (0 or None = not measured)")
    if not (isinstance(f.flags, int) and 0 <= f.flags <= FLAGS_MAX):
        raise ValueError(f"flags = {f.flags!r}: 0..0x{FLAGS_MAX:04X}")
    return _T % (_seq(f.seq), _seq(f.echo_seq), _rate("left", f.left), _rate("right", f.right),
                 _ticks("left_ticks", f.left_ticks), _ticks("right_ticks", f.right_ticks), battery, f.flags)


def _stop_body(f: StopCommand) -> bytes:
    if type(f.category) is not int or f.category not in STOP_CATEGORIES:
        raise ValueError(f"category = {f.category!r}: 0, 1 or 2")
    return _S % (_seq(f.seq), f.category)


def _heartbeat_body(f: Heartbeat) -> bytes:
    return _H % _seq(f.seq)


_BODIES: dict[type, Callable[[Any], bytes]] = {
    WheelCommand: _wheel_body, Telemetry: _telemetry_body, StopCommand: _stop_body, Heartbeat: _heartbeat_body,
}


def encode(frame: Frame) -> bytes:
    """One ASCII line for `frame`, CRC trailer included, ending in b"\\n"; ValueError if a field cannot be sent."""
    body_of = _BODIES.get(type(frame))
    if body_of is None:
        raise TypeError(f"not a diffdeck frame: {frame!r}")
    body = body_of(frame)
    return b"@" + body + b"*%04X\n" % binascii.crc_hqx(body, CRC_INIT)


# Grammar (see PROTOCOL.md). Each frame type of this version has one full-line expression, so the usual case costs
# one match; a line that fails it goes through `_why` to be counted under the right heading. Fields are matched
# strictly, so a firmware formatting bug shows up as `malformed` rather than as a wrong number.
_SEQ = rb"(\d{1,5})"
_RATE = rb"([-+]?\d{1,7}\.\d{3})"
_TICKS = rb"([-+]?\d{1,10})"
_CRC = rb"\*([0-9A-Fa-f]{4})\r?"
_LINE = re.compile(rb"@((\d{1,3}) ([A-Z])(?: [ -)+-?A-~]*)?)" + _CRC)   # any version, any type: for counting


def _full(kind: bytes, *fields: bytes) -> re.Pattern[bytes]:
    return re.compile(b"@(%d %s %s)" % (PROTOCOL_VERSION, kind, b" ".join(fields)) + _CRC)


def _wheel(g: tuple[bytes, ...]) -> WheelCommand | None:
    seq, left, right = int(g[1]), float(g[2]), float(g[3])
    if seq >= SEQ_MODULUS or abs(left) > RATE_MAX or abs(right) > RATE_MAX:
        return None
    return WheelCommand(seq, left, right)


def _telemetry(g: tuple[bytes, ...]) -> Telemetry | None:
    seq, echo, left, right, lt, rt = int(g[1]), int(g[2]), float(g[3]), float(g[4]), int(g[5]), int(g[6])
    if seq >= SEQ_MODULUS or echo >= SEQ_MODULUS or abs(left) > RATE_MAX or abs(right) > RATE_MAX:
        return None
    if not (TICKS_MIN <= lt <= TICKS_MAX and TICKS_MIN <= rt <= TICKS_MAX):
        return None
    return Telemetry(seq, echo, left, right, lt, rt, float(g[7]) or None, int(g[8], 16))


def _stop(g: tuple[bytes, ...]) -> StopCommand | None:
    seq = int(g[1])
    return StopCommand(seq, int(g[2])) if seq < SEQ_MODULUS else None


def _heartbeat(g: tuple[bytes, ...]) -> Heartbeat | None:
    seq = int(g[1])
    return Heartbeat(seq) if seq < SEQ_MODULUS else None


# keyed by the first four bytes of a line ("@1 W"): (full-line expression, builder returning None when out of range)
_FRAMES: dict[bytes, tuple[re.Pattern[bytes], Callable[[tuple[bytes, ...]], Frame | None]]] = {
    b"@%d W" % PROTOCOL_VERSION: (_full(b"W", _SEQ, _RATE, _RATE), _wheel),
    b"@%d T" % PROTOCOL_VERSION: (
        _full(b"T", _SEQ, _SEQ, _RATE, _RATE, _TICKS, _TICKS, rb"(\d{1,3}\.\d{2})", rb"([0-9A-Fa-f]{4})"),
        _telemetry,
    ),
    b"@%d S" % PROTOCOL_VERSION: (_full(b"S", _SEQ, rb"([0-2])"), _stop),
    b"@%d H" % PROTOCOL_VERSION: (_full(b"H", _SEQ), _heartbeat),
}


class Decoder:
    """Bytes in, frames out. Never raises on input; holds at most MAX_LINE - 1 pending bytes.

    A frame starts at "@" and ends at "\\n"; "@" never occurs inside a frame, so after garbage the decoder resumes
    at the last "@" of a line. Counters (cumulative): `crc_errors` (trailer does not match), `overlong_lines` (no end
    within MAX_LINE bytes of an "@"), `unknown_frames` (valid CRC, but a frame type or protocol version this console
    does not know; the last foreign version is kept in `foreign_version`), `malformed` (from "@" to the end of line,
    but not the grammar), `noise_bytes` (bytes outside any frame: boot messages, a wrong baud rate).
    """

    __slots__ = ("_pending", "crc_errors", "overlong_lines", "unknown_frames", "malformed", "noise_bytes",
                 "foreign_version")

    def __init__(self) -> None:
        self._pending = b""
        self.crc_errors = 0
        self.overlong_lines = 0
        self.unknown_frames = 0
        self.malformed = 0
        self.noise_bytes = 0
        self.foreign_version: int | None = None

    @property
    def pending(self) -> int:
        """Bytes held back waiting for the end of their line (never more than MAX_LINE - 1)."""
        return len(self._pending)

    def feed(self, data: bytes) -> list[Frame]:
        """Every complete frame in the bytes received so far, in order."""
        if type(data) is not bytes:
            data = bytes(data)      # bytearray / memoryview from a port
        frames: list[Frame] = []
        if b"\n" in data:
            lines = (self._pending + data if self._pending else data).split(b"\n")
            self._pending = lines.pop()
            for line in lines:      # the per-line work is inlined here: it is the codec's hot path
                at = line.rfind(b"@")
                if at:
                    if at < 0:
                        self.noise_bytes += len(line)
                        continue
                    self.noise_bytes += at
                    line = line[at:]
                if len(line) >= MAX_LINE:
                    self.overlong_lines += 1
                    continue
                known = _FRAMES.get(line[:4])
                if known is not None:
                    m = known[0].fullmatch(line)
                    if m is not None:
                        g = m.groups()
                        if int(g[-1], 16) == binascii.crc_hqx(g[0], CRC_INIT):
                            frame = known[1](g)
                            if frame is not None:
                                frames.append(frame)
                                continue
                self._why(line)
        else:
            self._pending += data
        if len(self._pending) >= MAX_LINE:
            self._trim()
        return frames

    def _trim(self) -> None:
        """Pending bytes that can no longer end within MAX_LINE: keep only a frame start that still can."""
        pending = self._pending
        at = pending.rfind(b"@")
        if at < 0:
            self.noise_bytes += len(pending)
            self._pending = b""
        elif len(pending) - at >= MAX_LINE:
            self.overlong_lines += 1
            self.noise_bytes += at
            self._pending = b""
        else:
            self.noise_bytes += at
            self._pending = pending[at:]

    def _why(self, line: bytes) -> None:
        """Count a line from "@" that is not a frame of this version under the right heading."""
        m = _LINE.fullmatch(line)
        if m is None:
            self.malformed += 1
        elif int(m[4], 16) != binascii.crc_hqx(m[1], CRC_INIT):
            self.crc_errors += 1
        elif int(m[2]) != PROTOCOL_VERSION:
            self.unknown_frames += 1
            self.foreign_version = int(m[2])
        elif b"@%d %s" % (PROTOCOL_VERSION, m[3]) not in _FRAMES:
            self.unknown_frames += 1
        else:
            self.malformed += 1     # a known frame type whose fields do not follow its grammar or are out of range


class Codec(Decoder):
    """`encode` and a Decoder in one object: the surface TemplateCodec shares, so the loop holds either kind."""

    __slots__ = ()

    @staticmethod
    def encode(frame: Frame) -> bytes:
        return encode(frame)
