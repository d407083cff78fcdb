"""Hold-to-drive from an input device, sans I/O: input events (time, type, code, value) in, requests out.

Nothing here opens a device: the console's device shell (and `diffdeck input map`, from a file) feeds the kernel's
events, named by the kernel's own event codes (ABS_Y, BTN_TL ...: the Linux input subsystem's public ABI).

- A stick's position: x = (value - (min + max) / 2) / ((max - min) / 2), clipped to [-1, 1], negated when inverted;
  inside the deadzone it reads 0, outside it is rescaled to (|x| - deadzone) / (1 - deadzone) with its sign, so the
  response starts from zero at the deadzone's edge; then y = (1 - expo) x + expo x^3 (finer control near the centre).
  The deadzone is the larger of the profile's and the device's own flat (its `absinfo`).
- Requests: v = y x setting x top speed (top reverse speed for y < 0), omega = y x setting x top turn rate, where the
  setting is the speed setting (a fraction, changed in steps by the slower / faster buttons): full stick means the
  chosen setting, so a person can creep.
- Safety: nothing moves unless the hold-to-drive button is held; letting go gives zero in the same event
  ("released"). An axis that is off centre when the button is pressed (or at arming, `require_centre`) gives zero
  until it has been centred once: no lurch. The fast-stop button asks for a fast stop, a lost device for one too
  ("lost"); the console makes both need re-arming.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass, field

DEFAULT_RANGE = (-32768, 32767, 0)
SPEED_SETTING_DEFAULT = 0.3
"""The speed setting a session starts with: 30 % of top speed at full stick, a cautious start for bring-up."""
SPEED_SETTING_STEP = 0.1
SPEED_SETTING_RANGE = (0.1, 1.0)
KEY_RELEASED, KEY_PRESSED = 0, 1  # EV_KEY values; 2 is the kernel's auto-repeat of a held key


class Stop(enum.Enum):
    FAST = "fast"   # the fast-stop button
    LOST = "lost"   # the device went away (unplugged, flat battery, read error)


@dataclass(frozen=True, slots=True)
class InputConfig:
    """The profile's [input] section: kernel event-code names and the stick shaping."""

    speed_axis: str = "ABS_Y"
    speed_axis_inverted: bool = True        # most pads report "up" as negative
    turn_axis: str = "ABS_RX"
    turn_axis_inverted: bool = True         # positive = turn left after inversion
    deadzone: float = 0.08
    expo: float = 0.3
    hold_to_drive_button: str = "BTN_TL"
    fast_stop_button: str = "BTN_TR"
    slower_button: str = "BTN_WEST"
    faster_button: str = "BTN_NORTH"


@dataclass(frozen=True, slots=True)
class Event:
    t_s: float
    type: str       # "EV_ABS", "EV_KEY", ...
    code: str       # "ABS_Y", "BTN_TL", ...
    value: int


@dataclass(frozen=True, slots=True)
class Request:
    t_s: float
    v_mps: float
    omega_radps: float
    enabled: bool
    stop: Stop | None = None


@dataclass(slots=True)
class _Axis:
    low: float = DEFAULT_RANGE[0]
    high: float = DEFAULT_RANGE[1]
    flat: float = DEFAULT_RANGE[2]
    position: float = 0.0           # after inversion, deadzone and expo: -1 .. 1
    needs_centre: bool = False


def stick_position(value: float, low: float, high: float, inverted: bool, deadzone: float, expo: float) -> float:
    """Raw axis value -> shaped position in [-1, 1] (see the module docstring)."""
    half = (high - low) / 2.0
    x = (value - (low + high) / 2.0) / half if half > 0.0 else 0.0
    x = max(-1.0, min(1.0, -x if inverted else x))
    if abs(x) <= deadzone:
        return 0.0
    x = (abs(x) - deadzone) / (1.0 - deadzone) * (1.0 if x > 0.0 else -1.0)
    return (1.0 - expo) * x + expo * x * x * x


