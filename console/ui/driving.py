"""What the operator's keys mean, as a small state machine with no terminal in it (the app feeds it key events and
the loop clock's time; it answers with the request to send).

- Nudges add steps to the request, clamped to the envelope so a long key press never builds up a hidden excess.
- Presets set the speed to a fraction of the envelope's top speed in the current direction of travel.
- Hold mode: every driving key refreshes the request; with no driving key for `deadman_s` it falls to zero.
  Terminals send key presses and auto-repeats but (mostly) no releases, so "held" means "repeats keep arriving".
  The deadman time must be longer than a typical auto-repeat delay (~0.5 s before the first repeat).
- Latched mode: the request stays until changed, as long as the operator shows presence: some key (k is the one
  that changes nothing) at least every `keepalive_s`, or the loop brings the robot to a controlled stop (cause
  deadman). Hold mode needs no keep-alive: its own deadman already zeroes an unattended request.
- Arming is a two-key sequence: the arm key opens a short window, the confirm key inside it arms. Reopening a lost
  link is the same with the reconnect key.
"""

from __future__ import annotations

import enum
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
        return self._set(
            self.v_mps + speed_steps * self.speed_step_mps, self.omega_radps + turn_steps * self.turn_step_radps, now_s
        )

    def preset(self, fraction: float, now_s: float) -> tuple[float, float]:
        """Speed = fraction of the top speed, forward unless the request is already reversing."""
        if self.v_mps < 0.0:
            return self._set(-fraction * self.envelope.top_reverse_speed_mps, self.omega_radps, now_s)
        return self._set(fraction * self.envelope.top_speed_mps, self.omega_radps, now_s)

    def zero_speed(self, now_s: float) -> tuple[float, float]:
        return self._set(0.0, self.omega_radps, now_s)

    def centre_turn(self, now_s: float) -> tuple[float, float]:
        return self._set(self.v_mps, 0.0, now_s)

    def refresh(self, now_s: float) -> None:
        """A driving key repeated without changing anything (e.g. at a bound) still keeps a hold alive."""
        self._refreshed_s = now_s

    def clear(self) -> None:
        """After a stop, a mode switch or (re-)arming: the request is zero and nothing is held."""
        self.v_mps = 0.0
        self.omega_radps = 0.0
        self._refreshed_s = None

    def expire(self, now_s: float) -> bool:
        """Hold mode: True once, when the deadman time ran out with a non-zero request (it is now zero)."""
        if self.mode is not DriveMode.HOLD or self._refreshed_s is None:
            return False
        if now_s - self._refreshed_s < self.deadman_s:
            return False
        held = self.request != (0.0, 0.0)
        self.clear()
        return held

    def hold_left_s(self, now_s: float) -> float | None:
        """Time until the hold runs out (None in latched mode or when nothing is held)."""
        if self.mode is not DriveMode.HOLD or self._refreshed_s is None or self.request == (0.0, 0.0):
            return None
        return max(0.0, self.deadman_s - (now_s - self._refreshed_s))

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

    def scale_steps(self, factor: float) -> None:
        """Finer or coarser nudges, kept between 1/100 and 1/2 of the envelope."""
        top, turn = self.envelope.top_speed_mps, self.envelope.top_turn_rate_radps
        self.speed_step_mps = min(max(self.speed_step_mps * factor, top / 100.0), top / 2.0)
        self.turn_step_radps = min(max(self.turn_step_radps * factor, turn / 100.0), turn / 2.0)

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
