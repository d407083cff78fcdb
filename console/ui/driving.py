"""What the operator's keys mean, as a small state machine with no terminal in it (the app feeds it key events and
the loop clock's time; it answers with the request to send).

- Latched mode: nudges add steps to the request, clamped to the envelope so a long key press never builds up a
  hidden excess.
- Hold mode: a held key means "go at the speed I chose", never "keep adding": an arrow sets its axis to one step
  (forward / reverse, left / right; `[` `]` choose the step), a digit to its preset; every driving key refreshes the
  request and when the keys stop it falls to zero. Terminals send key presses and auto-repeats but (mostly) no
  releases, so "held" means "repeats keep arriving": `KeyRepeat` measures the terminal's repeat interval and delay
  from the keys themselves, the release is noticed a few repeat intervals after the last key (`deadman_s` is the
  upper bound), and before the first repeat of a press the hold waits for the measured repeat delay, so a terminal
  whose delay is longer than the deadman time does not make every start stutter (only the first, which measures it).
- Presets set the speed to a fraction of the envelope's top speed in the current direction of travel.
- Latched mode: the request stays until changed, as long as the operator shows presence: some key (k is the one
  that changes nothing) at least every `keepalive_s`, or the loop brings the robot to a controlled stop (cause
  deadman). Hold mode needs no keep-alive: its own deadman already zeroes an unattended request.
- Arming is a two-key sequence: the arm key opens a short window, the confirm key inside it arms. Reopening a lost
  link is the same with the reconnect key.
"""

from __future__ import annotations

import enum
import math
from collections import deque
from dataclasses import dataclass

from shaping.envelope import Envelope


class Confirm(enum.Enum):
    """What a two-key sequence's window is open for."""

    ARM = "arm"
    RECONNECT = "reconnect"


class DriveMode(enum.Enum):
    HOLD = "hold"
    LATCHED = "latched"


@dataclass(frozen=True, slots=True)
class DriveSettings:
    speed_step_mps: float
    turn_step_radps: float
    deadman_s: float = 0.7
    keepalive_s: float = 10.0
    arm_window_s: float = 2.0
    mode: DriveMode = DriveMode.HOLD

    @staticmethod
    def for_envelope(envelope: Envelope, **overrides: object) -> DriveSettings:
        """Default steps: 1/20 of the top speed and 1/10 of the top turn rate (common practice: ~10-20 presses to
        full)."""
        defaults: dict[str, object] = {
            "speed_step_mps": round(envelope.top_speed_mps / 20.0, 3),
            "turn_step_radps": round(envelope.top_turn_rate_radps / 10.0, 3),
        }
        defaults.update({key: value for key, value in overrides.items() if value is not None})
        return DriveSettings(**defaults)  # type: ignore[arg-type]


REPEAT_GAP_MAX_S = 0.25
"""Gaps between events of the same key up to this long are auto-repeats: terminal repeat rates are about 10-50 per
second (common practice; X11's default is 25/s after 660 ms, from memory)."""
REPEAT_DELAY_MAX_S = 1.5
"""A first gap longer than this is a second press, not a repeat delay (settings reach about 1 s; from memory)."""
RELEASE_REPEATS = 3.0
"""A hold ends this many repeat intervals after the last repeat: one late or lost repeat does not end it."""
RELEASE_MIN_S = 0.1
"""...and never sooner than this: two refresh ticks of the screen (20 Hz), which is where the release is noticed."""
STEP_SERIES = (1.0, 2.0, 5.0)
"""`[` / `]` walk the 1-2-5 series (0.01, 0.02, 0.05, 0.1 ...): round numbers a person can read and say; common
practice (instrument range switches)."""