@dataclass(slots=True)
class Mapper:
    """Feeds events, keeps the stick and button state, and says what the operator asks for after each event."""

    config: InputConfig
    top_speed_mps: float
    top_reverse_speed_mps: float
    top_turn_rate_radps: float
    setting: float = SPEED_SETTING_DEFAULT
    enabled: bool = False
    _axes: dict[str, _Axis] = field(default_factory=dict)

    def __post_init__(self) -> None:
        self._axes = {self.config.speed_axis: _Axis(), self.config.turn_axis: _Axis()}

    def set_range(self, code: str, low: float, high: float, flat: float) -> None:
        """The device's range for an axis (its absinfo); the default is -32768 .. 32767 with no flat."""
        if code in self._axes:
            axis = self._axes[code]
            axis.low, axis.high, axis.flat = low, high, flat

    def require_centre(self) -> None:
        """At arming: an off-centre axis gives zero until it has been centred once."""
        for axis in self._axes.values():
            axis.needs_centre = axis.position != 0.0

    def feed(self, event: Event) -> Request:
        config = self.config
        stop: Stop | None = None
        if event.type == "EV_ABS" and event.code in self._axes:
            axis = self._axes[event.code]
            inverted = config.speed_axis_inverted if event.code == config.speed_axis else config.turn_axis_inverted
            deadzone = max(config.deadzone, axis.flat / ((axis.high - axis.low) / 2.0)) if axis.high > axis.low \
                else config.deadzone
            axis.position = stick_position(event.value, axis.low, axis.high, inverted, min(deadzone, 0.99),
                                           config.expo)
            if axis.position == 0.0:
                axis.needs_centre = False
        elif event.type == "EV_KEY" and event.value in (KEY_PRESSED, KEY_RELEASED):
            pressed = event.value == KEY_PRESSED
            if event.code == config.hold_to_drive_button:
                if pressed and not self.enabled:
                    self.require_centre()
                self.enabled = pressed
            elif event.code == config.fast_stop_button and pressed:
                stop = Stop.FAST
            elif event.code in (config.slower_button, config.faster_button) and pressed:
                step = SPEED_SETTING_STEP if event.code == config.faster_button else -SPEED_SETTING_STEP
                low, high = SPEED_SETTING_RANGE
                self.setting = round(max(low, min(high, self.setting + step)), 6)
        return self._request(event.t_s, stop)

    def lost(self, t_s: float) -> Request:
        """The device went away: nothing held any more, and a fast stop."""
        self.enabled = False
        return self._request(t_s, Stop.LOST)

    def request(self, t_s: float) -> Request:
        """What the operator asks for now, with no new event (after `require_centre`, say)."""
        return self._request(t_s, None)

    def positions(self) -> tuple[float, float]:
        """The speed and turn sticks' shaped positions (-1 .. 1), as the operator holds them."""
        return self._axes[self.config.speed_axis].position, self._axes[self.config.turn_axis].position

    @property
    def centring(self) -> bool:
        """An axis reads zero until it has been centred once."""
        return any(axis.needs_centre for axis in self._axes.values())

    def _request(self, t_s: float, stop: Stop | None) -> Request:
        if not self.enabled or stop is not None:
            return Request(t_s, 0.0, 0.0, self.enabled, stop)
        speed, turn = (self._axes[self.config.speed_axis], self._axes[self.config.turn_axis])
        y = 0.0 if speed.needs_centre else speed.position
        w = 0.0 if turn.needs_centre else turn.position
        top = self.top_speed_mps if y >= 0.0 else self.top_reverse_speed_mps
        return Request(t_s, y * self.setting * top, w * self.setting * self.top_turn_rate_radps, True)


KEYBOARD_DRIVE = {"KEY_UP": (1.0, 0.0), "KEY_DOWN": (-1.0, 0.0), "KEY_LEFT": (0.0, 1.0), "KEY_RIGHT": (0.0, -1.0)}
KEYBOARD_FAST_STOP = "KEY_X"                       # the console's own fast-stop key, on the local keyboard too
KEYBOARD_SETTING = {"KEY_LEFTBRACE": -SPEED_SETTING_STEP, "KEY_RIGHTBRACE": SPEED_SETTING_STEP}   # [ and ]


@dataclass(slots=True)
class KeyboardMapper:
    """A keyboard on the machine itself, read through the input subsystem: real press and release events.

    Holding an arrow drives at the speed setting (up / down: speed, left / right: turn); letting go of the last one
    gives zero in the same event. The arrows themselves are the operator's presence: enabled while one is held.
    """

    top_speed_mps: float
    top_reverse_speed_mps: float
    top_turn_rate_radps: float
    setting: float = SPEED_SETTING_DEFAULT
    _held: set[str] = field(default_factory=set)

    @property
    def enabled(self) -> bool:
        return bool(self._held)

    def require_centre(self) -> None:
        """At arming: keys already held count only once pressed again (no lurch)."""
        self._held.clear()

    def feed(self, event: Event) -> Request:
        stop: Stop | None = None
        if event.type == "EV_KEY" and event.value in (KEY_PRESSED, KEY_RELEASED):
            pressed = event.value == KEY_PRESSED
            if event.code in KEYBOARD_DRIVE:
                (self._held.add if pressed else self._held.discard)(event.code)
            elif event.code == KEYBOARD_FAST_STOP and pressed:
                stop = Stop.FAST
            elif event.code in KEYBOARD_SETTING and pressed:
                low, high = SPEED_SETTING_RANGE
                self.setting = round(max(low, min(high, self.setting + KEYBOARD_SETTING[event.code])), 6)
        return self._request(event.t_s, stop)

    def lost(self, t_s: float) -> Request:
        self._held.clear()
        return Request(t_s, 0.0, 0.0, False, Stop.LOST)

    def request(self, t_s: float) -> Request:
        """What the keys held now ask for, with no new event."""
        return self._request(t_s, None)

    def positions(self) -> tuple[float, float]:
        """Speed and turn as the held arrows ask for them (-1, 0 or 1 each)."""
        return (sum(KEYBOARD_DRIVE[key][0] for key in self._held), sum(KEYBOARD_DRIVE[key][1] for key in self._held))

    centring = False
    """Keys held at arming are forgotten (`require_centre`): nothing waits to be centred."""

    def _request(self, t_s: float, stop: Stop | None) -> Request:
        if not self._held or stop is not None:
            return Request(t_s, 0.0, 0.0, self.enabled, stop)
        y, w = self.positions()
        top = self.top_speed_mps if y >= 0.0 else self.top_reverse_speed_mps
        return Request(t_s, y * self.setting * top, w * self.setting * self.top_turn_rate_radps, True)
