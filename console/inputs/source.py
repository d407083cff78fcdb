"""`drive --input`: a gamepad or a local keyboard as the console's request source (console.session.RequestSource).

The loop polls the source once per cycle, in its own thread and process: the device is read without waiting (every
record it holds now), the events go through the mapper (console/inputs/mapper.py), and the request that results is
handed to the loop in the same cycle, so letting go of the hold-to-drive button is zero in the very next frame.

Safety, on top of the mapper's own rules:
- nothing but zero is requested unless the loop is armed (as its last snapshot says) and the button is held; the
  cycle that arms always sends zero, and from the first armed cycle an off-centre stick reads zero until centred;
- the fast-stop button is an operator fast stop (re-arming needed); the device going away (unplugged, a read error,
  the end of a FIFO) is a fast stop with the cause "input lost", repeated whenever the loop is armed again, since no
  one can drive without the device (restart the console once it is back);
- the terminal's stop keys keep working: they are the screen's, not the source's.
"""

from __future__ import annotations

import os
import stat
import sys
from dataclasses import dataclass
from typing import TYPE_CHECKING

from console.core.safety import SafetyState, StopCause
from console.core.step import SourceStatus
from console.errors import InputError
from console.inputs.device import DeviceGone, EventDecoder, describe, list_devices, open_source, read_available
from console.inputs.mapper import (
    KEYBOARD_DRIVE,
    SPEED_SETTING_DEFAULT,
    KeyboardMapper,
    Mapper,
    Stop,
)
from shaping.shaper import StopKind

if TYPE_CHECKING:
    from console.profile import Profile
    from console.session import LoopHandle

TERMINAL = "terminal"
SHOWN_CODES = 8        # codes a refusal lists of what the device has (a keyboard has over a hundred)
ALLOWED = "terminal (the console's keys), gamepad (the first one found), gamepad:PATH or keyboard:PATH"


@dataclass(frozen=True, slots=True)
class InputStatus(SourceStatus):
    """What the input panel shows: the device, whether the operator holds the enable, the sticks, the setting."""

    kind: str = ""                  # "gamepad" or "keyboard"
    enable: str = ""                # what must be held: "BTN_TL", "an arrow key"
    held: bool = False
    speed: float = 0.0              # shaped stick positions, -1 .. 1 (keyboard: -1, 0 or 1)
    turn: float = 0.0
    setting: float = SPEED_SETTING_DEFAULT
    centring: bool = False          # an axis reads zero until centred once
    lost: str | None = None         # why the device went away


class DeviceSource:
    """A gamepad or a local keyboard read through the Linux input subsystem (or a FIFO of the same records).

    Built in the console's process (checked there, see `source_from_option`) and pickled into the loop's: the
    device is opened in the first `poll`, never in `__init__`.
    """

    def __init__(self, kind: str, path: str, profile: Profile,
                 ranges: dict[str, tuple[int, int, int]] | None = None) -> None:
        envelope = profile.envelope
        tops = (envelope.top_speed_mps, envelope.top_reverse_speed_mps, envelope.top_turn_rate_radps)
        self.kind = kind
        self.path = path
        self.mapper: Mapper | KeyboardMapper
        if kind == "gamepad":
            self.mapper = Mapper(profile.input, *tops)
            for code, (low, high, flat) in (ranges or {}).items():
                self.mapper.set_range(code, low, high, flat)
            self.enable = profile.input.hold_to_drive_button
        else:
            self.mapper = KeyboardMapper(*tops)
            self.enable = "an arrow key"
        self._fd: int | None = None
        self._decoder: EventDecoder | None = None
        self._lost: str | None = None
        self._armed = False

    def poll(self, t_s: float, loop: LoopHandle) -> InputStatus:
        mapper = self.mapper
        if self._fd is None and self._lost is None:
            self._open()
        events = []
        if self._fd is not None and self._decoder is not None:
            try:
                events = read_available(self._fd, self._decoder)
            except DeviceGone as gone:
                self._gone(str(gone))
        armed = loop.snapshot().state is SafetyState.ARMED
        if armed and not self._armed:
            mapper.require_centre()          # no lurch: a stick held off centre at arming reads zero until centred
        self._armed = armed
        fast_stop = False
        for event in events:
            fast_stop |= mapper.feed(event).stop is Stop.FAST
        request = mapper.request(t_s)
        if self._lost is not None:
            mapper.lost(t_s)
            loop.stop(StopKind.FAST, StopCause.INPUT_LOST)   # again after any re-arming: no one can drive without it
            loop.request(0.0, 0.0)
        elif fast_stop:
            loop.stop(StopKind.FAST, StopCause.OPERATOR)
            loop.request(0.0, 0.0)
        elif armed and request.enabled:
            loop.request(request.v_mps, request.omega_radps)
            loop.operator_alive()            # the held button is the operator's presence
        else:
            loop.request(0.0, 0.0)
        return self._status()

    def _open(self) -> None:
        try:
            self._fd = open_source(self.path, nonblocking=True)
            self._decoder = EventDecoder()
        except InputError as error:
            self._gone(error.allowed)

    def _gone(self, why: str) -> None:
        self._lost = why
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def _status(self) -> InputStatus:
        mapper = self.mapper
        speed, turn = mapper.positions() if self._lost is None else (0.0, 0.0)   # a lost device's are unknown
        if self._lost is not None:
            detail = f"input lost ({self._lost}): restart the console with the device back"
        elif mapper.enabled:
            detail = "held: centre the stick to drive" if mapper.centring else "held: driving"
        else:
            detail = f"released: hold {self.enable} to drive"
        return InputStatus(f"{self.kind} {self.path}", detail, self.kind, self.enable, mapper.enabled and
                           self._lost is None, speed, turn, mapper.setting, mapper.centring, self._lost)


