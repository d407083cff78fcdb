"""The thin shell around the mapper: Linux input devices read as the kernel writes them.

A device file (/dev/input/eventN) delivers `struct input_event` records: a struct timeval, then type (u16), code
(u16) and value (s32) in native byte order (include/uapi/linux/input.h; 24 bytes on 64-bit Linux). They are read
here with `struct` from any file descriptor, so a pipe carrying the same records stands in for a device in tests.
The evdev package (Linux only) supplies the kernel's code names and, for real devices, their names, ranges and
capabilities.
"""

from __future__ import annotations

import os
import stat
import struct
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any, cast

from console.errors import InputError
from console.inputs.mapper import Event

RECORD = struct.Struct("@llHHi")  # struct input_event: tv_sec, tv_usec, type, code, value
EV_SYN = 0


def _names() -> tuple[dict[int, str], dict[int, dict[int, str]]]:
    """Type and code names from the kernel's table (evdev.ecodes); aliases resolve to their first name."""
    try:
        from evdev import ecodes
    except ImportError as error:
        raise InputError("input", "evdev", "not installed", "Linux with the evdev package: input devices are read "
                                                            "through the Linux input subsystem") from error

    def first(name: Any) -> str:
        return name[0] if isinstance(name, list | tuple) else str(name)

    types = {number: first(name) for number, name in ecodes.EV.items()}
    codes = {ecodes.EV_ABS: {n: first(v) for n, v in ecodes.ABS.items()},
             ecodes.EV_KEY: {**{n: first(v) for n, v in ecodes.KEY.items()},
                             **{n: first(v) for n, v in ecodes.BTN.items()}}}
    return types, codes


class EventDecoder:
    """input_event records -> Events, across reads that end inside a record; SYN records are left out."""

    def __init__(self) -> None:
        self._types, self._codes = _names()
        self._pending = b""

    def feed(self, chunk: bytes) -> list[Event]:
        pending = self._pending + chunk
        whole = len(pending) - len(pending) % RECORD.size
        self._pending = pending[whole:]
        events = []
        for seconds, micros, kind, code, value in RECORD.iter_unpack(pending[:whole]):
            if kind == EV_SYN:
                continue
            type_name = self._types.get(kind, f"EV_{kind}")
            events.append(Event(seconds + micros * 1e-6, type_name,
                                self._codes.get(kind, {}).get(code, f"{type_name}_{code}"), value))
        return events


def read_events(fd: int) -> Iterator[Event]:
    """Events from a file descriptor until it ends (device gone, pipe closed); SYN records are left out.

    The caller sees the end as the iterator stopping: `OSError` (ENODEV when unplugged) ends it too.
    """
    decoder = EventDecoder()
    while True:
        try:
            chunk = os.read(fd, RECORD.size * 64)
        except OSError:
            return
        if not chunk:
            return
        yield from decoder.feed(chunk)


class DeviceGone(Exception):
    """The device went away: unplugged (ENODEV), a read error, or the end of a FIFO (its writer closed it)."""


READS_PER_CALL = 16
"""At most this many reads (1024 records) per call: a device (or a FIFO's writer) flooding events cannot hold the
control loop's cycle; the rest waits for the next cycle."""


def read_available(fd: int, decoder: EventDecoder) -> list[Event]:
    """The events a non-blocking descriptor holds now, without waiting; raises DeviceGone at its end."""
    events: list[Event] = []
    for _ in range(READS_PER_CALL):
        try:
            chunk = os.read(fd, RECORD.size * 64)
        except BlockingIOError:
            return events
        except OSError as error:
            raise DeviceGone(error.strerror or str(error)) from None
        if not chunk:
            raise DeviceGone("end of file")
        events += decoder.feed(chunk)
    return events


@dataclass(frozen=True, slots=True)
class DeviceInfo:
    path: str
    name: str
    axes: dict[str, tuple[int, int, int]]   # code -> (min, max, flat)
    buttons: tuple[str, ...]

    @property
    def kind(self) -> str:
        """What it can drive: a pad (two or more sticks' axes and buttons), a keyboard (arrow keys), or neither."""
        if len(self.axes) >= 2 and self.buttons:
            return "gamepad"
        if {"KEY_UP", "KEY_DOWN", "KEY_LEFT", "KEY_RIGHT"} <= set(self.buttons):
            return "keyboard"
        return "other"


def describe(path: str) -> DeviceInfo:
    """Name, axis ranges and buttons of an input device (its ioctls, through evdev)."""
    _, codes = _names()
    from evdev import InputDevice, ecodes

    device = InputDevice(path)
    try:
        capabilities = device.capabilities(absinfo=True)
        absolute = cast("list[tuple[int, Any]]", capabilities.get(ecodes.EV_ABS, []))   # (code, AbsInfo) pairs
        axes = {codes[ecodes.EV_ABS].get(code, str(code)): (info.min, info.max, info.flat) for code, info in absolute}
        buttons = tuple(codes[ecodes.EV_KEY].get(code, str(code)) for code in capabilities.get(ecodes.EV_KEY, []))
        return DeviceInfo(path, device.name, axes, buttons)
    finally:
        device.close()


def list_devices() -> list[DeviceInfo]:
    """Every input device this user may open, as evdev finds them under /dev/input."""
    _names()
    from evdev import list_devices as paths

    found = []
    for path in paths():
        try:
            found.append(describe(path))
        except OSError:
            continue   # gone in the meantime, or not readable by this user
    return found


def open_source(path: str, *, nonblocking: bool = False) -> int:
    """A file descriptor to read events from: a device, or a FIFO carrying the same records (for rehearsals).

    `nonblocking`: for the control loop, which must never wait (nor for a FIFO's writer when opening it).
    """
    try:
        mode = os.stat(path).st_mode
        if not (stat.S_ISCHR(mode) or stat.S_ISFIFO(mode)):
            raise InputError(path, "device", path, "an input device (/dev/input/eventN) or a FIFO of input_event "
                                                   "records")
        return os.open(path, os.O_RDONLY | os.O_CLOEXEC | (os.O_NONBLOCK if nonblocking else 0))
    except OSError as error:
        raise InputError(path, "device", path, f"cannot be opened ({error.strerror}); see 'diffdeck input list' "
                                               "(a device needs read permission, e.g. the input group)") from None