class KeyRepeat:
    """The terminal's auto-repeat, measured from the driving keys' own arrival times."""

    def __init__(self) -> None:
        self.delay_s: float | None = None           # press to first repeat, once seen
        self.intervals: deque[float] = deque(maxlen=8)
        self.repeating = False                      # the last key was an auto-repeat of the one before
        self._key: str | None = None
        self._last_s: float | None = None
        self._gap_before: float | None = None

    @property
    def interval_s(self) -> float | None:
        """The longest of the recent repeat gaps: jitter (a loaded machine, ssh) must not end a hold."""
        return max(self.intervals) if self.intervals else None

    def key(self, name: str, now_s: float) -> None:
        gap = now_s - self._last_s if name == self._key and self._last_s is not None else None
        self.repeating = gap is not None and gap <= REPEAT_GAP_MAX_S
        if self.repeating:
            assert gap is not None
            self.intervals.append(gap)
            before = self._gap_before
            if before is not None and REPEAT_GAP_MAX_S < before <= REPEAT_DELAY_MAX_S:
                self.delay_s = before               # a long gap followed by repeats: that was the repeat delay
        self._gap_before = gap
        self._key, self._last_s = name, now_s

    def release_after_s(self, deadman_s: float) -> float:
        """How long after the last key a hold still counts as held."""
        interval = self.interval_s
        after_repeat = RELEASE_MIN_S if interval is None else max(RELEASE_REPEATS * interval, RELEASE_MIN_S)
        if self.repeating:
            return min(after_repeat, deadman_s)
        if self.delay_s is not None:                # a fresh press: its first repeat comes after the delay
            return max(deadman_s, self.delay_s + after_repeat)
        return deadman_s


def step_in_series(value: float, up: bool) -> float:
    """The next number of the 1-2-5 series above (below) `value`."""
    exponent = math.floor(math.log10(value))
    series = sorted(float(f"{m:g}e{e}") for e in range(exponent - 1, exponent + 2) for m in STEP_SERIES)
    if up:
        return next(v for v in series if v > value * (1.0 + 1e-9))
    return next(v for v in reversed(series) if v < value * (1.0 - 1e-9))