def source_from_option(option: str, profile: Profile) -> DeviceSource | None:
    """`--input SOURCE` -> the source (None: the terminal's keys), checked before anything opens: one line, exit 2,
    when it is not allowed here, not found, cannot be opened or lacks what the profile's [input] names."""
    option = option.strip()
    if option == TERMINAL:
        return None
    kind, colon, path = option.partition(":")
    if kind not in ("gamepad", "keyboard") or (colon and not path) or (kind == "keyboard" and not path):
        raise InputError("drive", "--input", option, ALLOWED)
    if not sys.platform.startswith("linux"):
        raise InputError("drive", "--input", option, "input devices are read through the Linux input subsystem; "
                                                     "on this system only 'terminal'")
    try:
        import evdev  # noqa: F401 - only to say at once that it is missing
    except ImportError:
        raise InputError("drive", "--input", option, "needs the evdev package (Linux input subsystem), not "
                                                     "installed here; 'terminal' works without it") from None
    if not path:
        pads = [device for device in list_devices() if device.kind == "gamepad"]
        if not pads:
            raise InputError("drive", "--input", option, "no gamepad found under /dev/input (see 'diffdeck input "
                                                         "list'); give gamepad:PATH")
        path = pads[0].path
    os.close(open_source(path, nonblocking=True))      # a bad path or no permission: one line now, nothing moves
    ranges: dict[str, tuple[int, int, int]] = {}
    if stat.S_ISCHR(os.stat(path).st_mode):
        ranges = _checked_device(kind, path, profile)
    return DeviceSource(kind, path, profile, ranges)


def _checked_device(kind: str, path: str, profile: Profile) -> dict[str, tuple[int, int, int]]:
    """A real device must have what its kind drives with: the profile's axes and buttons, or the arrow keys."""
    try:
        info = describe(path)
    except OSError as error:
        raise InputError(path, "device", path, f"cannot be read as an input device ({error.strerror or error})") \
            from None
    if kind == "keyboard":
        missing = [key for key in KEYBOARD_DRIVE if key not in info.buttons]
        if missing:
            raise InputError(path, "device", info.name, "a keyboard with arrow keys (this one lacks "
                                                        f"{', '.join(missing)}; see 'diffdeck input list')")
        return {}
    config = profile.input
    for key, have, what in (("speed_axis", info.axes, "an axis"), ("turn_axis", info.axes, "an axis"),
                            ("hold_to_drive_button", info.buttons, "a button"),
                            ("fast_stop_button", info.buttons, "a button")):
        code = getattr(config, key)
        if code not in have:
            names = list(have)
            shown = ", ".join(names[:SHOWN_CODES]) + (", ..." if len(names) > SHOWN_CODES else "")
            raise InputError(str(profile.path), f"input.{key}", code, f"{what} that {info.name} ({path}) has: "
                                                                      f"{shown or 'none'} (see 'diffdeck input watch')")
    return info.axes