class DriveInput:
    """The request the keys have built, and the arming window."""

    def __init__(self, envelope: Envelope, settings: DriveSettings) -> None:
        self.envelope = envelope
        self.speed_step_mps = settings.speed_step_mps
        self.turn_step_radps = settings.turn_step_radps
        self.deadman_s = settings.deadman_s
        self.keepalive_s = settings.keepalive_s
        self._present_s = 0.0
        self.arm_window_s = settings.arm_window_s
        self.mode = settings.mode
        self.v_mps = 0.0
        self.omega_radps = 0.0
        self._refreshed_s: float | None = None
        self._window: tuple[Confirm, float] | None = None
        self.repeat = KeyRepeat()

    @property
    def request(self) -> tuple[float, float]:
        return self.v_mps, self.omega_radps

    def _set(self, v_mps: float, omega_radps: float, now_s: float) -> tuple[float, float]:
        top = self.envelope.top_speed_mps
        reverse = self.envelope.top_reverse_speed_mps
        turn = self.envelope.top_turn_rate_radps
        self.v_mps = min(max(v_mps, -reverse), top)
        self.omega_radps = min(max(omega_radps, -turn), turn)
        # snap what rounding left over to an exact zero, so "back to zero" by nudges really is zero
        if abs(self.v_mps) < 1e-9:
            self.v_mps = 0.0
        if abs(self.omega_radps) < 1e-9:
            self.omega_radps = 0.0
        self._refreshed_s = now_s
        return self.request

    def nudge(self, speed_steps: int, turn_steps: int, now_s: float) -> tuple[float, float]:
        """Latched: add the steps. Hold: set each axis the key names to its steps (a held key repeats the same
        request, it does not keep adding)."""
        if self.mode is DriveMode.HOLD:
            return self._set(speed_steps * self.speed_step_mps if speed_steps else self.v_mps,
                             turn_steps * self.turn_step_radps if turn_steps else self.omega_radps, now_s)
        return self._set(
            self.v_mps + speed_steps * self.speed_step_mps, self.omega_radps + turn_steps * self.turn_step_radps, now_s
        )

    def key(self, name: str, now_s: float) -> None:
        """A driving key arrived (before its change is applied): measures the repeat, refreshes a hold."""
        self.repeat.key(name, now_s)
        self._refreshed_s = now_s

    def set_exactly(self, v_mps: float, omega_radps: float, now_s: float) -> tuple[float, float]:
        """A typed setpoint: clamped to the envelope's top speeds like every request (the loop shapes it)."""
        return self._set(v_mps, omega_radps, now_s)

    def preset(self, fraction: float, now_s: float) -> tuple[float, float]:
        """Speed = fraction of the top speed, forward unless the request is already reversing."""
        if self.v_mps < 0.0:
            return self._set(-fraction * self.envelope.top_reverse_speed_mps, self.omega_radps, now_s)
        return self._set(fraction * self.envelope.top_speed_mps, self.omega_radps, now_s)

    def zero_speed(self, now_s: float) -> tuple[float, float]:
        return self._set(0.0, self.omega_radps, now_s)

    def centre_turn(self, now_s: float) -> tuple[float, float]:
        return self._set(self.v_mps, 0.0, now_s)

    def clear(self) -> None:
        """After a stop, a mode switch or (re-)arming: the request is zero and nothing is held."""
        self.v_mps = 0.0
        self.omega_radps = 0.0
        self._refreshed_s = None

    def expire(self, now_s: float) -> bool:
        """Hold mode: True once, when the deadman time ran out with a non-zero request (it is now zero)."""
        if self.mode is not DriveMode.HOLD or self._refreshed_s is None:
            return False
        if now_s - self._refreshed_s < self.repeat.release_after_s(self.deadman_s):
            return False
        held = self.request != (0.0, 0.0)
        self.clear()
        return held

    def hold_left_s(self, now_s: float) -> float | None:
        """Time until the hold runs out (None in latched mode or when nothing is held)."""
        if self.mode is not DriveMode.HOLD or self._refreshed_s is None or self.request == (0.0, 0.0):
            return None
        return max(0.0, self.repeat.release_after_s(self.deadman_s) - (now_s - self._refreshed_s))

    def held_for_s(self, now_s: float) -> float:
        """Time since the last driving key (the hold-released note)."""
        return 0.0 if self._refreshed_s is None else now_s - self._refreshed_s

    def present(self, now_s: float) -> None:
        """Any key: the operator is there (the loop gets the same news as its operator heartbeat)."""
        self._present_s = now_s

    def keepalive_left_s(self, now_s: float) -> float:
        """Latched mode: time left before the loop stops the robot for operator silence."""
        return self.keepalive_s - (now_s - self._present_s)

    def toggle_mode(self) -> DriveMode:
        self.mode = DriveMode.LATCHED if self.mode is DriveMode.HOLD else DriveMode.HOLD
        self.clear()
        return self.mode

    def scale_steps(self, coarser: bool) -> bool:
        """The next finer or coarser nudge steps of the 1-2-5 series, kept between 1/100 and 1/2 of the envelope;
        False when both steps are already at that end."""
        top, turn = self.envelope.top_speed_mps, self.envelope.top_turn_rate_radps
        before = (self.speed_step_mps, self.turn_step_radps)
        self.speed_step_mps = _within(step_in_series(self.speed_step_mps, coarser), top, self.speed_step_mps)
        self.turn_step_radps = _within(step_in_series(self.turn_step_radps, coarser), turn, self.turn_step_radps)
        return (self.speed_step_mps, self.turn_step_radps) != before

    def open_window(self, purpose: Confirm, now_s: float) -> None:
        """The arm key (or, after a link loss, the reconnect key) opens the window the confirm key must fall in;
        a new window replaces any other."""
        self._window = (purpose, now_s)

    def window_pending(self, purpose: Confirm, now_s: float) -> bool:
        return self._window is not None and self._window[0] is purpose and now_s - self._window[1] <= self.arm_window_s

    def confirm(self, purpose: Confirm, now_s: float) -> bool:
        """True when the confirm key came inside the window opened for `purpose`; the window closes either way."""
        pending = self.window_pending(purpose, now_s)
        if self._window is not None and self._window[0] is purpose:
            self._window = None
        return pending

    def cancel_window(self) -> None:
        self._window = None


def _within(step: float, top: float, current: float) -> float:
    """`step` when it lies between 1/100 and 1/2 of `top`, else the current step (the end of the range)."""
    return step if top / 100.0 - 1e-12 <= step <= top / 2.0 + 1e-12 else current
